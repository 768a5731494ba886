//! `isotint client map` against the real service on a loopback port: every photo comes back as
//! a file named after it, a busy service is waited for and retried, and refusals end in the
//! documented exit code. Loopback only, bounded in count and time.

mod common;

use std::path::Path;
use std::process::{Command, Output};
use std::time::Duration;

use common::{grey_png, import_id, start, table};
use isotint::config::ServiceConfig;

/// Runs the `isotint` binary off the async executor (the service runs on it).
async fn isotint(args: Vec<String>) -> Output {
    tokio::task::spawn_blocking(move || {
        Command::new(env!("CARGO_BIN_EXE_isotint"))
            .args(&args)
            .env_remove("ISOTINT_TOKEN")
            .output()
            .expect("the isotint binary runs")
    })
    .await
    .unwrap()
}

/// Writes `count` small grey photos into `dir`, returning their paths as arguments.
fn photos(dir: &Path, count: usize) -> Vec<String> {
    (0..count)
        .map(|i| {
            let path = dir.join(format!("bay-{i}.png"));
            std::fs::write(&path, grey_png(40 + i as u32, 30)).unwrap();
            path.to_str().unwrap().to_string()
        })
        .collect()
}

fn map_args(server: &str, calibration: &str, out: &Path, extra: &[&str]) -> Vec<String> {
    let mut args: Vec<String> = [
        "client",
        "map",
        "--server",
        server,
        "--calibration",
        calibration,
        "--out-dir",
        out.to_str().unwrap(),
    ]
    .iter()
    .chain(extra)
    .map(|s| s.to_string())
    .collect();
    args.retain(|a| !a.is_empty());
    args
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn every_photo_comes_back_as_an_npy_file_named_after_it() {
    let server = start(ServiceConfig::default()).await;
    let id = import_id(&server.svc.app, &table("Strip for the script")).await;
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("maps");
    let mut args = map_args(
        &format!("http://{}", server.addr),
        &id,
        &out,
        &["--jobs", "3"],
    );
    args.extend(photos(dir.path(), 4));
    let run = isotint(args).await;
    let stdout = String::from_utf8_lossy(&run.stdout);
    assert!(
        run.status.success(),
        "{stdout}{}",
        String::from_utf8_lossy(&run.stderr)
    );
    assert!(stdout.contains("mapped 4 of 4 photos"), "{stdout}");
    for i in 0..4 {
        let file = std::fs::read(out.join(format!("bay-{i}.npy"))).unwrap();
        // source: NumPy NPY format 1.0 (magic string and the array's shape in the header).
        assert_eq!(&file[..6], b"\x93NUMPY");
        let header = String::from_utf8_lossy(&file[10..]);
        assert!(header.contains(&format!("(30, {})", 40 + i)), "{header}");
    }
    assert!(!out.join("bay-0.partial").exists());
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_busy_service_is_waited_for_and_every_photo_still_comes_back() {
    // One job at a time, and a wait limit so short that every photo but the first is refused
    // 503 at first: the client waits for Retry-After and sends again.
    let config = ServiceConfig {
        max_jobs: 1,
        job_wait_limit: Duration::from_millis(1),
        ..ServiceConfig::default()
    };
    let server = start(config).await;
    let id = import_id(&server.svc.app, &table("Strip for the queue")).await;
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("maps");
    let server_url = format!("http://{}", server.addr);
    let extra = ["--jobs", "3", "--format", "png16", "--retries", "20"];
    let mut args = map_args(&server_url, &id, &out, &extra);
    // Photos large enough that mapping one outlasts the wait limit.
    args.extend((0..3).map(|i| {
        let path = dir.path().join(format!("bay-{i}.png"));
        std::fs::write(&path, grey_png(600, 400)).unwrap();
        path.to_str().unwrap().to_string()
    }));
    let run = tokio::time::timeout(Duration::from_secs(120), isotint(args))
        .await
        .expect("the client finishes in bounded time");
    let stdout = String::from_utf8_lossy(&run.stdout);
    assert!(
        run.status.success(),
        "{stdout}{}",
        String::from_utf8_lossy(&run.stderr)
    );
    assert!(stdout.contains("mapped 3 of 3 photos"), "{stdout}");
    let retries: u32 = stdout
        .split(" retries after 503")
        .next()
        .and_then(|s| s.rsplit('(').next())
        .and_then(|n| n.parse().ok())
        .expect("the summary counts the retries");
    assert!(retries >= 1, "{stdout}");
    for i in 0..3 {
        assert!(out.join(format!("bay-{i}.png")).exists());
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn photos_the_service_refuses_end_in_exit_code_three_with_its_message() {
    let server = start(ServiceConfig::default()).await;
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("maps");
    let unknown = "8d0c5a4e-1f7b-4c1e-9a51-2f0c6b7d9e31";
    let mut args = map_args(&format!("http://{}", server.addr), unknown, &out, &[]);
    args.extend(photos(dir.path(), 2));
    let run = isotint(args).await;
    let stdout = String::from_utf8_lossy(&run.stdout);
    assert_eq!(run.status.code(), Some(3), "{stdout}");
    assert!(
        stdout.contains("failed") && stdout.contains("404"),
        "{stdout}"
    );
    assert!(stdout.contains("mapped 0 of 2 photos"), "{stdout}");
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert!(stderr.contains("2 of 2 photos were not mapped"), "{stderr}");
}

#[tokio::test]
async fn a_bad_flag_is_named_and_nothing_is_sent() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("maps");
    let mut args = map_args(
        "http://127.0.0.1:9",
        "x",
        &out,
        &["--mask", "/no/such/mask.png"],
    );
    args.extend(photos(dir.path(), 1));
    let run = isotint(args).await;
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert_eq!(run.status.code(), Some(1), "{stderr}");
    assert!(stderr.contains("--mask"), "{stderr}");
    assert!(!out.exists());
}
