//! `GET /api/v1/audit`: the audit trail, newest first, in pages (admin).

use axum::extract::rejection::QueryRejection;
use axum::extract::{Query, State};
use axum::Json;
use serde::{Deserialize, Serialize};
use utoipa::{IntoParams, ToSchema};
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use super::error::{ApiError, ErrorBody};
use super::AppState;
use crate::domain::{from_unix_ms, rfc3339, CalibrationId, Cursor};
use crate::storage::audit::{self, AuditEvent};

/// Routes of this module.
pub fn router() -> OpenApiRouter<AppState> {
    OpenApiRouter::new().routes(routes!(audit_trail))
}

/// Rows of a page unless `limit` says otherwise.
const DEFAULT_LIMIT: i64 = 50;
/// Most rows of a page.
const MAX_LIMIT: i64 = 500;

/// Query of the audit trail.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct AuditQuery {
    /// Events per page, 1–500 (default 50).
    pub limit: Option<i64>,
    /// The `cursor` of the previous page's `next` link.
    pub cursor: Option<String>,
    /// Only the events of this calibration.
    pub calibration: Option<String>,
}

/// One change, as the audit trail recorded it.
#[derive(Debug, Serialize, ToSchema)]
pub struct AuditEntry {
    /// When, RFC 3339.
    pub at: String,
    /// Who: a token's name, `open mode`, `command line` or `service start`.
    pub actor: String,
    /// `create`, `import`, `supersede`, `archive`, `restore`, `token_create` or `token_revoke`.
    pub action: String,
    /// The calibration changed.
    pub calibration_id: Option<String>,
    /// More about the change: the calibration corrected, the token's name and role.
    pub detail: String,
    /// The client's IP address, for changes made over HTTP.
    pub address: Option<String>,
}

impl From<AuditEvent> for AuditEntry {
    fn from(e: AuditEvent) -> Self {
        AuditEntry {
            at: rfc3339(e.at),
            actor: e.actor,
            action: e.action,
            calibration_id: e.calibration_id,
            detail: e.detail,
            address: e.address,
        }
    }
}

/// One page of the audit trail.
#[derive(Debug, Serialize, ToSchema)]
pub struct AuditPage {
    /// The events, newest first.
    pub events: Vec<AuditEntry>,
    /// Link to the next page; null on the last.
    pub next: Option<String>,
}

/// The page size `limit` asks for; 400 naming it when out of range.
pub fn page_limit(limit: Option<i64>) -> Result<i64, ApiError> {
    match limit {
        None => Ok(DEFAULT_LIMIT),
        Some(n) if (1..=MAX_LIMIT).contains(&n) => Ok(n),
        Some(n) => Err(ApiError::bad_request(
            "invalid_query",
            format!("limit must lie in 1–{MAX_LIMIT}, got {n}"),
        )),
    }
}

/// The changes of the library and of the tokens, newest first: who, what, which calibration,
/// when and from which address.
#[utoipa::path(get, path = "/api/v1/audit", tag = "audit", params(AuditQuery),
    responses((status = 200, body = AuditPage), (status = 400, body = ErrorBody),
              (status = 503, body = ErrorBody)))]
async fn audit_trail(
    State(state): State<AppState>,
    query: Result<Query<AuditQuery>, QueryRejection>,
) -> Result<Json<AuditPage>, ApiError> {
    let Query(query) = query?;
    let limit = page_limit(query.limit)?;
    let calibration: Option<CalibrationId> = query
        .calibration
        .as_deref()
        .map(|text| {
            text.parse().map_err(|e: isotint_core::CoreError| {
                ApiError::bad_request("invalid_query", format!("calibration: {e}"))
            })
        })
        .transpose()?;
    let scope = calibration.map_or(String::new(), |c| format!("&calibration={c}"));
    let after = query
        .cursor
        .as_deref()
        .map(|text| Cursor::decode(text, &scope))
        .transpose()
        .map_err(|e| ApiError::bad_request("invalid_cursor", e.to_string()))?;
    let after_key = after
        .as_ref()
        .map(|c| (from_unix_ms(c.at_ms), c.id.as_str()));
    let mut events = audit::page(&state.storage, calibration, after_key, limit + 1).await?;
    let next = if events.len() as i64 > limit {
        events.truncate(limit as usize);
        events.last().map(|last| {
            let cursor = Cursor {
                query: scope.clone(),
                at_ms: crate::domain::unix_ms(last.at),
                id: last.id.clone(),
            };
            format!(
                "/api/v1/audit?limit={limit}&cursor={}{scope}",
                cursor.encode()
            )
        })
    } else {
        None
    };
    Ok(Json(AuditPage {
        events: events.into_iter().map(Into::into).collect(),
        next,
    }))
}
