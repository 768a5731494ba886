//! `GET /api/v1/health`.

use axum::extract::State;
use axum::Json;
use serde::Serialize;
use utoipa::ToSchema;
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use super::error::{ApiError, ErrorBody};
use super::AppState;

/// Routes of this module.
pub fn router() -> OpenApiRouter<AppState> {
    OpenApiRouter::new().routes(routes!(health))
}

/// Service health.
#[derive(Debug, Serialize, ToSchema)]
pub struct Health {
    /// Always `ok` when the database answers.
    pub status: &'static str,
    /// Version of the service.
    pub version: &'static str,
    /// `sqlite` or `postgres`.
    pub database: &'static str,
}

/// Reports whether the service and its database answer.
#[utoipa::path(get, path = "/api/v1/health", tag = "service",
    responses((status = 200, body = Health), (status = 503, body = ErrorBody)))]
async fn health(State(state): State<AppState>) -> Result<Json<Health>, ApiError> {
    state.storage.ping().await.map_err(|e| {
        tracing::warn!(error = %e, "database does not answer");
        ApiError::Unavailable("the database does not answer".into())
    })?;
    Ok(Json(Health {
        status: "ok",
        version: env!("CARGO_PKG_VERSION"),
        database: state.storage.backend().name(),
    }))
}
