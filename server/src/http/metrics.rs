//! `GET /metrics`: the service's counters in the Prometheus text format (OpenMetrics), from
//! `prometheus-client`. Requests are counted by route template (as the router spells it, never
//! the raw path) and status code, so the label sets stay bounded.

use std::sync::Arc;
use std::time::Duration;

use axum::extract::{MatchedPath, Request, State};
use axum::http::{header, HeaderValue, Method};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};
use axum::routing::get;
use axum::Router;
use prometheus_client::encoding::EncodeLabelSet;
use prometheus_client::metrics::counter::Counter;
use prometheus_client::metrics::family::Family;
use prometheus_client::metrics::gauge::Gauge;
use prometheus_client::metrics::histogram::{exponential_buckets, Histogram};
use prometheus_client::registry::Registry;

use super::error::ApiError;
use super::AppState;

/// The route of the metrics endpoint.
pub const ROUTE: &str = "/metrics";

/// Route label of requests that matched no route.
const UNMATCHED: &str = "unmatched";

/// Labels of the request counter.
#[derive(Debug, Clone, PartialEq, Eq, Hash, EncodeLabelSet)]
struct RequestLabels {
    method: &'static str,
    route: String,
    status: u16,
}

/// Labels of the database error counter.
#[derive(Debug, Clone, PartialEq, Eq, Hash, EncodeLabelSet)]
struct DatabaseLabels {
    kind: &'static str,
}

/// Why a pixel job was refused.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Refusal {
    /// 413: its memory estimate exceeds the whole memory budget.
    TooLarge,
    /// 503: it would have waited past the wait limit.
    WaitLimit,
    /// 503: the request bodies waiting would have passed the queue's memory limit.
    QueueMemory,
}

impl Refusal {
    /// The label value: `too_large`, `wait_limit`, `queue_memory`.
    fn label(self) -> &'static str {
        match self {
            Refusal::TooLarge => "too_large",
            Refusal::WaitLimit => "wait_limit",
            Refusal::QueueMemory => "queue_memory",
        }
    }
}

/// Labels of the refused-jobs counter.
#[derive(Debug, Clone, PartialEq, Eq, Hash, EncodeLabelSet)]
struct RefusalLabels {
    reason: &'static str,
}

