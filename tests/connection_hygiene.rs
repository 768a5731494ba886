//! Connection hygiene of the running service, on loopback: silent and stalled clients are cut
//! off after the time-outs, connections past the cap wait instead of starving the service, and
//! every API response tells browsers not to sniff its type.

mod common;

use std::time::Duration;

use axum::body::Body;
use axum::http::{header, Request, StatusCode};
use common::{get, grey_png, import_id, post, send, service_with, start, table, Form};
use isotint::config::ServiceConfig;
use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::net::TcpStream;

/// Longest any step of these tests may wait before it counts as hung (a bound, not a target).
const HUNG: Duration = Duration::from_secs(20);

/// Reads until the server closes the connection (bounded by [`HUNG`]).
async fn read_until_closed(stream: &mut TcpStream) -> String {
    let mut received = Vec::new();
    tokio::time::timeout(HUNG, stream.read_to_end(&mut received))
        .await
        .expect("the server closes the connection")
        .ok();
    String::from_utf8_lossy(&received).into_owned()
}

fn short_time_outs() -> ServiceConfig {
    ServiceConfig {
        header_timeout: Duration::from_millis(300),
        body_timeout: Duration::from_millis(300),
        ..ServiceConfig::default()
    }
}

#[tokio::test]
async fn a_connection_that_never_sends_a_request_is_closed_after_the_header_time_out() {
    let server = start(short_time_outs()).await;
    let mut silent = TcpStream::connect(server.addr).await.unwrap();
    let answer = read_until_closed(&mut silent).await;
    assert!(
        answer.is_empty() || answer.starts_with("HTTP/1.1 4"),
        "{answer:?}"
    );
}

#[tokio::test]
async fn a_client_that_sends_headers_and_half_a_header_line_is_cut_off() {
    let server = start(short_time_outs()).await;
    let mut trickle = TcpStream::connect(server.addr).await.unwrap();
    trickle
        .write_all(b"GET /api/v1/health HTTP/1.1\r\nHost: loopback\r\nX-Slow: ")
        .await
        .unwrap();
    let answer = read_until_closed(&mut trickle).await;
    assert!(!answer.contains("200 OK"), "{answer:?}");
}

#[tokio::test]
async fn a_client_that_sends_headers_and_then_no_body_is_answered_408_and_holds_no_job_slot() {
    let server = start(ServiceConfig {
        max_jobs: 1,
        ..short_time_outs()
    })
    .await;
    for (path, content_type) in [
        ("/api/v1/calibrations/import", "application/json"),
        (
            "/api/v1/order-maps",
            "multipart/form-data; boundary=stalled-boundary",
        ),
    ] {
        let mut stalled = TcpStream::connect(server.addr).await.unwrap();
        let head = format!(
            "POST {path} HTTP/1.1\r\nHost: loopback\r\nContent-Type: {content_type}\r\n\
             Content-Length: 5000\r\n\r\n"
        );
        stalled.write_all(head.as_bytes()).await.unwrap();
        let answer = read_until_closed(&mut stalled).await;
        assert!(answer.starts_with("HTTP/1.1 408"), "{path}: {answer:?}");
        assert!(answer.contains("body_timeout"), "{path}: {answer:?}");
    }
    // The single job slot was never taken (it is taken once a body has arrived): a photo
    // request is refused for its content, not for a full service.
    let client = reqwest::Client::new();
    let reply = client
        .post(format!("http://{}/api/v1/order-maps", server.addr))
        .multipart(
            reqwest::multipart::Form::new()
                .part(
                    "photo",
                    reqwest::multipart::Part::bytes(grey_png(8, 8)).file_name("p.png"),
                )
                .text("calibration", "not-an-id"),
        )
        .send()
        .await
        .unwrap();
    assert_eq!(reply.status(), reqwest::StatusCode::UNPROCESSABLE_ENTITY);
}

