//! The audit trail: one row per change of the library or of the tokens, written by the
//! change's own transaction (so there is never a change without its row, nor a row without
//! its change). Read newest first, in pages.

use sqlx::{Any, Executor, Row};
use time::OffsetDateTime;
use uuid::Uuid;

use super::{Storage, StorageError, StorageResult};
use crate::access::Origin;
use crate::domain::{from_unix_ms, unix_ms, CalibrationId};

/// What was changed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AuditAction {
    /// A calibration measured on a beam photo was stored.
    Create,
    /// A calibration file was imported.
    Import,
    /// A correction of a calibration was stored (measured or imported).
    Supersede,
    /// A calibration was archived.
    Archive,
    /// An archived calibration was restored.
    Restore,
    /// A token was made.
    TokenCreate,
    /// A token was revoked.
    TokenRevoke,
}

impl AuditAction {
    /// Name as stored and as the API shows it.
    pub fn name(self) -> &'static str {
        match self {
            AuditAction::Create => "create",
            AuditAction::Import => "import",
            AuditAction::Supersede => "supersede",
            AuditAction::Archive => "archive",
            AuditAction::Restore => "restore",
            AuditAction::TokenCreate => "token_create",
            AuditAction::TokenRevoke => "token_revoke",
        }
    }
}

/// One row of the audit trail.
#[derive(Debug, Clone, PartialEq)]
pub struct AuditEvent {
    /// Its id (the tie-break of its place in the trail).
    pub id: String,
    /// When.
    pub at: OffsetDateTime,
    /// Who: a token name, "open mode", "command line" or "service start".
    pub actor: String,
    /// What (an [`AuditAction`] name).
    pub action: String,
    /// The calibration changed, if a calibration was.
    pub calibration_id: Option<String>,
    /// More about the change (the corrected calibration, the token's name and role).
    pub detail: String,
    /// The client's IP address, for changes made over HTTP.
    pub address: Option<String>,
}

/// Writes the audit row of a change inside the change's transaction `executor`.
pub async fn record<'c, E: Executor<'c, Database = Any>>(
    executor: E,
    origin: &Origin,
    action: AuditAction,
    calibration: Option<CalibrationId>,
    detail: &str,
) -> StorageResult<()> {
    sqlx::query(
        "INSERT INTO audit_events (id, at_ms, actor, action, calibration_id, detail, address) \
         VALUES ($1, $2, $3, $4, $5, $6, $7)",
    )
    .bind(Uuid::new_v4().to_string())
    .bind(unix_ms(OffsetDateTime::now_utc()))
    .bind(origin.actor.text())
    .bind(action.name())
    .bind(calibration.map(|c| c.to_string()))
    .bind(detail)
    .bind(origin.address.map(|a| a.to_string()))
    .execute(executor)
    .await?;
    Ok(())
}

/// Up to `limit` events, newest first, of one calibration or of all; after the event at
/// `after` (its time and id) when given.
pub async fn page(
    storage: &Storage,
    calibration: Option<CalibrationId>,
    after: Option<(OffsetDateTime, &str)>,
    limit: i64,
) -> StorageResult<Vec<AuditEvent>> {
    let (after_ms, after_id) = after.map_or((i64::MAX, ""), |(at, id)| (unix_ms(at), id));
    let rows = sqlx::query(
        "SELECT id, at_ms, actor, action, calibration_id, detail, address FROM audit_events \
         WHERE ($1 = '' OR calibration_id = $1) \
         AND (at_ms < $2 OR (at_ms = $2 AND id > $3)) \
         ORDER BY at_ms DESC, id LIMIT $4",
    )
    .bind(calibration.map_or(String::new(), |c| c.to_string()))
    .bind(after_ms)
    .bind(after_id)
    .bind(limit)
    .fetch_all(storage.pool())
    .await?;
    rows.iter()
        .map(|row| {
            Ok(AuditEvent {
                id: row.try_get("id")?,
                at: from_unix_ms(row.try_get("at_ms")?),
                actor: row.try_get("actor")?,
                action: row.try_get("action")?,
                calibration_id: row.try_get("calibration_id")?,
                detail: row.try_get("detail")?,
                address: row.try_get("address")?,
            })
        })
        .collect::<Result<_, sqlx::Error>>()
        .map_err(StorageError::from)
}
