//! Order-map results, stored in the database (so that any replica can serve them) until they
//! expire. Per-pixel arrays are BLOBs: little-endian float32 for orders, residuals, margins and
//! uncertainties, one byte per pixel for flags. Maps stored before the uncertainty column
//! existed (NULL there) read back with an all-NaN uncertainty.

use isotint_core::exposure::ExposureCorrection;
use isotint_core::order_map::MapStatistics;
use isotint_core::{OrderMap, PixelFlags};
use sqlx::any::AnyRow;
use sqlx::Row;
use time::OffsetDateTime;

use super::{json_column, Storage, StorageError, StorageResult};
use crate::domain::{from_unix_ms, unix_ms, CalibrationId, OrderMapId};

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
    /// When it was made.
    pub created_at: OffsetDateTime,
    /// When it stops being served.
    pub expires_at: OffsetDateTime,
}

const META_COLUMNS: &str =
    "id, calibration_id, width, height, statistics_json, exposure_json, created_at_ms, expires_at_ms";

fn f32_bytes(values: &[f32]) -> Vec<u8> {
    values.iter().flat_map(|v| v.to_le_bytes()).collect()
}

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

fn corrupt_id(column: &str) -> impl Fn(isotint_core::CoreError) -> StorageError + '_ {
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
            .map_err(corrupt_id("id"))?,
        calibration_id: row
            .try_get::<String, _>("calibration_id")?
            .parse()
            .map_err(corrupt_id("calibration_id"))?,
        width: dimension("width")?,
        height: dimension("height")?,
        statistics: json_column(row, "statistics_json")?,
        exposure: json_column(row, "exposure_json")?,
        created_at: from_unix_ms(row.try_get("created_at_ms")?),
        expires_at: from_unix_ms(row.try_get("expires_at_ms")?),
    })
}

/// Stores a finished map (one INSERT, so never half-written); returns its row.
pub async fn insert(
    storage: &Storage,
    calibration_id: CalibrationId,
    map: &OrderMap,
    retention: std::time::Duration,
) -> StorageResult<OrderMapRow> {
    let id = OrderMapId::random();
    let created_at = OffsetDateTime::now_utc();
    let expires_at = created_at + retention;
    let statistics = serde_json::to_value(map.statistics)
        .map_err(|e| StorageError::Corrupt(format!("statistics: {e}")))?;
    let flags: Vec<u8> = map.flags.iter().map(|f| f.0).collect();
    sqlx::query(
        "INSERT INTO order_maps (id, calibration_id, created_at_ms, expires_at_ms, width, height, \
         statistics_json, exposure_json, orders, residuals, margins, flags, uncertainties) \
         VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13)",
    )
    .bind(id.to_string())
    .bind(calibration_id.to_string())
    .bind(unix_ms(created_at))
    .bind(unix_ms(expires_at))
    .bind(i64::from(map.width))
    .bind(i64::from(map.height))
    .bind(statistics.to_string())
    .bind(serde_json::to_string(&map.exposure).unwrap_or_default())
    .bind(f32_bytes(&map.order))
    .bind(f32_bytes(&map.residual))
    .bind(f32_bytes(&map.margin))
    .bind(flags)
    .bind(f32_bytes(&map.uncertainty))
    .execute(storage.writer())
    .await?;
    Ok(OrderMapRow {
        id,
        calibration_id,
        width: map.width,
        height: map.height,
        statistics,
        exposure: map.exposure,
        created_at,
        expires_at,
    })
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
    }
}

/// The whole stored map, pixel arrays included, ready for `export::encode`.
pub async fn load(storage: &Storage, id: OrderMapId) -> StorageResult<(OrderMapRow, OrderMap)> {
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
    let map = OrderMap {
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
    };
    Ok((meta, map))
}

/// Deletes maps that expired before `now`; returns how many.
pub async fn purge_expired(storage: &Storage, now: OffsetDateTime) -> StorageResult<u64> {
    let result = sqlx::query("DELETE FROM order_maps WHERE expires_at_ms < $1")
        .bind(unix_ms(now))
        .execute(storage.writer())
        .await?;
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
