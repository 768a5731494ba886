//! `isotint client` against the real service on a loopback port: every photo comes back as a
//! file named after it, a beam photo becomes a stored calibration, a load series comes back as
//! JSON, a busy service is waited for and retried, refusals end in the documented exit code,
//! and an https URL is spoken to in TLS. Loopback only, bounded in count and time.

mod common;

use std::path::Path;
use std::process::{Command, Output};
use std::time::Duration;

use common::{
    beam_photo, disc_photo_at, get, grey_png, import_id, start, table, BEAM_EDGE_ORDER,
    DISC_FRINGE_VALUE,
};
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

/// The arguments of an `isotint client` command: `command`, the server, then `rest`.
fn client_args(command: &str, server: &str, rest: &[&str]) -> Vec<String> {
    ["client", command, "--server", server]
        .iter()
        .chain(rest)
        .map(|s| s.to_string())
        .collect()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_beam_photo_becomes_a_stored_calibration_whose_id_is_printed_last() {
    let server = start(ServiceConfig::default()).await;
    let dir = tempfile::tempdir().unwrap();
    let (beam, region) = beam_photo();
    let photo = dir.path().join("beam.png");
    std::fs::write(&photo, &beam.png).unwrap();
    let region_flag = format!(
        "{},{},{},{}",
        region.left, region.top, region.right, region.bottom
    );
    let edge_order = BEAM_EDGE_ORDER.to_string();
    let args = client_args(
        "calibrate",
        &format!("http://{}", server.addr),
        &[
            "--photo",
            photo.to_str().unwrap(),
            "--region",
            &region_flag,
            "--edge-order",
            &edge_order,
            "--name",
            "Strip BT-7 from the script",
            "--material",
            "cast epoxy",
        ],
    );
    let run = isotint(args).await;
    let stdout = String::from_utf8_lossy(&run.stdout);
    assert!(
        run.status.success(),
        "{stdout}{}",
        String::from_utf8_lossy(&run.stderr)
    );
    assert!(stdout.contains("residual"), "{stdout}");
    let id = stdout.lines().last().unwrap().trim();
    let stored = get(&server.svc.app, &format!("/api/v1/calibrations/{id}")).await;
    assert_eq!(stored.status, 200, "{id}: {stdout}");
    let v = stored.json();
    assert_eq!(v["name"], "Strip BT-7 from the script");
    assert_eq!(v["material"], "cast epoxy");
    assert_eq!(v["source_kind"], "beam_photo");
    // The table was measured on the photo, region and edge order the command was given.
    let source = &v["table"]["source"];
    assert_eq!(source["edge_order"], BEAM_EDGE_ORDER, "{source}");
    assert_eq!(source["region"], common::region_json(&region), "{source}");
    assert_eq!(
        (
            source["photo_width"].as_u64(),
            source["photo_height"].as_u64()
        ),
        (Some(600), Some(240))
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_correction_of_an_unknown_calibration_is_refused_with_exit_code_three_and_nothing_is_stored(
) {
    let server = start(ServiceConfig::default()).await;
    let dir = tempfile::tempdir().unwrap();
    let photo = dir.path().join("beam.png");
    std::fs::write(&photo, grey_png(80, 60)).unwrap();
    let args = client_args(
        "calibrate",
        &format!("http://{}", server.addr),
        &[
            "--photo",
            photo.to_str().unwrap(),
            "--region",
            "10,10,70,50",
            "--edge-order",
            "2",
            "--supersedes",
            "8d0c5a4e-1f7b-4c1e-9a51-2f0c6b7d9e31",
        ],
    );
    let run = isotint(args).await;
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert_eq!(run.status.code(), Some(3), "{stderr}");
    assert!(
        stderr.contains("not stored") && stderr.contains("404"),
        "{stderr}"
    );
    let listed = get(&server.svc.app, "/api/v1/calibrations").await.json();
    assert_eq!(listed["total"], 0, "{listed}");
}

#[tokio::test]
async fn a_calibration_with_a_bad_flag_names_it_and_sends_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let photo = dir.path().join("beam.png");
    std::fs::write(&photo, grey_png(80, 60)).unwrap();
    // Nothing listens on port 9 of loopback: a request would fail with another message.
    let args = client_args(
        "calibrate",
        "http://127.0.0.1:9",
        &[
            "--photo",
            photo.to_str().unwrap(),
            "--region",
            "10,10,70,50",
            "--edge-order",
            "-2",
        ],
    );
    let run = isotint(args).await;
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert_eq!(run.status.code(), Some(1), "{stderr}");
    assert!(stderr.contains("--edge-order"), "{stderr}");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_load_series_is_fitted_on_the_service_and_its_json_answer_written() {
    let server = start(ServiceConfig::default()).await;
    let id = import_id(&server.svc.app, &table("Strip for the series")).await;
    let dir = tempfile::tempdir().unwrap();
    // Centre orders 1 and 2.5 of the test disc: P = N·π·D·f_σ/8 = N · 172.8 N.
    let mut rest: Vec<String> = ["--calibration", &id].map(String::from).to_vec();
    for (i, load) in [172.8, 432.0].into_iter().enumerate() {
        let disc = disc_photo_at(load, 360);
        if i == 0 {
            let mask = dir.path().join("disc-mask.png");
            std::fs::write(&mask, &disc.mask_png).unwrap();
            rest.extend(["--mask".into(), mask.to_str().unwrap().into()]);
        }
        let photo = dir.path().join(format!("disc-{i}.png"));
        std::fs::write(&photo, &disc.png).unwrap();
        rest.extend(["--photo".into(), photo.to_str().unwrap().into()]);
        rest.extend(["--load-n".into(), load.to_string()]);
    }
    let out = dir.path().join("series.json");
    rest.extend(
        [
            "--disc-diameter-mm",
            "40",
            "--thickness-mm",
            "6",
            "--out",
            out.to_str().unwrap(),
        ]
        .map(String::from),
    );
    let rest: Vec<&str> = rest.iter().map(String::as_str).collect();
    let run = isotint(client_args(
        "series",
        &format!("http://{}", server.addr),
        &rest,
    ))
    .await;
    assert!(
        run.status.success(),
        "{}{}",
        String::from_utf8_lossy(&run.stdout),
        String::from_utf8_lossy(&run.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&std::fs::read(&out).unwrap()).unwrap();
    common::assert_numbers(&v, &common::SERIES_FIELDS);
    // source: Timoshenko & Goodier, Theory of Elasticity §41: σ1 − σ2 = 8P/(πDh) at the centre.
    let f = v["fringe_value"].as_f64().unwrap();
    assert!(
        (f - DISC_FRINGE_VALUE).abs() <= 0.02 * DISC_FRINGE_VALUE,
        "{v}"
    );
}

#[tokio::test]
async fn a_series_with_fewer_loads_than_photos_names_the_flag_and_sends_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let paths: Vec<String> = photos(dir.path(), 2);
    let run = isotint(client_args(
        "series",
        "http://127.0.0.1:9",
        &[
            "--calibration",
            "8d0c5a4e-1f7b-4c1e-9a51-2f0c6b7d9e31",
            "--mask",
            &paths[0],
            "--photo",
            &paths[0],
            "--photo",
            &paths[1],
            "--load-n",
            "100",
        ],
    ))
    .await;
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert_eq!(run.status.code(), Some(1), "{stderr}");
    assert!(stderr.contains("--load-n"), "{stderr}");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn an_https_server_is_spoken_to_in_tls() {
    // A listener that records the first bytes the client sends and then hangs up.
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let addr = listener.local_addr().unwrap();
    let first_bytes = tokio::spawn(async move {
        use tokio::io::AsyncReadExt;
        let (mut socket, _) = listener.accept().await.unwrap();
        let mut bytes = [0u8; 3];
        socket.read_exact(&mut bytes).await.unwrap();
        bytes
    });
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("maps");
    let mut args = map_args(
        &format!("https://{addr}"),
        "8d0c5a4e-1f7b-4c1e-9a51-2f0c6b7d9e31",
        &out,
        &["--retries", "0"],
    );
    args.extend(photos(dir.path(), 1));
    let run = tokio::time::timeout(Duration::from_secs(60), isotint(args))
        .await
        .expect("the client gives up on a server that hangs up");
    // source: RFC 8446 §5.1: a TLS record starts with its content type, 22 = handshake, then
    // the legacy record version 0x03 0x01 or 0x03 0x03.
    let bytes = first_bytes.await.unwrap();
    assert_eq!(bytes[0], 22, "{bytes:?}");
    assert_eq!(bytes[1], 3, "{bytes:?}");
    assert_eq!(run.status.code(), Some(3));
}
