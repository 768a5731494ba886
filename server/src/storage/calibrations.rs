//! Calibrations: immutable rows. A correction is a new row whose `supersedes` names the old
//! one; archiving hides a row from lists but never deletes it. Rows are unique by the SHA-256
//! of their table file, so importing the same table twice stores it once.

use isotint_core::stress::StressDefaults;
use isotint_core::{CalibrationMetadata, CalibrationTable, TableSource};
use sha2::{Digest, Sha256};
use sqlx::any::AnyRow;
use sqlx::{Any, Executor, Row};
use time::OffsetDateTime;

use super::audit::{self, AuditAction};
use super::{is_unique_violation, json_column, Storage, StorageError, StorageResult};
use crate::access::Origin;
use crate::domain::{from_unix_ms, unix_ms, CalibrationId};

/// What the service knows about a calibration apart from its table.
#[derive(Debug, Clone, PartialEq)]
pub struct CalibrationRow {
    /// Its id.
    pub id: CalibrationId,
    /// Descriptive metadata (from the table).
    pub metadata: CalibrationMetadata,
    /// `beam_photo` or `rendered`.
    pub source_kind: String,
    /// Order spacing of the table, fringes.
    pub order_step: f64,
    /// Largest order of the table, fringes.
    pub max_order: f64,
    /// Mean CIEDE2000 residual of a beam calibration.
    pub residual_de2000: Option<f64>,
    /// When the table was made.
    pub created_at: OffsetDateTime,
    /// The calibration this one corrects.
    pub supersedes: Option<CalibrationId>,
    /// The calibration that corrects this one.
    pub superseded_by: Option<CalibrationId>,
    /// Hidden from lists.
    pub archived: bool,
    /// The stress inputs the calibration was made for (columns of migration 0007).
    pub stress_defaults: StressDefaults,
}

/// A file of the calibration-sets directory being imported.
#[derive(Debug, Clone)]
pub struct ImportedFile<'a> {
    /// File name, for the record.
    pub name: &'a str,
    /// SHA-256 (hex) of the file's bytes.
    pub sha256: &'a str,
}

/// Result of [`insert`].
#[derive(Debug, Clone)]
pub struct Inserted {
    /// The stored row (the existing one if the same table was stored before).
    pub row: CalibrationRow,
    /// Whether a new row was written.
    pub created: bool,
}

/// Filter of [`list`].
#[derive(Debug, Clone, Default)]
pub struct ListFilter {
    /// Case-insensitive text matched against name, material, light source and camera.
    pub text: Option<String>,
    /// Include archived calibrations.
    pub include_archived: bool,
}

const SUMMARY_COLUMNS: &str = "c.id, c.metadata_json, c.source_kind, c.order_step, \
     c.max_order, c.residual_de2000, c.created_at_ms, c.supersedes, c.archived, \
     c.fringe_value_n_per_mm, c.thickness_mm, \
     (SELECT s.id FROM calibrations s WHERE s.supersedes = c.id) AS superseded_by";

/// SHA-256 (hex) of some bytes.
pub fn sha256_hex(bytes: &[u8]) -> String {
    hex::encode(Sha256::digest(bytes))
}

fn source_kind(source: &TableSource) -> &'static str {
    match source {
        TableSource::BeamPhoto { .. } => "beam_photo",
        TableSource::Rendered { .. } => "rendered",
    }
}

/// The calibration id in a nullable text column.
pub(super) fn parse_id(row: &AnyRow, column: &str) -> StorageResult<Option<CalibrationId>> {
    let text: Option<String> = row.try_get(column)?;
    text.map(|t| {
        t.parse()
            .map_err(|e| StorageError::Corrupt(format!("{column}: {e}")))
    })
    .transpose()
}

fn summary_from_row(row: &AnyRow) -> StorageResult<CalibrationRow> {
    Ok(CalibrationRow {
        id: parse_id(row, "id")?.ok_or_else(|| StorageError::Corrupt("id is null".into()))?,
        metadata: json_column(row, "metadata_json")?,
        source_kind: row.try_get("source_kind")?,
        order_step: row.try_get("order_step")?,
        max_order: row.try_get("max_order")?,
        residual_de2000: row.try_get("residual_de2000")?,
        created_at: from_unix_ms(row.try_get("created_at_ms")?),
        supersedes: parse_id(row, "supersedes")?,
        superseded_by: parse_id(row, "superseded_by")?,
        archived: row.try_get::<i64, _>("archived")? != 0,
        stress_defaults: StressDefaults {
            fringe_value_n_per_mm: row.try_get("fringe_value_n_per_mm")?,
            thickness_mm: row.try_get("thickness_mm")?,
        },
    })
}

