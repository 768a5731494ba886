//! Load and downloads through the real service: many clients at once are admitted in turn
//! rather than refused, stored maps stream band by band, the cap on concurrent downloads
//! answers 503, and a reader slower than the download time limit is cut off. Loopback only,
//! bounded in count and time.

mod common;

use std::time::Duration;

use axum::body::Body;
use axum::http::{Request, StatusCode};
use common::{get, grey_png, import_id, send, service_with, start, table, Form};
use http_body_util::BodyExt;
use isotint::config::ServiceConfig;
use isotint::storage::order_maps;
use isotint_core::compact;
use isotint_core::exposure::ExposureCorrection;
use isotint_core::order_map::MapStatistics;
use isotint_core::specimen::{MaskSource, MaskUsed};
use isotint_core::{OrderMap, PixelFlags};
use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tower::ServiceExt;

/// Longest any step of these tests may wait before it counts as hung (a bound, not a target).
const HUNG: Duration = Duration::from_secs(120);

const CLIENTS: usize = 20;
const REQUESTS_PER_CLIENT: usize = 3;

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn twenty_clients_posting_three_small_photos_each_all_succeed_with_the_defaults() {
    let server = start(ServiceConfig::default()).await;
    let id = import_id(&server.svc.app, &table("Strip for the crowd")).await;
    let url = format!("http://{}/api/v1/order-maps", server.addr);
    let client = reqwest::Client::new();
    let mut clients = tokio::task::JoinSet::new();
    for _ in 0..CLIENTS {
        let (client, url, id) = (client.clone(), url.clone(), id.clone());
        clients.spawn(async move {
            let mut statuses = Vec::new();
            for _ in 0..REQUESTS_PER_CLIENT {
                let form = reqwest::multipart::Form::new()
                    .part(
                        "photo",
                        reqwest::multipart::Part::bytes(grey_png(160, 120)).file_name("p.png"),
                    )
                    .text("calibration", id.clone());
                let reply = client.post(&url).multipart(form).send().await.unwrap();
                statuses.push(reply.status().as_u16());
            }
            statuses
        });
    }
    let statuses: Vec<u16> = tokio::time::timeout(HUNG, clients.join_all())
        .await
        .expect("the clients finish")
        .into_iter()
        .flatten()
        .collect();
    assert_eq!(statuses.len(), CLIENTS * REQUESTS_PER_CLIENT);
    assert!(statuses.iter().all(|s| *s == 201), "{statuses:?}");
}

/// A `width` × `height` map with known values: order (x + y) / 100 + 0.00004 (kept as
/// (x + y) / 100 to 1e-4 fringe), none and beyond range where x + y is a multiple of 7.
fn ramp_map(width: u32, height: u32) -> OrderMap {
    let pixels = (width * height) as usize;
    let (mut order, mut flags) = (Vec::with_capacity(pixels), Vec::with_capacity(pixels));
    for y in 0..height {
        for x in 0..width {
            let past = (x + y) % 7 == 0;
            order.push(if past {
                f32::NAN
            } else {
                (x + y) as f32 / 100.0 + 0.00004
            });
            flags.push(PixelFlags(if past { PixelFlags::BEYOND_RANGE } else { 0 }));
        }
    }
    OrderMap {
        width,
        height,
        order,
        residual: vec![0.5; pixels],
        margin: vec![1.0; pixels],
        flags,
        uncertainty: vec![0.01; pixels],
        exposure: ExposureCorrection::NONE,
        statistics: MapStatistics {
            specimen_pixels: pixels as u64,
            valued_pixels: pixels as u64,
            beyond_range_share: 1.0 / 7.0,
            unreliable_share: 0.0,
            min_order: 0.01,
            max_order: f64::from(width + height) / 100.0,
            mean_order: 1.0,
            mean_residual: 0.5,
            table_max_order: 5.0,
            ambiguous_colour: false,
        },
    }
}

/// Stores `map` as the service would (in compact form) under a fresh calibration; returns its
/// id.
async fn store_map(svc: &common::TestService, map: &OrderMap) -> String {
    let calibration = import_id(&svc.app, &table("Strip for the downloads")).await;
    let bands = compact::encode_map(map).unwrap();
    let row = order_maps::insert(
        &svc.storage,
        calibration.parse().unwrap(),
        (map, MaskUsed::of(MaskSource::WholePhoto, None)),
        None,
        &bands,
        Duration::from_secs(3600),
    )
    .await
    .unwrap();
    row.id.to_string()
}

