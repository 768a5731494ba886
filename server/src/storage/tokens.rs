//! API tokens: a name, a role and the SHA-256 of the token (never the token). Every request in
//! token mode looks its token up here, so a revocation holds on every replica at once.

use std::time::Duration;

use sqlx::any::AnyRow;
use sqlx::Row;
use time::OffsetDateTime;

use super::audit::{self, AuditAction};
use super::{is_unique_violation, Storage, StorageError, StorageResult};
use crate::access::{Origin, Role, TokenName};
use crate::domain::{from_unix_ms, unix_ms};

/// How stale a token's "last used" time may get: it is written at most this often per token,
/// so that reads do not each become a write.
pub const LAST_USED_RESOLUTION: Duration = Duration::from_secs(60);

/// A token that is not revoked, as a request presents it.
#[derive(Debug, Clone, PartialEq)]
pub struct ActiveToken {
    /// Its name.
    pub name: TokenName,
    /// What it may do.
    pub role: Role,
    /// When it was last used (to [`LAST_USED_RESOLUTION`]).
    pub last_used_at: Option<OffsetDateTime>,
}

/// A text column parsed into `T` (a token's name or role).
pub(super) fn parsed<T: std::str::FromStr>(row: &AnyRow, column: &str) -> StorageResult<T>
where
    T::Err: std::fmt::Display,
{
    let text: String = row.try_get(column)?;
    text.parse()
        .map_err(|e| StorageError::Corrupt(format!("{column}: {e}")))
}

fn optional_time(row: &AnyRow, column: &str) -> StorageResult<Option<OffsetDateTime>> {
    Ok(row.try_get::<Option<i64>, _>(column)?.map(from_unix_ms))
}

/// Stores a new token `name` with `role` whose SHA-256 is `token_sha256`. A name used before,
/// even by a revoked token, is a conflict: the audit trail refers to tokens by name. The audit
/// row of `origin` is written in the same transaction.
pub async fn create(
    storage: &Storage,
    name: &TokenName,
    role: Role,
    token_sha256: &str,
    origin: &Origin,
) -> StorageResult<()> {
    let mut tx = storage.writer().begin().await?;
    sqlx::query(
        "INSERT INTO api_tokens (name, role, token_sha256, created_at_ms) VALUES ($1, $2, $3, $4)",
    )
    .bind(name.as_str())
    .bind(role.name())
    .bind(token_sha256)
    .bind(unix_ms(OffsetDateTime::now_utc()))
    .execute(&mut *tx)
    .await
    .map_err(|e| {
        if is_unique_violation(&e) {
            StorageError::Conflict(format!(
                "a token named {name} exists already (perhaps revoked); choose another name"
            ))
        } else {
            e.into()
        }
    })?;
    let detail = format!("token {name} ({role})");
    audit::record(&mut *tx, origin, AuditAction::TokenCreate, None, &detail).await?;
    tx.commit().await?;
    Ok(())
}

/// The unrevoked token whose SHA-256 is `token_sha256`, if there is one.
pub async fn active(storage: &Storage, token_sha256: &str) -> StorageResult<Option<ActiveToken>> {
    let row = sqlx::query(
        "SELECT name, role, last_used_at_ms FROM api_tokens \
         WHERE token_sha256 = $1 AND revoked_at_ms IS NULL",
    )
    .bind(token_sha256)
    .fetch_optional(storage.pool())
    .await?;
    row.map(|row| {
        Ok(ActiveToken {
            name: parsed(&row, "name")?,
            role: parsed(&row, "role")?,
            last_used_at: optional_time(&row, "last_used_at_ms")?,
        })
    })
    .transpose()
}

/// Records that `token` was used at `now`, unless that was recorded less than
/// [`LAST_USED_RESOLUTION`] ago.
pub async fn mark_used(
    storage: &Storage,
    token: &ActiveToken,
    now: OffsetDateTime,
) -> StorageResult<()> {
    if token
        .last_used_at
        .is_some_and(|t| now - t < LAST_USED_RESOLUTION)
    {
        return Ok(());
    }
    sqlx::query("UPDATE api_tokens SET last_used_at_ms = $1 WHERE name = $2")
        .bind(unix_ms(now))
        .bind(token.name.as_str())
        .execute(storage.writer())
        .await?;
    Ok(())
}

/// Revokes the token `name`; from now on no replica lets it in. Not found if there is no
/// such token or it is revoked already. The audit row of `origin` is written in the same
/// transaction.
pub async fn revoke(storage: &Storage, name: &TokenName, origin: &Origin) -> StorageResult<()> {
    let mut tx = storage.writer().begin().await?;
    let result = sqlx::query(
        "UPDATE api_tokens SET revoked_at_ms = $1 WHERE name = $2 AND revoked_at_ms IS NULL",
    )
    .bind(unix_ms(OffsetDateTime::now_utc()))
    .bind(name.as_str())
    .execute(&mut *tx)
    .await?;
    if result.rows_affected() == 0 {
        return Err(StorageError::NotFound {
            what: "unrevoked token",
            id: name.to_string(),
        });
    }
    let detail = format!("token {name}");
    audit::record(&mut *tx, origin, AuditAction::TokenRevoke, None, &detail).await?;
    tx.commit().await?;
    Ok(())
}

/// What `isotint token list` shows of a token (never the token or its hash).
#[derive(Debug, Clone, PartialEq)]
pub struct TokenRow {
    /// Its name.
    pub name: TokenName,
    /// What it may do.
    pub role: Role,
    /// When it was made.
    pub created_at: OffsetDateTime,
    /// When it was last used (to [`LAST_USED_RESOLUTION`]).
    pub last_used_at: Option<OffsetDateTime>,
    /// When it was revoked.
    pub revoked_at: Option<OffsetDateTime>,
}

/// Every token, revoked ones too, in order of name.
pub async fn list(storage: &Storage) -> StorageResult<Vec<TokenRow>> {
    let rows = sqlx::query(
        "SELECT name, role, created_at_ms, last_used_at_ms, revoked_at_ms FROM api_tokens \
         ORDER BY name",
    )
    .fetch_all(storage.pool())
    .await?;
    rows.iter()
        .map(|row| {
            Ok(TokenRow {
                name: parsed(row, "name")?,
                role: parsed(row, "role")?,
                created_at: from_unix_ms(row.try_get("created_at_ms")?),
                last_used_at: optional_time(row, "last_used_at_ms")?,
                revoked_at: optional_time(row, "revoked_at_ms")?,
            })
        })
        .collect()
}