/// A database failure behind an answer, as a response extension: the kind (`busy`, `fault`,
/// `corrupt`, …) that [`track`] counts.
#[derive(Debug, Clone, Copy)]
pub struct DatabaseFailure(pub &'static str);

/// The service's metrics. Cheap to clone; every clone updates the same counters.
#[derive(Debug, Clone)]
pub struct Metrics {
    registry: Arc<Registry>,
    requests: Family<RequestLabels, Counter>,
    database_errors: Family<DatabaseLabels, Counter>,
    /// Jobs admitted (given their memory and a CPU slot).
    pub jobs_admitted: Counter,
    jobs_refused: Family<RefusalLabels, Counter>,
    /// Jobs running now (holding a CPU slot).
    pub jobs_running: Gauge,
    /// Requests waiting for admission now (the queue).
    pub jobs_waiting: Gauge,
    /// The memory budget of the jobs, bytes.
    pub memory_budget_bytes: Gauge,
    /// The part of the memory budget that admitted jobs hold now, bytes.
    pub memory_in_use_bytes: Gauge,
    /// File downloads streaming now.
    pub downloads_active: Gauge,
    /// File downloads refused with 503 because the cap was reached.
    pub downloads_refused: Counter,
    job_wait_seconds: Histogram,
    job_duration_seconds: Histogram,
}

impl Default for Metrics {
    fn default() -> Self {
        Metrics::new()
    }
}

impl Metrics {
    /// Fresh metrics, all zero, in their own registry.
    pub fn new() -> Self {
        let mut registry = Registry::with_prefix("isotint");
        let requests = Family::<RequestLabels, Counter>::default();
        let database_errors = Family::<DatabaseLabels, Counter>::default();
        let jobs_admitted = Counter::default();
        let jobs_refused = Family::<RefusalLabels, Counter>::default();
        let jobs_running = Gauge::default();
        let jobs_waiting = Gauge::default();
        let memory_budget_bytes = Gauge::default();
        let memory_in_use_bytes = Gauge::default();
        let downloads_active = Gauge::default();
        let downloads_refused = Counter::default();
        // 1 ms to about 2 min for waits, 10 ms to about 20 min for jobs.
        let job_wait_seconds = Histogram::new(exponential_buckets(0.001, 4.0, 10));
        let job_duration_seconds = Histogram::new(exponential_buckets(0.01, 4.0, 10));
        registry.register(
            "http_requests",
            "HTTP requests answered, by method, route template and status code",
            requests.clone(),
        );
        registry.register(
            "database_errors",
            "Database failures behind an answer, by kind (busy: retry later; fault, corrupt: \
             the database failed)",
            database_errors.clone(),
        );
        registry.register(
            "jobs_admitted",
            "Pixel jobs admitted (given their memory and a CPU slot)",
            jobs_admitted.clone(),
        );
        registry.register(
            "jobs_refused",
            "Pixel jobs refused, by reason (too_large: 413, over the whole memory budget; \
             wait_limit, queue_memory: 503 with Retry-After)",
            jobs_refused.clone(),
        );
        registry.register(
            "jobs_running",
            "Pixel jobs running now",
            jobs_running.clone(),
        );
        registry.register(
            "jobs_waiting",
            "Pixel-job requests waiting for admission (queue depth)",
            jobs_waiting.clone(),
        );
        registry.register(
            "memory_budget_bytes",
            "Memory budget of the pixel jobs, bytes",
            memory_budget_bytes.clone(),
        );
        registry.register(
            "memory_budget_in_use_bytes",
            "Part of the memory budget held by admitted pixel jobs now, bytes",
            memory_in_use_bytes.clone(),
        );
        registry.register(
            "downloads_active",
            "Files of order maps streaming now",
            downloads_active.clone(),
        );
        registry.register(
            "downloads_refused",
            "File downloads refused with 503 because the cap on concurrent downloads was reached",
            downloads_refused.clone(),
        );
        registry.register(
            "job_wait_seconds",
            "Seconds each admitted pixel job waited for its memory and CPU slot",
            job_wait_seconds.clone(),
        );
        registry.register(
            "job_duration_seconds",
            "Seconds each pixel job ran",
            job_duration_seconds.clone(),
        );
        Metrics {
            registry: Arc::new(registry),
            requests,
            database_errors,
            jobs_admitted,
            jobs_refused,
            jobs_running,
            jobs_waiting,
            memory_budget_bytes,
            memory_in_use_bytes,
            downloads_active,
            downloads_refused,
            job_wait_seconds,
            job_duration_seconds,
        }
    }

    /// Counts a refused job.
    pub fn refused(&self, reason: Refusal) {
        self.jobs_refused
            .get_or_create(&RefusalLabels {
                reason: reason.label(),
            })
            .inc();
    }

    /// Records a job's wait for its slot.
    pub fn observe_wait(&self, wait: Duration) {
        self.job_wait_seconds.observe(wait.as_secs_f64());
    }

    /// Records a job's run time.
    pub fn observe_job(&self, run: Duration) {
        self.job_duration_seconds.observe(run.as_secs_f64());
    }

    /// Every metric in the OpenMetrics text format.
    fn encode(&self) -> Result<String, std::fmt::Error> {
        let mut text = String::new();
        prometheus_client::encoding::text::encode(&mut text, &self.registry)?;
        Ok(text)
    }
}

/// The method as a label: the standard ones by name, any other as `OTHER` (so that invented
/// methods cannot grow the label set).
fn method_label(method: &Method) -> &'static str {
    [
        Method::GET,
        Method::HEAD,
        Method::POST,
        Method::PUT,
        Method::DELETE,
        Method::PATCH,
        Method::OPTIONS,
    ]
    .iter()
    .find(|m| *m == method)
    .map_or("OTHER", Method::as_str)
}

/// Middleware on every route: counts the answer by method, route template and status, and the
/// database failure behind it, if any.
pub async fn track(State(metrics): State<Metrics>, request: Request, next: Next) -> Response {
    let method = method_label(request.method());
    let route = request
        .extensions()
        .get::<MatchedPath>()
        .map_or(UNMATCHED, MatchedPath::as_str)
        .to_string();
    let response = next.run(request).await;
    let labels = RequestLabels {
        method,
        route,
        status: response.status().as_u16(),
    };
    metrics.requests.get_or_create(&labels).inc();
    if let Some(DatabaseFailure(kind)) = response.extensions().get::<DatabaseFailure>() {
        metrics
            .database_errors
            .get_or_create(&DatabaseLabels { kind })
            .inc();
    }
    response
}

/// The metrics endpoint (behind the access check; see `auth::POLICY`).
pub fn router() -> Router<AppState> {
    Router::new().route(ROUTE, get(metrics))
}

/// Every metric, with the job gate's occupancy as of now.
async fn metrics(State(state): State<AppState>) -> Result<Response, ApiError> {
    state.jobs.record_occupancy();
    let text = state
        .metrics
        .encode()
        .map_err(|e| ApiError::Internal(format!("encoding the metrics failed: {e}")))?;
    let mut response = text.into_response();
    response.headers_mut().insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("application/openmetrics-text; version=1.0.0; charset=utf-8"),
    );
    Ok(response)
}
