//! `GET /api/v1/openapi.json`: the OpenAPI 3.1 description generated from the handlers.

use axum::routing::get;
use axum::{Json, Router};
use utoipa::OpenApi;

use super::error::{ErrorBody, ErrorDetail};
use super::AppState;

/// Top-level OpenAPI document; paths are added by each module's `router()`.
#[derive(OpenApi)]
#[openapi(
    info(
        title = "isotint",
        description = "Fringe-order maps from white-light photoelastic photos. Pixel coordinates \
                       are pixel-edge coordinates: x right, y down; pixel (x, y) covers \
                       [x, x+1) × [y, y+1). Errors answer {\"error\": {\"code\", \"message\"}}; \
                       a 503 answer carries Retry-After (seconds)."
    ),
    components(schemas(ErrorBody, ErrorDetail)),
    tags(
        (name = "service", description = "Health and description of the service"),
        (name = "calibrations", description = "Calibration tables: fringe order → colour"),
        (name = "order-maps", description = "Fringe-order maps of specimen photos"),
        (name = "audit", description = "Who changed the library, and when")
    )
)]
pub struct ApiDoc;

/// Route serving `doc` as JSON.
pub fn router(doc: utoipa::openapi::OpenApi) -> Router<AppState> {
    let doc = std::sync::Arc::new(doc);
    Router::new().route(
        "/api/v1/openapi.json",
        get(move || {
            let doc = doc.clone();
            async move { Json(doc.as_ref().clone()) }
        }),
    )
}
