//! Order-map results, stored in the database (so that any replica can serve them) until they
//! expire. The pixels are kept in compact form (`isotint_core::compact`): one row of
//! `order_map_bands` per band of rows, so that a file of any map is streamed a band at a time.
//! Maps stored before bands existed (per-pixel float32 BLOBs in `order_maps`) are converted
//! when the service starts ([`convert_legacy`]).

use isotint_core::compact;
use isotint_core::exposure::ExposureCorrection;
use isotint_core::order_map::MapStatistics;
use isotint_core::specimen::MaskUsed;
use isotint_core::{OrderMap, PixelFlags};
use sqlx::any::AnyRow;
use sqlx::Row;
use time::OffsetDateTime;

use super::{json_column, Storage, StorageError, StorageResult};
use crate::domain::{from_unix_ms, unix_ms, CalibrationId, FileStem, OrderMapId};

/// Everything about a stored order map except its pixel arrays.
#[derive(Debug, Clone)]
pub struct OrderMapRow {
    /// Its id.
    pub id: OrderMapId,
    /// Calibration it was mapped with.
    pub calibration_id: CalibrationId,
    /// Width, pixels.
    pub width: u32,
    /// Height, pixels.
    pub height: u32,
    /// `MapStatistics` as JSON (NaN figures are `null`).
    pub statistics: serde_json::Value,
    /// The exposure correction applied.
    pub exposure: ExposureCorrection,
    /// The mask it used (`None` for maps stored before it was recorded).
    pub mask: Option<MaskUsed>,
    /// The stem its files are named by when a download asks for no name (from the photo's
    /// file name; `None` without one and for maps stored before it was recorded).
    pub file_stem: Option<FileStem>,
    /// When it was made.
    pub created_at: OffsetDateTime,
    /// When it stops being served.
    pub expires_at: OffsetDateTime,
}

const META_COLUMNS: &str =
    "id, calibration_id, width, height, statistics_json, exposure_json, mask_json, file_stem, \
     created_at_ms, expires_at_ms";

fn f32_values(column: &str, bytes: &[u8], pixels: usize) -> StorageResult<Vec<f32>> {
    if bytes.len() != pixels * 4 {
        return Err(StorageError::Corrupt(format!(
            "{column} holds {} bytes for {pixels} pixels",
            bytes.len()
        )));
    }
    Ok(bytes
        .chunks_exact(4)
        .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
        .collect())
}

fn corrupt_column(column: &str) -> impl Fn(isotint_core::CoreError) -> StorageError + '_ {
    move |e| StorageError::Corrupt(format!("{column}: {e}"))
}

fn meta_from_row(row: &AnyRow) -> StorageResult<OrderMapRow> {
    let dimension = |column: &str| -> StorageResult<u32> {
        u32::try_from(row.try_get::<i64, _>(column)?)
            .map_err(|_| StorageError::Corrupt(format!("{column} out of range")))
    };
    Ok(OrderMapRow {
        id: row
            .try_get::<String, _>("id")?
            .parse()
            .map_err(corrupt_column("id"))?,
        calibration_id: row
            .try_get::<String, _>("calibration_id")?
            .parse()
            .map_err(corrupt_column("calibration_id"))?,
        width: dimension("width")?,
        height: dimension("height")?,
        statistics: json_column(row, "statistics_json")?,
        exposure: json_column(row, "exposure_json")?,
        mask: row
            .try_get::<Option<String>, _>("mask_json")?
            .map(|text| serde_json::from_str(&text))
            .transpose()
            .map_err(|e| StorageError::Corrupt(format!("mask_json: {e}")))?,
        file_stem: row
            .try_get::<Option<String>, _>("file_stem")?
            .map(|text| FileStem::parse(&text))
            .transpose()
            .map_err(corrupt_column("file_stem"))?,
        created_at: from_unix_ms(row.try_get("created_at_ms")?),
        expires_at: from_unix_ms(row.try_get("expires_at_ms")?),
    })
}

