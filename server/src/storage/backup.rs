//! The statements of `isotint backup` and `isotint restore` (the file format is in
//! `crate::backup`): a backup reads the whole library in one read-only snapshot, a restore
//! writes it back, ids and times as they were, in one transaction that first checks the
//! database is empty.

use serde::{Deserialize, Serialize};
use sqlx::any::AnyRow;
use sqlx::{Any, Row, Transaction};
use time::OffsetDateTime;

use super::audit::{self, AuditEvent, EVENT_COLUMNS};
use super::calibrations::{self, parse_id, ImportedFile, NewRow};
use super::tokens::parsed;
use super::{Backend, Storage, StorageError, StorageResult};
use crate::access::{Role, TokenName};
use crate::domain::{from_unix_ms, unix_ms, CalibrationId};
use isotint_core::CalibrationTable;

/// One stored calibration as a backup holds it: its table file and what the file does not say.
#[derive(Debug, Clone, PartialEq)]
pub struct StoredCalibration {
    /// Its id.
    pub id: CalibrationId,
    /// The table file, byte for byte as stored.
    pub table_json: String,
    /// The calibration it corrects.
    pub supersedes: Option<CalibrationId>,
    /// Hidden from lists.
    pub archived: bool,
    /// When it was stored (to the millisecond).
    pub stored_at: OffsetDateTime,
}

/// A token as a backup holds it: never the token, only its SHA-256; not when it was last used
/// (which changes with every use and is not part of the library).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TokenRecord {
    /// Its name.
    pub name: TokenName,
    /// What it may do.
    pub role: Role,
    /// SHA-256 (hex) of the token.
    pub token_sha256: String,
    /// When it was made (RFC 3339, to the millisecond).
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
    /// When it was revoked.
    #[serde(with = "time::serde::rfc3339::option")]
    pub revoked_at: Option<OffsetDateTime>,
}

/// A file of the calibration-sets directory once imported (so a service start does not import
/// it again).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ImportRecord {
    /// SHA-256 (hex) of the file's bytes.
    pub file_sha256: String,
    /// Its file name.
    pub file_name: String,
    /// The calibration it was stored as.
    pub calibration_id: CalibrationId,
    /// When (RFC 3339, to the millisecond).
    #[serde(with = "time::serde::rfc3339")]
    pub imported_at: OffsetDateTime,
}

/// How many rows of each kind a database holds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct Contents {
    /// Calibrations.
    pub calibrations: i64,
    /// Rows of the audit trail.
    pub audit_events: i64,
    /// Tokens, revoked ones too.
    pub tokens: i64,
    /// Imported calibration-set files.
    pub imports: i64,
}

impl Contents {
    /// Whether nothing of the library is stored.
    pub fn is_empty(&self) -> bool {
        *self == Contents::default()
    }
}

/// A read-only transaction that sees one consistent state of the whole database (repeatable
/// read on PostgreSQL; on SQLite every read transaction does).
pub async fn snapshot(storage: &Storage) -> StorageResult<Transaction<'static, Any>> {
    let mut tx = storage.pool().begin().await?;
    if storage.backend() == Backend::Postgres {
        sqlx::query("SET TRANSACTION ISOLATION LEVEL REPEATABLE READ READ ONLY")
            .execute(&mut *tx)
            .await?;
    }
    Ok(tx)
}

/// How many rows of each kind the database holds.
pub async fn contents(tx: &mut Transaction<'static, Any>) -> StorageResult<Contents> {
    let row = sqlx::query(
        "SELECT (SELECT COUNT(*) FROM calibrations) AS calibrations, \
         (SELECT COUNT(*) FROM audit_events) AS audit_events, \
         (SELECT COUNT(*) FROM api_tokens) AS tokens, \
         (SELECT COUNT(*) FROM calibration_imports) AS imports",
    )
    .fetch_one(&mut **tx)
    .await?;
    Ok(Contents {
        calibrations: row.try_get("calibrations")?,
        audit_events: row.try_get("audit_events")?,
        tokens: row.try_get("tokens")?,
        imports: row.try_get("imports")?,
    })
}

/// The calibration id in a text column that may not be null.
fn id_column(row: &AnyRow, column: &str) -> StorageResult<CalibrationId> {
    parse_id(row, column)?.ok_or_else(|| StorageError::Corrupt(format!("{column} is null")))
}

