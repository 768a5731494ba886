//! Load benchmark of the HTTP service on 127.0.0.1, with the default settings unless said:
//!
//! 1. One 12-megapixel JPEG mapped and stored alone, first: the process's peak resident memory
//!    above its resident memory before, per pixel (the admission's `JOB_BYTES_PER_PIXEL`).
//! 2. 20 clients × 3 requests of a 1-megapixel photo, NPY answers (`?format=npy`): errors and
//!    latency p50 / p95 / max.
//! 3. 20 concurrent 12-megapixel requests, stored: errors, peak resident memory.
//! 4. The stored size of a 12-megapixel map (its compact bands).
//! 5. 20 concurrent CSV downloads of that map (`max_downloads` raised to 20): errors, bytes,
//!    peak resident memory.
//!
//! Peak resident memory is the process's VmHWM, reset before each step (`clear_refs`); the
//! clients run in the same process and hold their photos (a few MB each) and nothing more
//! (downloads are counted, not kept). Bounded in count (`ISOTINT_BENCH_REQUESTS` per client in
//! step 1, default 3) and time (`ISOTINT_BENCH_SECONDS`, default 900: no request starts after
//! it). `ISOTINT_BENCH_12MP=0` runs step 2 only.
//!
//! Run with `cargo bench --bench concurrent_maps`.

use std::net::SocketAddr;
use std::path::PathBuf;
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
use sqlx::Row;

const CLIENTS: usize = 20;

/// Pixels of the 12-megapixel photo.
const PIXELS_12MP: f64 = 4000.0 * 3000.0;