/// Stores a finished map, the mask it used and the stem its files are named by, the map given
/// in compact form as `bands` (from `compact::encode_map`), in one transaction, so never
/// half-written; returns its row.
pub async fn insert(
    storage: &Storage,
    calibration_id: CalibrationId,
    (map, mask): (&OrderMap, MaskUsed),
    file_stem: Option<&FileStem>,
    bands: &[Vec<u8>],
    retention: std::time::Duration,
) -> StorageResult<OrderMapRow> {
    let id = OrderMapId::random();
    let created_at = OffsetDateTime::now_utc();
    let expires_at = created_at + retention;
    let statistics = serde_json::to_value(map.statistics)
        .map_err(|e| StorageError::Corrupt(format!("statistics: {e}")))?;
    let mut tx = storage.writer().begin().await?;
    sqlx::query(
        "INSERT INTO order_maps (id, calibration_id, created_at_ms, expires_at_ms, width, height, \
         statistics_json, exposure_json, orders, residuals, margins, flags, band_rows, mask_json, \
         file_stem) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $9, $9, $9, $10, $11, $12)",
    )
    .bind(id.to_string())
    .bind(calibration_id.to_string())
    .bind(unix_ms(created_at))
    .bind(unix_ms(expires_at))
    .bind(i64::from(map.width))
    .bind(i64::from(map.height))
    .bind(statistics.to_string())
    .bind(serde_json::to_string(&map.exposure).unwrap_or_default())
    .bind(Vec::<u8>::new())
    .bind(i64::from(compact::BAND_ROWS))
    .bind(serde_json::to_string(&mask).unwrap_or_default())
    .bind(file_stem.map(FileStem::as_str))
    .execute(&mut *tx)
    .await?;
    insert_bands(&mut tx, id, bands).await?;
    tx.commit().await?;
    Ok(OrderMapRow {
        id,
        calibration_id,
        width: map.width,
        height: map.height,
        statistics,
        exposure: map.exposure,
        mask: Some(mask),
        file_stem: file_stem.cloned(),
        created_at,
        expires_at,
    })
}

async fn insert_bands(
    tx: &mut sqlx::Transaction<'static, sqlx::Any>,
    id: OrderMapId,
    bands: &[Vec<u8>],
) -> StorageResult<()> {
    for (index, data) in (0i64..).zip(bands) {
        sqlx::query("INSERT INTO order_map_bands (order_map_id, band, data) VALUES ($1, $2, $3)")
            .bind(id.to_string())
            .bind(index)
            .bind(data.as_slice())
            .execute(&mut **tx)
            .await?;
    }
    Ok(())
}

fn not_found(id: OrderMapId) -> StorageError {
    StorageError::NotFound {
        what: "order map",
        id: id.to_string(),
    }
}

/// A stored map's description (expired ones included until purged).
pub async fn get(storage: &Storage, id: OrderMapId) -> StorageResult<OrderMapRow> {
    let sql = format!("SELECT {META_COLUMNS} FROM order_maps WHERE id = $1");
    let row = sqlx::query(&sql)
        .bind(id.to_string())
        .fetch_optional(storage.pool())
        .await?
        .ok_or_else(|| not_found(id))?;
    meta_from_row(&row)
}

/// Reads a statistics figure that JSON stores as `null` when it is NaN.
fn figure(statistics: &serde_json::Value, key: &str) -> f64 {
    statistics
        .get(key)
        .and_then(serde_json::Value::as_f64)
        .unwrap_or(f64::NAN)
}

/// The summary figures of a stored map, from their JSON (missing or null figures are NaN).
pub fn statistics_from_json(s: &serde_json::Value) -> MapStatistics {
    let count = |key: &str| s.get(key).and_then(serde_json::Value::as_u64).unwrap_or(0);
    MapStatistics {
        specimen_pixels: count("specimen_pixels"),
        valued_pixels: count("valued_pixels"),
        beyond_range_share: figure(s, "beyond_range_share"),
        unreliable_share: figure(s, "unreliable_share"),
        min_order: figure(s, "min_order"),
        max_order: figure(s, "max_order"),
        mean_order: figure(s, "mean_order"),
        mean_residual: figure(s, "mean_residual"),
        table_max_order: figure(s, "table_max_order"),
        ambiguous_colour: s
            .get("ambiguous_colour")
            .and_then(serde_json::Value::as_bool)
            .unwrap_or(false),
    }
}

/// Band `index` of stored map `id`, in compact form (`compact::decode_band`).
pub async fn band(storage: &Storage, id: OrderMapId, index: u32) -> StorageResult<Vec<u8>> {
    let row = sqlx::query("SELECT data FROM order_map_bands WHERE order_map_id = $1 AND band = $2")
        .bind(id.to_string())
        .bind(i64::from(index))
        .fetch_optional(storage.pool())
        .await?
        .ok_or_else(|| not_found(id))?;
    Ok(row.try_get("data")?)
}

/// The whole stored map, read band by band (margins are not stored: NaN).
pub async fn load(storage: &Storage, id: OrderMapId) -> StorageResult<(OrderMapRow, OrderMap)> {
    let meta = get(storage, id).await?;
    let mut bands = Vec::new();
    for index in 0..compact::band_count(meta.height) {
        bands.push(band(storage, id, index).await?);
    }
    let (width, height) = (meta.width, meta.height);
    let (exposure, statistics) = (meta.exposure, statistics_from_json(&meta.statistics));
    let map = compact::decode_map(&bands, width, height, exposure, statistics)
        .map_err(|e| StorageError::Corrupt(format!("order map {id}: {e}")))?;
    Ok((meta, map))
}