/// Up to `limit` calibrations in order of id, after the id `after` (`""` for the first page).
pub async fn calibration_page(
    tx: &mut Transaction<'static, Any>,
    after: &str,
    limit: i64,
) -> StorageResult<Vec<StoredCalibration>> {
    let rows = sqlx::query(
        "SELECT id, table_json, supersedes, archived, stored_at_ms FROM calibrations \
         WHERE id > $1 ORDER BY id LIMIT $2",
    )
    .bind(after)
    .bind(limit)
    .fetch_all(&mut **tx)
    .await?;
    rows.iter()
        .map(|row| {
            Ok(StoredCalibration {
                id: id_column(row, "id")?,
                table_json: row.try_get("table_json")?,
                supersedes: parse_id(row, "supersedes")?,
                archived: row.try_get::<i64, _>("archived")? != 0,
                stored_at: from_unix_ms(row.try_get("stored_at_ms")?),
            })
        })
        .collect()
}

/// The whole audit trail, oldest first (ties by id as the database orders them).
pub async fn audit_trail(tx: &mut Transaction<'static, Any>) -> StorageResult<Vec<AuditEvent>> {
    let sql = format!("SELECT {EVENT_COLUMNS} FROM audit_events ORDER BY at_ms, id");
    let rows = sqlx::query(&sql).fetch_all(&mut **tx).await?;
    rows.iter().map(audit::event_from_row).collect()
}

/// Every token, revoked ones too.
pub async fn tokens(tx: &mut Transaction<'static, Any>) -> StorageResult<Vec<TokenRecord>> {
    let rows = sqlx::query(
        "SELECT name, role, token_sha256, created_at_ms, revoked_at_ms FROM api_tokens",
    )
    .fetch_all(&mut **tx)
    .await?;
    rows.iter()
        .map(|row| {
            Ok(TokenRecord {
                name: parsed(row, "name")?,
                role: parsed(row, "role")?,
                token_sha256: row.try_get("token_sha256")?,
                created_at: from_unix_ms(row.try_get("created_at_ms")?),
                revoked_at: row
                    .try_get::<Option<i64>, _>("revoked_at_ms")?
                    .map(from_unix_ms),
            })
        })
        .collect()
}

/// Every imported calibration-set file.
pub async fn imports(tx: &mut Transaction<'static, Any>) -> StorageResult<Vec<ImportRecord>> {
    let rows = sqlx::query(
        "SELECT file_sha256, file_name, calibration_id, imported_at_ms FROM calibration_imports",
    )
    .fetch_all(&mut **tx)
    .await?;
    rows.iter()
        .map(|row| {
            Ok(ImportRecord {
                file_sha256: row.try_get("file_sha256")?,
                file_name: row.try_get("file_name")?,
                calibration_id: id_column(row, "calibration_id")?,
                imported_at: from_unix_ms(row.try_get("imported_at_ms")?),
            })
        })
        .collect()
}

/// The write transaction of a restore.
pub async fn begin_restore(storage: &Storage) -> StorageResult<Transaction<'static, Any>> {
    Ok(storage.writer().begin().await?)
}

/// Writes a calibration of a backup with its id, time of storing and archived state; the one it
/// corrects must be written before it. `table` is `calibration.table_json` parsed, and
/// `content_sha256` the file's SHA-256.
pub async fn restore_calibration(
    tx: &mut Transaction<'static, Any>,
    calibration: &StoredCalibration,
    table: &CalibrationTable,
    content_sha256: &str,
) -> StorageResult<()> {
    let row = NewRow {
        id: calibration.id,
        table,
        table_json: &calibration.table_json,
        content_sha256,
        supersedes: calibration.supersedes,
        stored_at: calibration.stored_at,
        archived: calibration.archived,
    };
    if calibrations::insert_row(&mut **tx, &row).await? {
        Ok(())
    } else {
        Err(StorageError::Conflict(format!(
            "calibration {}: the same table file is stored already",
            calibration.id
        )))
    }
}

/// Writes a row of a backup's audit trail as it is.
pub async fn restore_audit_event(
    tx: &mut Transaction<'static, Any>,
    event: &AuditEvent,
) -> StorageResult<()> {
    audit::insert(&mut **tx, event).await
}

/// Writes a token of a backup as it is (never used since the restore).
pub async fn restore_token(
    tx: &mut Transaction<'static, Any>,
    token: &TokenRecord,
) -> StorageResult<()> {
    sqlx::query(
        "INSERT INTO api_tokens (name, role, token_sha256, created_at_ms, revoked_at_ms) \
         VALUES ($1, $2, $3, $4, $5)",
    )
    .bind(token.name.as_str())
    .bind(token.role.name())
    .bind(&token.token_sha256)
    .bind(unix_ms(token.created_at))
    .bind(token.revoked_at.map(unix_ms))
    .execute(&mut **tx)
    .await?;
    Ok(())
}

/// Writes a backup's record of an imported calibration-set file.
pub async fn restore_import(
    tx: &mut Transaction<'static, Any>,
    import: &ImportRecord,
) -> StorageResult<()> {
    let file = ImportedFile {
        name: &import.file_name,
        sha256: &import.file_sha256,
    };
    calibrations::record_import(&mut **tx, &file, import.calibration_id, import.imported_at).await
}
