//! `GET /api/v1/health`: whether the service and its database answer, for people and load
//! balancers (503 takes the replica out).

use std::time::Duration;

use axum::extract::State;
use axum::http::{header, StatusCode};
use axum::response::{IntoResponse, Response};
use axum::Json;
use serde::Serialize;
use utoipa::ToSchema;
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use super::jobs::RETRY_AFTER_S;
use super::AppState;

/// How long the health check waits for the database to answer `SELECT 1`.
pub const PING_TIMEOUT: Duration = Duration::from_secs(2);

/// Routes of this module.
pub fn router() -> OpenApiRouter<AppState> {
    OpenApiRouter::new().routes(routes!(health))
}

/// Service health.
#[derive(Debug, Serialize, ToSchema)]
pub struct Health {
    /// `ok` when the database answers, `unavailable` when it does not.
    pub status: &'static str,
    /// Version of the service.
    pub version: &'static str,
    /// The database behind the service.
    pub database: DatabaseHealth,
}

/// The database as the health check found it.
#[derive(Debug, Serialize, ToSchema)]
pub struct DatabaseHealth {
    /// `sqlite` or `postgres`.
    pub kind: &'static str,
    /// Whether it answered a trivial query within the health check's time-out (2 s).
    pub reachable: bool,
}

/// Reports whether the service and its database answer: 200 when the database answers a
/// trivial query within 2 s, else 503 (with `Retry-After`) and the same body.
#[utoipa::path(get, path = "/api/v1/health", tag = "service",
    responses(
        (status = 200, description = "The service and its database answer", body = Health),
        (status = 503, description = "The database does not answer within 2 s", body = Health)
    ))]
async fn health(State(state): State<AppState>) -> Response {
    let reachable = match tokio::time::timeout(PING_TIMEOUT, state.storage.ping()).await {
        Ok(Ok(())) => true,
        Ok(Err(e)) => {
            tracing::warn!(error = %e, "database does not answer");
            false
        }
        Err(_) => {
            tracing::warn!(timeout = ?PING_TIMEOUT, "database does not answer in time");
            false
        }
    };
    let body = Json(Health {
        status: if reachable { "ok" } else { "unavailable" },
        version: env!("CARGO_PKG_VERSION"),
        database: DatabaseHealth {
            kind: state.storage.backend().name(),
            reachable,
        },
    });
    if reachable {
        body.into_response()
    } else {
        let retry_after = [(header::RETRY_AFTER, RETRY_AFTER_S)];
        (StatusCode::SERVICE_UNAVAILABLE, retry_after, body).into_response()
    }
}
