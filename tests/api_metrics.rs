//! `GET /metrics` through the real router: requests by route template and status, pixel jobs
//! admitted, refused, waiting and timed, and database failures by kind.

mod common;

use axum::http::{header, StatusCode};
use common::{get, grey_png, import_id, service, service_with, table, Form, TestService};
use isotint::config::ServiceConfig;
use isotint::http::jobs::JobSize;

/// The text of `/metrics`, asserting a 200 in the OpenMetrics text format.
async fn scrape(svc: &TestService) -> String {
    let reply = get(&svc.app, "/metrics").await;
    assert_eq!(reply.status, StatusCode::OK);
    let content_type = reply.headers[header::CONTENT_TYPE].to_str().unwrap();
    assert!(content_type.starts_with("application/openmetrics-text"));
    String::from_utf8(reply.body).unwrap()
}

/// The value of the sample `series` (name and labels exactly as exposed), if exposed.
fn sample(text: &str, series: &str) -> Option<f64> {
    text.lines()
        .find_map(|line| line.strip_prefix(series)?.strip_prefix(' '))
        .map(|value| value.parse().unwrap())
}

/// Maps a small grey photo with calibration `id`; returns the status.
async fn map_grey_photo(svc: &TestService, id: &str) -> StatusCode {
    Form::new()
        .file("photo", "p.png", "image/png", grey_png(32, 24))
        .text("calibration", id)
        .post(&svc.app, "/api/v1/order-maps")
        .await
        .status
}

#[tokio::test]
async fn requests_are_counted_by_route_template_and_status_and_never_by_raw_path() {
    let svc = service().await;
    let id = import_id(&svc.app, &table("Strip for the counters")).await;
    let missing = uuid::Uuid::new_v4().to_string();
    let found = get(&svc.app, &format!("/api/v1/calibrations/{id}")).await;
    assert_eq!(found.status, StatusCode::OK);
    let absent = get(&svc.app, &format!("/api/v1/calibrations/{missing}")).await;
    assert_eq!(absent.status, StatusCode::NOT_FOUND);
    assert_eq!(
        get(&svc.app, "/no/such/route").await.status,
        StatusCode::NOT_FOUND
    );

    let text = scrape(&svc).await;
    let by_id = "isotint_http_requests_total{method=\"GET\",route=\"/api/v1/calibrations/{id}\"";
    assert_eq!(
        sample(&text, &format!("{by_id},status=\"200\"}}")),
        Some(1.0)
    );
    assert_eq!(
        sample(&text, &format!("{by_id},status=\"404\"}}")),
        Some(1.0)
    );
    let import = "isotint_http_requests_total{method=\"POST\",\
                  route=\"/api/v1/calibrations/import\",status=\"201\"}";
    assert_eq!(sample(&text, import), Some(1.0));
    let unmatched = "isotint_http_requests_total{method=\"GET\",route=\"unmatched\",\
                     status=\"404\"}";
    assert_eq!(sample(&text, unmatched), Some(1.0));
    for raw in [id.as_str(), missing.as_str(), "/no/such/route"] {
        assert!(!text.contains(raw), "{raw} appears in the metrics:\n{text}");
    }
}

#[tokio::test]
async fn a_map_job_is_admitted_timed_and_leaves_no_job_running_or_waiting() {
    let svc = service().await;
    let id = import_id(&svc.app, &table("Strip for the job timer")).await;
    assert_eq!(map_grey_photo(&svc, &id).await, StatusCode::CREATED);

    let text = scrape(&svc).await;
    assert_eq!(sample(&text, "isotint_jobs_admitted_total"), Some(1.0));
    assert_eq!(
        sample(&text, "isotint_jobs_refused_total{reason=\"wait_limit\"}"),
        None
    );
    assert_eq!(
        sample(&text, "isotint_memory_budget_in_use_bytes"),
        Some(0.0)
    );
    assert!(sample(&text, "isotint_job_duration_seconds_count") >= Some(1.0));
    assert!(sample(&text, "isotint_job_wait_seconds_count") >= Some(1.0));
    assert_eq!(sample(&text, "isotint_jobs_running"), Some(0.0));
    assert_eq!(sample(&text, "isotint_jobs_waiting"), Some(0.0));
}

#[tokio::test]
async fn a_job_refused_at_the_wait_limit_is_counted_beside_the_memory_the_holder_takes() {
    let svc = service_with(ServiceConfig {
        max_jobs: 1,
        memory_budget_bytes: 64 << 20,
        job_wait_limit: std::time::Duration::from_millis(50),
        ..ServiceConfig::default()
    })
    .await;
    let id = import_id(&svc.app, &table("Strip for the queue")).await;
    // 3 MiB and a byte: counted in whole MiB, 4 MiB of the budget.
    let holder = svc
        .state
        .jobs
        .admit(JobSize {
            memory_bytes: (3 << 20) + 1,
            waiting_bytes: 0,
        })
        .await
        .unwrap();
    assert_eq!(
        map_grey_photo(&svc, &id).await,
        StatusCode::SERVICE_UNAVAILABLE
    );

    let text = scrape(&svc).await;
    assert_eq!(sample(&text, "isotint_jobs_admitted_total"), Some(1.0));
    assert_eq!(
        sample(&text, "isotint_jobs_refused_total{reason=\"wait_limit\"}"),
        Some(1.0)
    );
    assert_eq!(sample(&text, "isotint_jobs_running"), Some(1.0));
    assert_eq!(sample(&text, "isotint_jobs_waiting"), Some(0.0));
    assert_eq!(
        sample(&text, "isotint_memory_budget_in_use_bytes"),
        Some(f64::from(4u32 << 20))
    );
    assert_eq!(
        sample(&text, "isotint_memory_budget_bytes"),
        Some(f64::from(64u32 << 20))
    );
    drop(holder);
    let text = scrape(&svc).await;
    assert_eq!(sample(&text, "isotint_jobs_running"), Some(0.0));
    assert_eq!(
        sample(&text, "isotint_memory_budget_in_use_bytes"),
        Some(0.0)
    );
}

#[tokio::test]
async fn a_failing_database_is_counted_as_a_fault_behind_an_opaque_500() {
    let svc = service().await;
    svc.storage.close().await;
    let reply = get(&svc.app, "/api/v1/calibrations").await;
    assert_eq!(reply.status, StatusCode::INTERNAL_SERVER_ERROR);
    assert_eq!(reply.error_code(), "internal");

    let text = scrape(&svc).await;
    assert_eq!(
        sample(&text, "isotint_database_errors_total{kind=\"fault\"}"),
        Some(1.0)
    );
}
