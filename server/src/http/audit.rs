//! `GET /api/v1/audit`: the audit trail, newest first, in pages (admin).

use axum::extract::rejection::QueryRejection;
use axum::extract::{Query, State};
use axum::Json;
use serde::{Deserialize, Serialize};
use utoipa::{IntoParams, ToSchema};
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use super::error::{ApiError, ErrorBody};
use super::openapi;
use super::paging::{cursor_key, next_link, page_after, page_limit};
use super::AppState;
use crate::domain::{rfc3339, CalibrationId};
use crate::storage::audit::{self, AuditEvent};

/// Routes of this module.
pub fn router() -> OpenApiRouter<AppState> {
    OpenApiRouter::new().routes(routes!(audit_trail))
}

/// Query of the audit trail.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct AuditQuery {
    /// Events per page, 1–500 (default 50).
    #[param(minimum = 1, maximum = 500)]
    pub limit: Option<i64>,
    /// The `cursor` of the previous page's `next` link.
    #[param(schema_with = openapi::cursor)]
    pub cursor: Option<String>,
    /// Only the events of this calibration (its id).
    #[param(schema_with = openapi::uuid)]
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
    let after = page_after(query.cursor.as_deref(), &scope)?;
    let mut events = audit::page(
        &state.storage,
        calibration,
        after.as_ref().map(cursor_key),
        limit + 1,
    )
    .await?;
    let next = next_link(&mut events, limit, "/api/v1/audit", &scope, |e| {
        (e.at, e.id.clone())
    });
    Ok(Json(AuditPage {
        events: events.into_iter().map(Into::into).collect(),
        next,
    }))
}
