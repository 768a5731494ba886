//! `GET /api/v1/session`: who is asking and what they may do, so that the workbench can show
//! who is signed in and offer only the actions their role allows.

use axum::extract::State;
use axum::{Extension, Json};
use serde::Serialize;
use utoipa::ToSchema;
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use super::auth;
use super::error::ErrorBody;
use super::AppState;
use crate::access::{Actor, Origin, Role};

/// Routes of this module.
pub fn router() -> OpenApiRouter<AppState> {
    OpenApiRouter::new().routes(routes!(session))
}

/// The caller as the service sees them.
#[derive(Debug, Serialize, ToSchema)]
pub struct Session {
    /// `tokens` (every call needs a token) or `open` (none does).
    pub mode: &'static str,
    /// The token's name; null in open mode.
    pub name: Option<String>,
    /// The token's role (`reader`, `writer` or `admin`); `admin` in open mode, where every
    /// operation is open.
    #[schema(value_type = String)]
    pub role: Role,
    /// The operations the caller may call, each as `METHOD /route` the way the API document
    /// spells it (e.g. `POST /api/v1/calibrations/{id}/archive`).
    pub allowed: Vec<String>,
}

/// Who is asking (the token's name and role, or open mode) and which operations they may call.
#[utoipa::path(get, path = "/api/v1/session", tag = "service",
    responses((status = 200, body = Session), (status = 503, body = ErrorBody)))]
async fn session(
    State(state): State<AppState>,
    origin: Origin,
    Extension(role): Extension<Role>,
) -> Json<Session> {
    let name = match origin.actor {
        Actor::Token(name) => Some(name.to_string()),
        _ => None,
    };
    Json(Session {
        mode: state.config.access.name(),
        name,
        role,
        allowed: auth::allowed(role),
    })
}