/// A map stored before bands existed, from its per-pixel float32 BLOBs (NULL uncertainties
/// read as NaN).
async fn load_legacy(storage: &Storage, id: OrderMapId) -> StorageResult<OrderMap> {
    let sql = format!(
        "SELECT {META_COLUMNS}, orders, residuals, margins, flags, uncertainties FROM order_maps \
         WHERE id = $1"
    );
    let row = sqlx::query(&sql)
        .bind(id.to_string())
        .fetch_optional(storage.pool())
        .await?
        .ok_or_else(|| not_found(id))?;
    let meta = meta_from_row(&row)?;
    let pixels = meta.width as usize * meta.height as usize;
    let blob = |column: &str| -> StorageResult<Vec<u8>> { Ok(row.try_get(column)?) };
    let flags = blob("flags")?;
    if flags.len() != pixels {
        return Err(StorageError::Corrupt(format!(
            "flags holds {} bytes for {pixels} pixels",
            flags.len()
        )));
    }
    Ok(OrderMap {
        width: meta.width,
        height: meta.height,
        order: f32_values("orders", &blob("orders")?, pixels)?,
        residual: f32_values("residuals", &blob("residuals")?, pixels)?,
        margin: f32_values("margins", &blob("margins")?, pixels)?,
        flags: flags.into_iter().map(PixelFlags).collect(),
        uncertainty: match row.try_get::<Option<Vec<u8>>, _>("uncertainties")? {
            Some(bytes) => f32_values("uncertainties", &bytes, pixels)?,
            None => vec![f32::NAN; pixels],
        },
        exposure: meta.exposure,
        statistics: statistics_from_json(&meta.statistics),
    })
}

/// Converts every map stored before bands existed into bands, one map at a time, each in one
/// transaction (its bands written, its old arrays emptied); returns how many.
pub async fn convert_legacy(storage: &Storage) -> StorageResult<u64> {
    let ids: Vec<String> = sqlx::query("SELECT id FROM order_maps WHERE band_rows = 0")
        .fetch_all(storage.pool())
        .await?
        .iter()
        .map(|row| row.try_get("id"))
        .collect::<Result<_, _>>()?;
    for id in &ids {
        let id: OrderMapId = id.parse().map_err(corrupt_column("id"))?;
        let map = load_legacy(storage, id).await?;
        let bands = tokio::task::spawn_blocking(move || compact::encode_map(&map))
            .await
            .map_err(|e| StorageError::Corrupt(format!("compacting order map {id}: {e}")))?
            .map_err(|e| StorageError::Corrupt(format!("compacting order map {id}: {e}")))?;
        let mut tx = storage.writer().begin().await?;
        insert_bands(&mut tx, id, &bands).await?;
        sqlx::query(
            "UPDATE order_maps SET band_rows = $1, orders = $2, residuals = $2, margins = $2, \
             flags = $2, uncertainties = NULL WHERE id = $3",
        )
        .bind(i64::from(compact::BAND_ROWS))
        .bind(Vec::<u8>::new())
        .bind(id.to_string())
        .execute(&mut *tx)
        .await?;
        tx.commit().await?;
    }
    Ok(ids.len() as u64)
}

/// Deletes maps that expired before `now`; returns how many.
pub async fn purge_expired(storage: &Storage, now: OffsetDateTime) -> StorageResult<u64> {
    let mut tx = storage.writer().begin().await?;
    sqlx::query(
        "DELETE FROM order_map_bands WHERE order_map_id IN \
         (SELECT id FROM order_maps WHERE expires_at_ms < $1)",
    )
    .bind(unix_ms(now))
    .execute(&mut *tx)
    .await?;
    let result = sqlx::query("DELETE FROM order_maps WHERE expires_at_ms < $1")
        .bind(unix_ms(now))
        .execute(&mut *tx)
        .await?;
    tx.commit().await?;
    Ok(result.rows_affected())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn null_statistics_figures_read_back_as_nan() {
        let s = serde_json::json!({"specimen_pixels": 4, "valued_pixels": 0, "min_order": null,
            "max_order": null, "mean_order": null, "mean_residual": null,
            "beyond_range_share": 0.0, "unreliable_share": 1.0});
        let back = statistics_from_json(&s);
        assert_eq!(back.specimen_pixels, 4);
        assert!(back.max_order.is_nan());
        assert_eq!(back.unreliable_share, 1.0);
    }
}