fn not_found(id: CalibrationId) -> StorageError {
    StorageError::NotFound {
        what: "calibration",
        id: id.to_string(),
    }
}

async fn fetch_row<'c, E: Executor<'c, Database = Any>>(
    executor: E,
    id: CalibrationId,
) -> StorageResult<CalibrationRow> {
    let sql = format!("SELECT {SUMMARY_COLUMNS} FROM calibrations c WHERE c.id = $1");
    let row = sqlx::query(&sql)
        .bind(id.to_string())
        .fetch_optional(executor)
        .await?
        .ok_or_else(|| not_found(id))?;
    summary_from_row(&row)
}

/// The chain of corrections from `id`: `id`, the calibration that corrects it, the one that
/// corrects that, and so on; empty when `id` is not stored.
async fn correction_chain<'c, E: Executor<'c, Database = Any>>(
    executor: E,
    id: CalibrationId,
) -> StorageResult<Vec<CalibrationId>> {
    let ids: Vec<String> = sqlx::query_scalar(
        "WITH RECURSIVE chain (id, depth) AS ( \
             SELECT id, 0 FROM calibrations WHERE id = $1 \
             UNION ALL \
             SELECT c.id, chain.depth + 1 FROM calibrations c JOIN chain ON c.supersedes = chain.id \
         ) SELECT id FROM chain ORDER BY depth",
    )
    .bind(id.to_string())
    .fetch_all(executor)
    .await?;
    ids.iter()
        .map(|t| {
            t.parse()
                .map_err(|e| StorageError::Corrupt(format!("id: {e}")))
        })
        .collect()
}

/// Checks that `id` may be corrected: it is stored and nothing corrects it yet. Otherwise
/// [`StorageError::NotFound`], or [`StorageError::Superseded`] naming the latest version of its
/// chain of corrections.
async fn check_correctable<'c, E: Executor<'c, Database = Any>>(
    executor: E,
    id: CalibrationId,
) -> StorageResult<()> {
    match correction_chain(executor, id).await?.as_slice() {
        [] => Err(not_found(id)),
        [_] => Ok(()),
        [_, by, .., latest] | [_, by @ latest] => Err(StorageError::Superseded {
            id,
            by: *by,
            latest: *latest,
        }),
    }
}

/// Checks, before any work, that a correction of `id` could be stored now (see [`insert`]).
pub async fn correctable(storage: &Storage, id: CalibrationId) -> StorageResult<()> {
    check_correctable(storage.pool(), id).await
}

/// A calibration row to write: a new one (stored now, listed) or one restored from a backup
/// (with its own id, time of storing and archived state).
pub(super) struct NewRow<'a> {
    /// Its id.
    pub id: CalibrationId,
    /// The table, parsed.
    pub table: &'a CalibrationTable,
    /// The table file, byte for byte.
    pub table_json: &'a str,
    /// SHA-256 (hex) of `table_json`.
    pub content_sha256: &'a str,
    /// The calibration it corrects.
    pub supersedes: Option<CalibrationId>,
    /// When it was stored.
    pub stored_at: OffsetDateTime,
    /// Hidden from lists.
    pub archived: bool,
}

