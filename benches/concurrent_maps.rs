//! Load benchmark: 20 concurrent clients post 1-megapixel photos to a running service on
//! 127.0.0.1 and get NPY order maps back (`?format=npy`). Prints errors and latency
//! p50 / p95 / max. Bounded in count (`ISOTINT_BENCH_REQUESTS` per client, default 3) and time
//! (`ISOTINT_BENCH_SECONDS`, default 300): no client starts a request after the deadline.
//!
//! Run with `cargo bench --bench concurrent_maps`.

use std::net::SocketAddr;
use std::time::{Duration, Instant};

use isotint::config::ServiceConfig;
use isotint::http::{app, AppState};
use isotint::storage::Storage;
use isotint_core::render::camera::CameraModel;
use isotint_core::render::effects::{develop, PhotoEffects, PhotoEncoding};
use isotint_core::render::fields::DiscField;
use isotint_core::render::light::LightSource;
use isotint_core::render::polariscope::QuarterWavePlates;
use isotint_core::render::scene::render_scene;
use isotint_core::render::{rendered_table, RenderSetup, Renderer};
use isotint_core::stress::DiscInCompression;
use isotint_core::{CalibrationMetadata, PixelPoint};

const CLIENTS: usize = 20;
const SIDE: u32 = 1000;

fn env_number(name: &str, default: u64) -> u64 {
    std::env::var(name)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

/// A rendered 1000 × 1000 disc photo and a rendered calibration table for it.
fn inputs() -> (Vec<u8>, String) {
    let setup = RenderSetup {
        light: LightSource::Daylight,
        camera: CameraModel::Colorimetric,
        plates: QuarterWavePlates::Ideal,
        dispersion: 0.0,
        exposure: 0.9,
    };
    let disc = DiscField::new(
        PixelPoint {
            x: f64::from(SIDE) / 2.0,
            y: f64::from(SIDE) / 2.0,
        },
        f64::from(SIDE) * 0.45,
        DiscInCompression::new(40.0, 6.0, 700.0).unwrap(),
        11.0,
    )
    .unwrap();
    let scene = render_scene(&disc, &Renderer::new(setup).unwrap(), SIDE, SIDE, 1).unwrap();
    let fx = PhotoEffects {
        blur_sigma_px: 0.6,
        ..PhotoEffects::default()
    };
    let photo = develop(&scene.image, &fx, PhotoEncoding::Png8).unwrap();
    let table = rendered_table(
        LightSource::Daylight,
        CameraModel::Colorimetric,
        QuarterWavePlates::Ideal,
        5.0,
        0.01,
        CalibrationMetadata {
            name: "benchmark table".into(),
            ..Default::default()
        },
    )
    .unwrap();
    (photo, table.to_json())
}

async fn start_service(dir: &std::path::Path) -> SocketAddr {
    let url = format!("sqlite://{}?mode=rwc", dir.join("bench.sqlite").display());
    let storage = Storage::connect(&url).await.unwrap();
    let config = ServiceConfig {
        job_queue: CLIENTS + 4,
        request_timeout: Duration::from_secs(600),
        ..ServiceConfig::default()
    };
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let address = listener.local_addr().unwrap();
    let state = AppState::new(storage, config);
    let config = state.config.clone();
    tokio::spawn(async move {
        isotint::service::serve(listener, app(state), &config, std::future::pending()).await
    });
    address
}

fn percentile(sorted: &[Duration], p: f64) -> Duration {
    if sorted.is_empty() {
        return Duration::ZERO;
    }
    let rank = ((p / 100.0) * (sorted.len() - 1) as f64).round() as usize;
    sorted[rank]
}

#[tokio::main]
async fn main() {
    let per_client = env_number("ISOTINT_BENCH_REQUESTS", 3);
    let deadline = Instant::now() + Duration::from_secs(env_number("ISOTINT_BENCH_SECONDS", 300));
    let dir = tempfile::tempdir().unwrap();
    let address = start_service(dir.path()).await;
    let (photo, table) = inputs();
    println!(
        "service on {address}; {CLIENTS} clients × {per_client} requests, photo {SIDE}×{SIDE} ({} KiB)",
        photo.len() / 1024
    );
    let client = reqwest::Client::builder()
        .timeout(Duration::from_secs(900))
        .build()
        .unwrap();
    let base = format!("http://{address}/api/v1");
    let imported: serde_json::Value = client
        .post(format!("{base}/calibrations/import"))
        .header("content-type", "application/json")
        .body(table)
        .send()
        .await
        .unwrap()
        .json()
        .await
        .unwrap();
    let calibration = imported["id"].as_str().unwrap().to_string();

    let started = Instant::now();
    let mut tasks = Vec::new();
    for _ in 0..CLIENTS {
        let (client, base, calibration, photo) = (
            client.clone(),
            base.clone(),
            calibration.clone(),
            photo.clone(),
        );
        tasks.push(tokio::spawn(async move {
            let mut results = Vec::new();
            for _ in 0..per_client {
                if Instant::now() >= deadline {
                    break;
                }
                let form = reqwest::multipart::Form::new()
                    .part(
                        "photo",
                        reqwest::multipart::Part::bytes(photo.clone())
                            .file_name("disc.png")
                            .mime_str("image/png")
                            .unwrap(),
                    )
                    .text("calibration", calibration.clone());
                let t0 = Instant::now();
                let outcome = client
                    .post(format!("{base}/order-maps?format=npy"))
                    .multipart(form)
                    .send()
                    .await;
                let status = match outcome {
                    Ok(r) => {
                        let status = r.status().as_u16();
                        let _ = r.bytes().await;
                        status
                    }
                    Err(_) => 0,
                };
                results.push((status, t0.elapsed()));
            }
            results
        }));
    }
    let mut latencies = Vec::new();
    let mut errors = std::collections::BTreeMap::<u16, usize>::new();
    for task in tasks {
        for (status, elapsed) in task.await.unwrap() {
            if status == 200 {
                latencies.push(elapsed);
            } else {
                *errors.entry(status).or_default() += 1;
            }
        }
    }
    latencies.sort();
    let total = latencies.len() + errors.values().sum::<usize>();
    println!(
        "{total} requests in {:.1} s: {} ok, errors {:?} (status 0 = connection failure)",
        started.elapsed().as_secs_f64(),
        latencies.len(),
        errors
    );
    println!(
        "latency p50 {:.2} s, p95 {:.2} s, max {:.2} s",
        percentile(&latencies, 50.0).as_secs_f64(),
        percentile(&latencies, 95.0).as_secs_f64(),
        latencies.last().copied().unwrap_or_default().as_secs_f64()
    );
}