fn env_number(name: &str, default: u64) -> u64 {
    std::env::var(name)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

fn setup() -> RenderSetup {
    RenderSetup {
        light: LightSource::Daylight,
        camera: CameraModel::Colorimetric,
        plates: QuarterWavePlates::Ideal,
        dispersion: 0.0,
        exposure: 0.9,
    }
}

/// A rendered disc photo `width` × `height` (centre order about 11 at 1 MP) in `encoding`.
fn disc_photo(width: u32, height: u32, encoding: PhotoEncoding) -> Vec<u8> {
    let side = f64::from(width.min(height));
    let disc = DiscField::new(
        PixelPoint {
            x: f64::from(width) / 2.0,
            y: f64::from(height) / 2.0,
        },
        side * 0.45,
        DiscInCompression::new(40.0, 6.0, 700.0).unwrap(),
        11.0,
    )
    .unwrap();
    let scene = render_scene(&disc, &Renderer::new(setup()).unwrap(), width, height, 1).unwrap();
    let fx = PhotoEffects {
        blur_sigma_px: 0.6,
        noise_sigma_codes: 1.0,
        ..PhotoEffects::default()
    };
    develop(&scene.image, &fx, encoding).unwrap()
}

/// The 12-megapixel JPEG (quality 90), rendered once into `target/bench-data/`.
fn twelve_megapixel_photo() -> Vec<u8> {
    let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target/bench-data");
    let path = dir.join("service-disc-12mp.jpg");
    if let Ok(bytes) = std::fs::read(&path) {
        return bytes;
    }
    let photo = disc_photo(4000, 3000, PhotoEncoding::Jpeg { quality: 90 });
    std::fs::create_dir_all(&dir).unwrap();
    std::fs::write(&path, &photo).unwrap();
    photo
}

fn table() -> String {
    rendered_table(
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
    .unwrap()
    .to_json()
}

async fn start_service(dir: &std::path::Path, config: ServiceConfig) -> (SocketAddr, Storage) {
    let url = format!("sqlite://{}?mode=rwc", dir.join("bench.sqlite").display());
    let storage = Storage::connect(&url).await.unwrap();
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let address = listener.local_addr().unwrap();
    let state = AppState::new(storage.clone(), config);
    let config = state.config.clone();
    tokio::spawn(async move {
        isotint::service::serve(listener, app(state), &config, std::future::pending()).await
    });
    (address, storage)
}

fn percentile(sorted: &[Duration], p: f64) -> Duration {
    if sorted.is_empty() {
        return Duration::ZERO;
    }
    let rank = ((p / 100.0) * (sorted.len() - 1) as f64).round() as usize;
    sorted[rank]
}

/// A `/proc/self/status` figure in bytes (`VmHWM`, `VmRSS`).
fn status_bytes(key: &str) -> u64 {
    let status = std::fs::read_to_string("/proc/self/status").unwrap();
    let line = status.lines().find(|l| l.starts_with(key)).unwrap();
    let kib: u64 = line.split_whitespace().nth(1).unwrap().parse().unwrap();
    kib * 1024
}

/// Resets the peak resident memory to the resident memory now.
fn reset_peak() {
    std::fs::write("/proc/self/clear_refs", "5").unwrap();
}

fn mib(bytes: u64) -> f64 {
    bytes as f64 / f64::from(1u32 << 20)
}

/// The outcome of many requests: status counts, latencies of the successes, bytes received.
#[derive(Default)]
struct Outcome {
    latencies: Vec<Duration>,
    errors: std::collections::BTreeMap<u16, usize>,
    bytes: u64,
}

impl Outcome {
    fn add(&mut self, status: u16, ok: u16, elapsed: Duration, bytes: u64) {
        if status == ok {
            self.latencies.push(elapsed);
            self.bytes += bytes;
        } else {
            *self.errors.entry(status).or_default() += 1;
        }
    }

    fn print(&mut self, what: &str, took: Duration) {
        self.latencies.sort();
        println!(
            "{what}: {} ok, errors {:?} (status 0 = connection failure) in {:.1} s; latency \
             p50 {:.2} s, p95 {:.2} s, max {:.2} s",
            self.latencies.len(),
            self.errors,
            took.as_secs_f64(),
            percentile(&self.latencies, 50.0).as_secs_f64(),
            percentile(&self.latencies, 95.0).as_secs_f64(),
            self.latencies
                .last()
                .copied()
                .unwrap_or_default()
                .as_secs_f64()
        );
    }
}

struct Bench {
    client: reqwest::Client,
    base: String,
    calibration: String,
    deadline: Instant,
}

impl Bench {
    async fn new(address: SocketAddr, deadline: Instant) -> Bench {
        let client = reqwest::Client::builder()
            .timeout(Duration::from_secs(900))
            .build()
            .unwrap();
        let base = format!("http://{address}/api/v1");
        let imported: serde_json::Value = client
            .post(format!("{base}/calibrations/import"))
            .header("content-type", "application/json")
            .body(table())
            .send()
            .await
            .unwrap()
            .json()
            .await
            .unwrap();
        let calibration = imported["id"].as_str().unwrap().to_string();
        Bench {
            client,
            base,
            calibration,
            deadline,
        }
    }

    /// Posts `photo` (`query` after the path); returns status, time, body bytes and the body
    /// if it is JSON.
    async fn map(&self, photo: Vec<u8>, query: &str) -> (u16, Duration, u64, serde_json::Value) {
        let form = reqwest::multipart::Form::new()
            .part(
                "photo",
                reqwest::multipart::Part::bytes(photo).file_name("disc"),
            )
            .text("calibration", self.calibration.clone());
        let t0 = Instant::now();
        let outcome = self
            .client
            .post(format!("{}/order-maps{query}", self.base))
            .multipart(form)
            .send()
            .await;
        match outcome {
            Ok(r) => {
                let status = r.status().as_u16();
                let body = r.bytes().await.unwrap_or_default();
                let json = serde_json::from_slice(&body).unwrap_or_default();
                (status, t0.elapsed(), body.len() as u64, json)
            }
            Err(_) => (0, t0.elapsed(), 0, serde_json::Value::Null),
        }
    }

    /// `per_client` requests of `photo` from each of 20 clients at once.
    async fn crowd(&self, photo: &[u8], query: &str, per_client: u64, ok: u16) -> Outcome {
        let mut tasks = tokio::task::JoinSet::new();
        for _ in 0..CLIENTS {
            let (bench, photo, query) = (self.clone_handle(), photo.to_vec(), query.to_string());
            tasks.spawn(async move {
                let mut results = Vec::new();
                for _ in 0..per_client {
                    if Instant::now() >= bench.deadline {
                        break;
                    }
                    let (status, elapsed, bytes, _) = bench.map(photo.clone(), &query).await;
                    results.push((status, elapsed, bytes));
                }
                results
            });
        }
        let mut outcome = Outcome::default();
        for (status, elapsed, bytes) in tasks.join_all().await.into_iter().flatten() {
            outcome.add(status, ok, elapsed, bytes);
        }
        outcome
    }

    fn clone_handle(&self) -> Bench {
        Bench {
            client: self.client.clone(),
            base: self.base.clone(),
            calibration: self.calibration.clone(),
            deadline: self.deadline,
        }
    }

    /// 20 concurrent downloads of `link`, counted and dropped as they arrive.
    async fn downloads(&self, link: &str) -> Outcome {
        let mut tasks = tokio::task::JoinSet::new();
        for _ in 0..CLIENTS {
            let (client, url) = (self.client.clone(), format!("http://{}{link}", self.host()));
            tasks.spawn(async move {
                let t0 = Instant::now();
                let Ok(mut reply) = client.get(url).send().await else {
                    return (0, t0.elapsed(), 0);
                };
                let status = reply.status().as_u16();
                let mut bytes = 0u64;
                while let Ok(Some(chunk)) = reply.chunk().await {
                    bytes += chunk.len() as u64;
                }
                (status, t0.elapsed(), bytes)
            });
        }
        let mut outcome = Outcome::default();
        for (status, elapsed, bytes) in tasks.join_all().await {
            outcome.add(status, 200, elapsed, bytes);
        }
        outcome
    }

    fn host(&self) -> &str {
        self.base
            .trim_start_matches("http://")
            .trim_end_matches("/api/v1")
    }
}

#[tokio::main]
async fn main() {
    let per_client = env_number("ISOTINT_BENCH_REQUESTS", 3);
    let deadline = Instant::now() + Duration::from_secs(env_number("ISOTINT_BENCH_SECONDS", 900));
    let dir = tempfile::tempdir().unwrap();
    let config = ServiceConfig {
        request_timeout: Duration::from_secs(600),
        max_downloads: CLIENTS,
        ..ServiceConfig::default()
    };
    println!(
        "settings: {} CPU slots, memory budget {:.0} MiB, queue memory {:.0} MiB, wait limit {:?}",
        config.max_jobs,
        mib(config.memory_budget_bytes),
        mib(config.queue_memory_bytes),
        config.job_wait_limit
    );
    let (address, storage) = start_service(dir.path(), config).await;
    let bench = Bench::new(address, deadline).await;

    let twelve = env_number("ISOTINT_BENCH_12MP", 1) != 0;
    // Measured first, while the process has touched little memory.
    let (large, stored) = if twelve {
        let photo = twelve_megapixel_photo();
        println!("1. one 12-MP JPEG ({} KiB), stored", photo.len() / 1024);
        let before = status_bytes("VmRSS:");
        reset_peak();
        let (status, took, _, stored) = bench.map(photo.clone(), "").await;
        let peak = status_bytes("VmHWM:").saturating_sub(before);
        println!(
            "   status {status} in {:.2} s; peak {:.0} MiB above {:.0} MiB before: {:.1} \
             bytes/pixel",
            took.as_secs_f64(),
            mib(peak),
            mib(before),
            peak as f64 / PIXELS_12MP
        );
        (photo, stored)
    } else {
        (Vec::new(), serde_json::Value::Null)
    };

    let photo = disc_photo(1000, 1000, PhotoEncoding::Png8);
    println!(
        "2. {CLIENTS} clients × {per_client} requests, photo 1000×1000 ({} KiB)",
        photo.len() / 1024
    );
    let started = Instant::now();
    bench
        .crowd(&photo, "?format=npy", per_client, 200)
        .await
        .print("   1-MP maps", started.elapsed());
    if !twelve {
        return;
    }
    let (photo, pixels) = (large, PIXELS_12MP);

    println!("3. {CLIENTS} concurrent 12-MP requests, stored");
    let before = status_bytes("VmRSS:");
    reset_peak();
    let started = Instant::now();
    bench
        .crowd(&photo, "", 1, 201)
        .await
        .print("   12-MP maps", started.elapsed());
    println!(
        "   peak resident memory {:.0} MiB ({:.0} MiB before the step)",
        mib(status_bytes("VmHWM:")),
        mib(before)
    );

    let id = stored["id"].as_str().unwrap_or_default().to_string();
    let row = sqlx::query(
        "SELECT COUNT(*) AS bands, SUM(LENGTH(data)) AS bytes FROM order_map_bands \
         WHERE order_map_id = $1",
    )
    .bind(&id)
    .fetch_one(storage.pool())
    .await
    .unwrap();
    let (bands, bytes): (i64, i64) = (row.get("bands"), row.get("bytes"));
    println!(
        "4. stored 12-MP map: {bands} bands, {:.1} MiB ({:.2} bytes/pixel)",
        mib(bytes as u64),
        bytes as f64 / pixels
    );

    println!("5. {CLIENTS} concurrent CSV downloads of it");
    let before = status_bytes("VmRSS:");
    reset_peak();
    let started = Instant::now();
    let mut downloads = bench
        .downloads(&format!("/api/v1/order-maps/{id}/csv"))
        .await;
    downloads.print("   CSV downloads", started.elapsed());
    println!(
        "   {:.0} MiB each; peak resident memory {:.0} MiB ({:.0} MiB before the step)",
        mib(downloads.bytes / downloads.latencies.len().max(1) as u64),
        mib(status_bytes("VmHWM:")),
        mib(before)
    );
}
