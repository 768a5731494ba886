//! The audit trail: one row per change of the library or of the tokens, written by the
//! change's own transaction (so there is never a change without its row, nor a row without
//! its change). Read newest first, in pages.

use serde::{Deserialize, Serialize};
use sqlx::any::AnyRow;
use sqlx::{Any, Executor, Row};
use time::OffsetDateTime;
use uuid::Uuid;

use super::{Storage, StorageResult};
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

/// One row of the audit trail (also one line of a backup's `audit.jsonl`, `at` in RFC 3339).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AuditEvent {
    /// Its id (the tie-break of its place in the trail).
    pub id: String,
    /// When (to the millisecond).
    #[serde(with = "time::serde::rfc3339")]
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
    let event = AuditEvent {
        // Time-ordered (version 7, ordered within this process even in one millisecond), so
        // that events of one millisecond list newest first too.
        id: Uuid::now_v7().to_string(),
        at: OffsetDateTime::now_utc(),
        actor: origin.actor.text().to_string(),
        action: action.name().to_string(),
        calibration_id: calibration.map(|c| c.to_string()),
        detail: detail.to_string(),
        address: origin.address.map(|a| a.to_string()),
    };
    insert(executor, &event).await
}

/// Writes `event` as it is (its id and time too): [`record`] for a new change, a restore for
/// the rows of a backup.
pub(super) async fn insert<'c, E: Executor<'c, Database = Any>>(
    executor: E,
    event: &AuditEvent,
) -> StorageResult<()> {
    sqlx::query(
        "INSERT INTO audit_events (id, at_ms, actor, action, calibration_id, detail, address) \
         VALUES ($1, $2, $3, $4, $5, $6, $7)",
    )
    .bind(&event.id)
    .bind(unix_ms(event.at))
    .bind(&event.actor)
    .bind(&event.action)
    .bind(event.calibration_id.as_deref())
    .bind(&event.detail)
    .bind(event.address.as_deref())
    .execute(executor)
    .await?;
    Ok(())
}

/// The columns an [`AuditEvent`] is read from.
pub(super) const EVENT_COLUMNS: &str = "id, at_ms, actor, action, calibration_id, detail, address";

/// An [`AuditEvent`] from a row of [`EVENT_COLUMNS`].
pub(super) fn event_from_row(row: &AnyRow) -> StorageResult<AuditEvent> {
    Ok(AuditEvent {
        id: row.try_get("id")?,
        at: from_unix_ms(row.try_get("at_ms")?),
        actor: row.try_get("actor")?,
        action: row.try_get("action")?,
        calibration_id: row.try_get("calibration_id")?,
        detail: row.try_get("detail")?,
        address: row.try_get("address")?,
    })
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
    let sql = format!(
        "SELECT {EVENT_COLUMNS} FROM audit_events \
         WHERE ($1 = '' OR calibration_id = $1) \
         AND (at_ms < $2 OR (at_ms = $2 AND id < $3)) \
         ORDER BY at_ms DESC, id DESC LIMIT $4"
    );
    let rows = sqlx::query(&sql)
        .bind(calibration.map_or(String::new(), |c| c.to_string()))
        .bind(after_ms)
        .bind(after_id)
        .bind(limit)
        .fetch_all(storage.pool())
        .await?;
    rows.iter().map(event_from_row).collect()
}
