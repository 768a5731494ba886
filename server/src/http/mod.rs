//! The HTTP layer (axum 0.8): one [`AppState`], one error type ([`error::ApiError`]), one
//! `router()` per resource module, merged in [`app`].

/// The `isotint_core::stress::SpecimenFields` of a JSON request that spells out the specimen's
/// fields (boundary, comparison, report): spelt out, not flattened, because serde cannot refuse
/// unknown fields beside a flattened part.
macro_rules! specimen_fields {
    ($r:expr) => {
        isotint_core::stress::SpecimenFields {
            specimen: $r.specimen,
            fringe_value_n_per_mm: $r.fringe_value_n_per_mm,
            thickness_mm: $r.thickness_mm,
            strain_fringe_value_um: $r.strain_fringe_value_um,
            coating_thickness_mm: $r.coating_thickness_mm,
            youngs_modulus_mpa: $r.youngs_modulus_mpa,
            poisson_ratio: $r.poisson_ratio,
        }
    };
}

pub mod audit;
pub mod auth;
pub mod calibrations;
pub mod download;
pub mod error;
pub mod form;
pub mod health;
pub mod jobs;
pub mod metrics;
pub mod openapi;
pub mod order_maps;
pub mod paging;
pub mod reports;
pub mod series;
pub mod session;
pub mod web;

use std::sync::Arc;

use axum::extract::DefaultBodyLimit;
use axum::http::{header, HeaderValue};
use axum::Router;
use tower_http::catch_panic::CatchPanicLayer;
use tower_http::set_header::SetResponseHeaderLayer;
use tower_http::timeout::RequestBodyTimeoutLayer;
use tower_http::trace::{DefaultMakeSpan, DefaultOnResponse, TraceLayer};
use tracing::Level;
use utoipa::OpenApi;
use utoipa_axum::router::OpenApiRouter;

use crate::config::ServiceConfig;
use crate::storage::Storage;

/// Shared state of every handler.
#[derive(Debug, Clone)]
pub struct AppState {
    /// Database access.
    pub storage: Storage,
    /// Limits and policies.
    pub config: Arc<ServiceConfig>,
    /// Admission control of pixel jobs.
    pub jobs: jobs::JobGate,
    /// The cap on concurrent file downloads.
    pub downloads: download::Downloads,
    /// Counters served at `/metrics`.
    pub metrics: metrics::Metrics,
}

impl AppState {
    /// State for `storage` under `config`.
    pub fn new(storage: Storage, config: ServiceConfig) -> Self {
        let metrics = metrics::Metrics::new();
        let jobs = jobs::JobGate::new(&config, metrics.clone());
        let downloads = download::Downloads::new(
            config.max_downloads,
            config.download_time_limit,
            metrics.clone(),
        );
        AppState {
            storage,
            config: Arc::new(config),
            jobs,
            downloads,
            metrics,
        }
    }
}

/// The API routes with their OpenAPI description.
fn api() -> (Router<AppState>, utoipa::openapi::OpenApi) {
    let (router, mut doc) = OpenApiRouter::with_openapi(openapi::ApiDoc::openapi())
        .merge(health::router())
        .merge(calibrations::router())
        .merge(order_maps::router())
        .merge(series::router())
        .merge(reports::router())
        .merge(audit::router())
        .merge(session::router())
        .split_for_parts();
    auth::document(&mut doc);
    (router, doc)
}

/// The whole service: API and metrics (behind [`auth::authorize`]), OpenAPI document and
/// browser workbench, with request metrics ([`metrics::track`]), body limit, time limit, body time-out (a stalled upload answers 408), panic
/// guard, JSON fallbacks, `X-Content-Type-Options: nosniff` on every response and request
/// tracing.
pub fn app(state: AppState) -> Router {
    let (api, doc) = api();
    let api = api
        .merge(metrics::router())
        .route_layer(axum::middleware::from_fn_with_state(
            state.clone(),
            auth::authorize,
        ));
    let upload_limit = state.config.upload_limit_bytes;
    let time_limit = state.config.request_timeout;
    let body_timeout = state.config.body_timeout;
    api.merge(openapi::router(doc))
        .merge(web::router())
        .fallback(error::no_route)
        .method_not_allowed_fallback(error::wrong_method)
        .layer(DefaultBodyLimit::max(upload_limit))
        .layer(RequestBodyTimeoutLayer::new(body_timeout))
        .layer(axum::middleware::from_fn_with_state(
            time_limit,
            error::time_limit,
        ))
        .layer(CatchPanicLayer::custom(error::panic_response))
        .layer(SetResponseHeaderLayer::overriding(
            header::X_CONTENT_TYPE_OPTIONS,
            HeaderValue::from_static("nosniff"),
        ))
        .layer(axum::middleware::from_fn_with_state(
            state.metrics.clone(),
            metrics::track,
        ))
        .layer(
            TraceLayer::new_for_http()
                .make_span_with(DefaultMakeSpan::new().level(Level::INFO))
                .on_response(DefaultOnResponse::new().level(Level::INFO)),
        )
        .with_state(state)
}