#[tokio::test]
async fn a_stored_maps_csv_streams_band_by_band_and_reads_as_its_rows_to_a_ten_thousandth() {
    let svc = service_with(ServiceConfig::default()).await;
    // 100 rows: four bands of 32 rows and one of 4.
    let id = store_map(&svc, &ramp_map(5, 100)).await;
    let request = Request::get(format!("/api/v1/order-maps/{id}/csv"))
        .body(Body::empty())
        .unwrap();
    let response = svc.app.clone().oneshot(request).await.unwrap();
    assert_eq!(response.status(), StatusCode::OK);
    let mut body = response.into_body();
    let (mut frames, mut text) = (0, Vec::new());
    while let Some(frame) = body.frame().await {
        if let Ok(data) = frame.unwrap().into_data() {
            frames += 1;
            text.extend_from_slice(&data);
        }
    }
    assert!(
        frames >= 5,
        "{frames} pieces: the header and a piece a band"
    );
    let text = String::from_utf8(text).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 1 + 500);
    assert_eq!(lines[0], "x,y,order,residual_de2000,flags");
    // Pixel (1, 0): 0.01004 kept as 0.0100; (0, 0) is beyond range; (4, 99) is 1.03.
    assert_eq!(lines[1], "0,0,,,2");
    assert_eq!(lines[2], "1,0,0.0100,0.50,0");
    assert_eq!(lines[500], "4,99,1.0300,0.50,0");
}

#[tokio::test]
async fn a_download_past_the_cap_answers_503_with_retry_after_and_the_next_one_is_served() {
    let svc = service_with(ServiceConfig {
        max_downloads: 1,
        ..ServiceConfig::default()
    })
    .await;
    let id = store_map(&svc, &ramp_map(3, 2)).await;
    let held = svc.state.downloads.start().unwrap();
    for file in ["csv", "npy", "png16", "preview", "uncertainty", "flags"] {
        let reply = get(&svc.app, &format!("/api/v1/order-maps/{id}/{file}")).await;
        assert_eq!(reply.status, StatusCode::SERVICE_UNAVAILABLE, "{file}");
        assert_eq!(reply.headers["retry-after"], "2");
        assert!(reply.error_message().contains("downloads"), "{file}");
    }
    // A file answer of a new map is a download too.
    let calibration = import_id(&svc.app, &table("Strip for the one-shot")).await;
    let reply = Form::new()
        .file("photo", "p.png", "image/png", grey_png(8, 8))
        .text("calibration", &calibration)
        .post(&svc.app, "/api/v1/order-maps?format=npy")
        .await;
    assert_eq!(reply.status, StatusCode::SERVICE_UNAVAILABLE);
    drop(held);
    let reply = get(&svc.app, &format!("/api/v1/order-maps/{id}/flags")).await;
    assert_eq!(reply.status, StatusCode::OK);
    assert_eq!(&reply.body[reply.body.len() - 6..], &[2, 0, 0, 0, 0, 0]);
    let reply = send(
        &svc.app,
        Request::get(format!("/api/v1/order-maps/{id}/csv"))
            .body(Body::empty())
            .unwrap(),
    )
    .await;
    assert_eq!(reply.status, StatusCode::OK);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_reader_slower_than_the_download_time_limit_is_cut_off_before_the_files_end() {
    let server = start(ServiceConfig {
        download_time_limit: Duration::from_millis(300),
        ..ServiceConfig::default()
    })
    .await;
    // About 40 MB of CSV: more than the connection's buffers hold.
    let id = store_map(&server.svc, &ramp_map(2000, 1000)).await;
    let mut stream = tokio::net::TcpStream::connect(server.addr).await.unwrap();
    let head = format!("GET /api/v1/order-maps/{id}/csv HTTP/1.1\r\nHost: loopback\r\n\r\n");
    stream.write_all(head.as_bytes()).await.unwrap();
    // Reads nothing for a while, then everything until the server closes.
    tokio::time::sleep(Duration::from_secs(2)).await;
    let mut received = Vec::new();
    tokio::time::timeout(HUNG, stream.read_to_end(&mut received))
        .await
        .expect("the server closes the connection")
        .ok();
    assert!(received.starts_with(b"HTTP/1.1 200"));
    assert!(
        !received.ends_with(b"\r\n0\r\n\r\n"),
        "a cut-off download must not end like a whole one"
    );
    assert!(received.len() < 30_000_000, "{} bytes", received.len());
}