/// Writes `row` unless a row with the same table file is stored; whether it wrote one.
pub(super) async fn insert_row<'c, E: Executor<'c, Database = Any>>(
    executor: E,
    row: &NewRow<'_>,
) -> StorageResult<bool> {
    let table = row.table;
    let residual = match &table.source {
        TableSource::BeamPhoto {
            residual_de2000, ..
        } => Some(*residual_de2000),
        TableSource::Rendered { .. } => None,
    };
    let metadata_json = serde_json::to_string(&table.metadata)
        .map_err(|e| StorageError::Corrupt(format!("metadata: {e}")))?;
    let defaults = table.stress_defaults();
    // The residual (and so the stress defaults) is bound as a number always, with $17 saying whether there is one: sqlx
    // 0.8's Any driver binds `None::<f64>` as a PostgreSQL float4 NULL, which types the
    // connection's prepared statement so that a later residual (float8) on that connection
    // fails with "incorrect binary data format in bind parameter 11".
    let result = sqlx::query(
        "INSERT INTO calibrations (id, name, material, light_source, camera, metadata_json, \
         table_json, source_kind, order_step, max_order, residual_de2000, created_at_ms, \
         stored_at_ms, supersedes, archived, content_sha256, fringe_value_n_per_mm, \
         thickness_mm, stress_defaults_filled) \
         VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, CASE WHEN $17 = 1 THEN $11 END, $12, \
         $13, $14, $15, $16, CASE WHEN $19 = 1 THEN $18 END, CASE WHEN $21 = 1 THEN $20 END, 1) \
         ON CONFLICT (content_sha256) DO NOTHING",
    )
    .bind(row.id.to_string())
    .bind(&table.metadata.name)
    .bind(&table.metadata.material)
    .bind(&table.metadata.light_source)
    .bind(&table.metadata.camera)
    .bind(metadata_json)
    .bind(row.table_json)
    .bind(source_kind(&table.source))
    .bind(table.order_step)
    .bind(table.max_order())
    .bind(residual.unwrap_or(0.0))
    .bind(unix_ms(table.created_at))
    .bind(unix_ms(row.stored_at))
    .bind(row.supersedes.map(|s| s.to_string()))
    .bind(i64::from(row.archived))
    .bind(row.content_sha256)
    .bind(i64::from(residual.is_some()))
    .bind(defaults.fringe_value_n_per_mm.unwrap_or(0.0))
    .bind(i64::from(defaults.fringe_value_n_per_mm.is_some()))
    .bind(defaults.thickness_mm.unwrap_or(0.0))
    .bind(i64::from(defaults.thickness_mm.is_some()))
    .execute(executor)
    .await?;
    Ok(result.rows_affected() == 1)
}

async fn id_by_content<'c, E: Executor<'c, Database = Any>>(
    executor: E,
    content_sha256: &str,
) -> StorageResult<CalibrationId> {
    let id: String = sqlx::query_scalar("SELECT id FROM calibrations WHERE content_sha256 = $1")
        .bind(content_sha256)
        .fetch_one(executor)
        .await?;
    id.parse()
        .map_err(|e| StorageError::Corrupt(format!("id: {e}")))
}

/// Records that `file` was imported as calibration `id` at `imported_at` (nothing if that file
/// was recorded before).
pub(super) async fn record_import<'c, E: Executor<'c, Database = Any>>(
    executor: E,
    file: &ImportedFile<'_>,
    id: CalibrationId,
    imported_at: OffsetDateTime,
) -> StorageResult<()> {
    sqlx::query(
        "INSERT INTO calibration_imports (file_sha256, file_name, calibration_id, imported_at_ms) \
         VALUES ($1, $2, $3, $4) ON CONFLICT (file_sha256) DO NOTHING",
    )
    .bind(file.sha256)
    .bind(file.name)
    .bind(id.to_string())
    .bind(unix_ms(imported_at))
    .execute(executor)
    .await?;
    Ok(())
}

/// Stores `table` whose file text is `table_json` (all or nothing, in one transaction); the text
/// is kept byte for byte for export. If the same file is stored already, returns that row with
/// `created: false`. `supersedes` must name an existing calibration that no other calibration
/// corrects yet; otherwise the error names the latest version of its chain of corrections. `file` records an import from the calibration-sets directory in the same
/// transaction. A new row is written to the audit trail in the same transaction too, as
/// `action` (create or import) of `origin`, or as a supersede when `supersedes` is given.
pub async fn insert(
    storage: &Storage,
    table: &CalibrationTable,
    table_json: &str,
    supersedes: Option<CalibrationId>,
    file: Option<ImportedFile<'_>>,
    (origin, action): (&Origin, AuditAction),
) -> StorageResult<Inserted> {
    let content = sha256_hex(table_json.as_bytes());
    let mut tx = storage.writer().begin().await?;
    if let Some(old) = supersedes {
        check_correctable(&mut *tx, old).await?;
    }
    let id = CalibrationId::random();
    let new_row = NewRow {
        id,
        table,
        table_json,
        content_sha256: &content,
        supersedes,
        stored_at: OffsetDateTime::now_utc(),
        archived: false,
    };
    let created = insert_row(&mut *tx, &new_row).await.map_err(|e| match e {
        StorageError::Database(ref db) if is_unique_violation(db) => StorageError::Conflict(
            "the calibration named in supersedes was superseded meanwhile".into(),
        ),
        other => other,
    })?;
    let stored_id = if created {
        id
    } else {
        id_by_content(&mut *tx, &content).await?
    };
    if let Some(file) = &file {
        record_import(&mut *tx, file, stored_id, OffsetDateTime::now_utc()).await?;
    }
    if created {
        let (action, detail) = match supersedes {
            Some(old) => (
                AuditAction::Supersede,
                format!("corrects {old} ({})", action.name()),
            ),
            None => (action, String::new()),
        };
        audit::record(&mut *tx, origin, action, Some(id), &detail).await?;
    }
    let row = fetch_row(&mut *tx, stored_id).await?;
    tx.commit().await?;
    Ok(Inserted { row, created })
}