#[tokio::test]
async fn a_connection_past_the_cap_waits_and_is_served_once_a_capped_one_closes() {
    let server = start(ServiceConfig {
        max_connections: 2,
        header_timeout: Duration::from_secs(60),
        ..ServiceConfig::default()
    })
    .await;
    let first = TcpStream::connect(server.addr).await.unwrap();
    let _second = TcpStream::connect(server.addr).await.unwrap();
    let mut third = TcpStream::connect(server.addr).await.unwrap();
    third
        .write_all(b"GET /api/v1/health HTTP/1.1\r\nHost: loopback\r\nConnection: close\r\n\r\n")
        .await
        .unwrap();
    let mut byte = [0u8; 1];
    let early = tokio::time::timeout(Duration::from_millis(500), third.read(&mut byte)).await;
    assert!(
        early.is_err(),
        "a third connection was served past a cap of two"
    );
    drop(first);
    let answer = read_until_closed(&mut third).await;
    assert!(answer.starts_with("HTTP/1.1 200"), "{answer:?}");
}

#[tokio::test]
async fn health_answers_while_idle_connections_fill_the_cap_until_they_time_out() {
    let server = start(ServiceConfig {
        max_connections: 4,
        ..short_time_outs()
    })
    .await;
    let mut idle = Vec::new();
    for _ in 0..12 {
        idle.push(TcpStream::connect(server.addr).await.unwrap());
    }
    let reply = tokio::time::timeout(
        HUNG,
        reqwest::get(format!("http://{}/api/v1/health", server.addr)),
    )
    .await
    .expect("health answers once the idle connections time out")
    .unwrap();
    assert_eq!(reply.status(), reqwest::StatusCode::OK);
    drop(idle);
}

/// Content types the API answers with: none of them is rendered as a page by a browser.
const API_CONTENT_TYPES: [&str; 4] = [
    "application/json",
    "application/octet-stream",
    "image/png",
    "text/csv",
];

#[tokio::test]
async fn every_api_response_carries_nosniff_and_a_data_content_type() {
    let svc = service_with(ServiceConfig::default()).await;
    let id = import_id(&svc.app, &table("headers")).await;
    let map_form = Form::new()
        .file("photo", "p.png", "image/png", grey_png(24, 16))
        .text("calibration", &id);
    let created = map_form.post(&svc.app, "/api/v1/order-maps").await;
    assert_eq!(created.status, StatusCode::CREATED);
    let map = created.json()["id"].as_str().unwrap().to_string();
    let mut replies = vec![
        created,
        map_form
            .post(&svc.app, "/api/v1/order-maps?format=csv")
            .await,
        get(&svc.app, "/api/v1/health").await,
        get(&svc.app, "/api/v1/openapi.json").await,
        get(&svc.app, "/api/v1/calibrations").await,
        get(&svc.app, &format!("/api/v1/calibrations/{id}")).await,
        get(&svc.app, &format!("/api/v1/calibrations/{id}/export")).await,
        get(&svc.app, &format!("/api/v1/order-maps/{map}")).await,
        get(&svc.app, "/api/v1/calibrations/nonsense").await,
        get(&svc.app, "/api/v1/no-such-route").await,
        post(&svc.app, "/api/v1/health", "application/json", vec![]).await,
        post(&svc.app, "/api/v1/order-maps", "text/plain", b"x".to_vec()).await,
        post(
            &svc.app,
            "/api/v1/calibrations/import",
            "application/json",
            b"{".to_vec(),
        )
        .await,
    ];
    for file in ["npy", "png16", "preview", "csv", "uncertainty", "flags"] {
        replies.push(get(&svc.app, &format!("/api/v1/order-maps/{map}/{file}")).await);
    }
    let head = Request::head("/api/v1/health").body(Body::empty()).unwrap();
    replies.push(send(&svc.app, head).await);
    for reply in &replies {
        assert_eq!(
            reply
                .headers
                .get("x-content-type-options")
                .map(|v| v.as_bytes()),
            Some(&b"nosniff"[..]),
            "{} {:?}",
            reply.status,
            reply.headers
        );
        let content_type = reply.headers[header::CONTENT_TYPE].to_str().unwrap();
        assert!(
            API_CONTENT_TYPES
                .iter()
                .any(|t| content_type.starts_with(t)),
            "{} answered with {content_type}",
            reply.status
        );
    }
}