/// The calibration imported from a file with this SHA-256, if that file was imported before.
pub async fn imported_file(
    storage: &Storage,
    file_sha256: &str,
) -> StorageResult<Option<CalibrationId>> {
    let id: Option<String> =
        sqlx::query_scalar("SELECT calibration_id FROM calibration_imports WHERE file_sha256 = $1")
            .bind(file_sha256)
            .fetch_optional(storage.pool())
            .await?;
    id.map(|t| {
        t.parse()
            .map_err(|e| StorageError::Corrupt(format!("calibration_id: {e}")))
    })
    .transpose()
}

/// One calibration's summary.
pub async fn get(storage: &Storage, id: CalibrationId) -> StorageResult<CalibrationRow> {
    fetch_row(storage.pool(), id).await
}

/// The stored table file, byte for byte as written or imported.
pub async fn table_json(storage: &Storage, id: CalibrationId) -> StorageResult<String> {
    sqlx::query_scalar("SELECT table_json FROM calibrations WHERE id = $1")
        .bind(id.to_string())
        .fetch_optional(storage.pool())
        .await?
        .ok_or_else(|| not_found(id))
}

/// Fills the stress-input columns of calibrations stored before migration 0007 from their
/// tables (none for a table that cannot be read); how many rows it filled.
pub(super) async fn fill_stress_defaults(storage: &Storage) -> StorageResult<u64> {
    let rows: Vec<(String, String)> =
        sqlx::query_as("SELECT id, table_json FROM calibrations WHERE stress_defaults_filled = 0")
            .fetch_all(storage.pool())
            .await?;
    for (id, json) in &rows {
        // A table that cannot be read (it would be refused wherever it is used) gives none.
        let defaults = match CalibrationTable::from_json(json.as_bytes()) {
            Ok(table) => table.stress_defaults(),
            Err(e) => {
                tracing::warn!(calibration = %id, error = %e, "stored table unreadable: no stress inputs");
                StressDefaults::default()
            }
        };
        // Numbers with 0/1 flags, as in `insert_row`.
        sqlx::query(
            "UPDATE calibrations SET fringe_value_n_per_mm = CASE WHEN $2 = 1 THEN $1 END, \
             thickness_mm = CASE WHEN $4 = 1 THEN $3 END, stress_defaults_filled = 1 \
             WHERE id = $5",
        )
        .bind(defaults.fringe_value_n_per_mm.unwrap_or(0.0))
        .bind(i64::from(defaults.fringe_value_n_per_mm.is_some()))
        .bind(defaults.thickness_mm.unwrap_or(0.0))
        .bind(i64::from(defaults.thickness_mm.is_some()))
        .bind(id)
        .execute(storage.writer())
        .await?;
    }
    Ok(rows.len() as u64)
}

/// The stress inputs calibration `id` was made for (the columns of migration 0007).
pub async fn stress_defaults(
    storage: &Storage,
    id: CalibrationId,
) -> StorageResult<StressDefaults> {
    let row =
        sqlx::query("SELECT fringe_value_n_per_mm, thickness_mm FROM calibrations WHERE id = $1")
            .bind(id.to_string())
            .fetch_optional(storage.pool())
            .await?
            .ok_or_else(|| not_found(id))?;
    Ok(StressDefaults {
        fringe_value_n_per_mm: row.try_get("fringe_value_n_per_mm")?,
        thickness_mm: row.try_get("thickness_mm")?,
    })
}

/// The stored table, parsed and validated.
pub async fn table(storage: &Storage, id: CalibrationId) -> StorageResult<CalibrationTable> {
    let json = table_json(storage, id).await?;
    CalibrationTable::from_json(json.as_bytes())
        .map_err(|e| StorageError::Corrupt(format!("calibration {id}: {e}")))
}

/// Escapes `%`, `_` and `\` so that `text` matches literally inside a LIKE pattern.
fn like_pattern(text: &str) -> String {
    let mut out = String::with_capacity(text.len() + 2);
    out.push('%');
    for c in text.to_lowercase().chars() {
        if matches!(c, '%' | '_' | '\\') {
            out.push('\\');
        }
        out.push(c);
    }
    out.push('%');
    out
}

/// The condition of [`ListFilter`] on `calibrations c`: `$1` include archived (0 or 1), `$2` the
/// search text, `$3` its LIKE pattern.
const FILTER: &str = "(c.archived = 0 OR $1 = 1) \
     AND ($2 = '' OR LOWER(c.name) LIKE $3 ESCAPE '\\' OR LOWER(c.material) LIKE $3 ESCAPE '\\' \
          OR LOWER(c.light_source) LIKE $3 ESCAPE '\\' OR LOWER(c.camera) LIKE $3 ESCAPE '\\')";

/// `sql` (whose condition starts with [`FILTER`]) with the filter's three parameters bound.
fn bind_filter<'q>(
    sql: &'q str,
    filter: &ListFilter,
) -> sqlx::query::Query<'q, Any, sqlx::any::AnyArguments<'q>> {
    let text = filter.text.clone().unwrap_or_default();
    let pattern = like_pattern(&text);
    sqlx::query(sql)
        .bind(i64::from(filter.include_archived))
        .bind(text)
        .bind(pattern)
}

/// Up to `limit` calibrations matching `filter`, newest first by the time their table was made
/// (ties by id); after the calibration at `after` (its time and id) when given. Paging on this
/// order never repeats nor skips a row, whatever is stored between pages.
pub async fn list(
    storage: &Storage,
    filter: &ListFilter,
    after: Option<(OffsetDateTime, &str)>,
    limit: i64,
) -> StorageResult<Vec<CalibrationRow>> {
    let (after_ms, after_id) = after.map_or((i64::MAX, ""), |(at, id)| (unix_ms(at), id));
    let sql = format!(
        "SELECT {SUMMARY_COLUMNS} FROM calibrations c WHERE {FILTER} \
         AND (c.created_at_ms < $4 OR (c.created_at_ms = $4 AND c.id > $5)) \
         ORDER BY c.created_at_ms DESC, c.id LIMIT $6"
    );
    let rows = bind_filter(&sql, filter)
        .bind(after_ms)
        .bind(after_id)
        .bind(limit)
        .fetch_all(storage.pool())
        .await?;
    rows.iter().map(summary_from_row).collect()
}

/// How many calibrations match `filter`.
pub async fn count(storage: &Storage, filter: &ListFilter) -> StorageResult<i64> {
    let sql = format!("SELECT COUNT(*) AS n FROM calibrations c WHERE {FILTER}");
    let row = bind_filter(&sql, filter).fetch_one(storage.pool()).await?;
    Ok(row.try_get("n")?)
}

/// Archives (`true`) or restores (`false`) a calibration, with its audit row in the same
/// transaction; returns its new summary.
pub async fn set_archived(
    storage: &Storage,
    id: CalibrationId,
    archived: bool,
    origin: &Origin,
) -> StorageResult<CalibrationRow> {
    let mut tx = storage.writer().begin().await?;
    let result = sqlx::query("UPDATE calibrations SET archived = $1 WHERE id = $2")
        .bind(i64::from(archived))
        .bind(id.to_string())
        .execute(&mut *tx)
        .await?;
    if result.rows_affected() == 0 {
        return Err(not_found(id));
    }
    let action = if archived {
        AuditAction::Archive
    } else {
        AuditAction::Restore
    };
    audit::record(&mut *tx, origin, action, Some(id), "").await?;
    let row = fetch_row(&mut *tx, id).await?;
    tx.commit().await?;
    Ok(row)
}

#[cfg(test)]
mod tests {
    use super::like_pattern;

    #[test]
    fn like_wildcards_in_search_text_match_literally() {
        assert_eq!(like_pattern("A_b%"), "%a\\_b\\%%");
    }
}
