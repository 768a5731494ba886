//! The OpenAPI description against the live service, judged by an independent property-based
//! API tester (schemathesis, pinned in `.ci/run`; settings and hooks in tests/api_conformance/):
//! the service on a loopback port, in token mode with an admin's token, on a fresh SQLite
//! database holding the demo calibration. It generates requests from the description alone —
//! valid and invalid, and chains along the description's links — and fails on any 5xx, any
//! answer or status code the description does not list, any schema-invalid request accepted,
//! and any schema-valid request refused for its form. Fixed seed, bounded examples and time;
//! skipped locally when the tester is not installed, which `.ci/run` does.

mod common;

use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use common::{python_with, start};
use isotint::access::{AccessMode, Actor, Origin, Role, Token, TokenName};
use isotint::config::ServiceConfig;
use isotint::storage::tokens;

/// Longest the tester may run.
const TIME_LIMIT: Duration = Duration::from_secs(600);

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn an_independent_api_tester_finds_the_service_as_its_openapi_description_says() {
    let Some(python) = python_with("schemathesis") else {
        return;
    };
    let server = start(ServiceConfig {
        access: AccessMode::Tokens,
        ..ServiceConfig::default()
    })
    .await;
    let storage = &server.svc.storage;
    isotint::calibration_sets::import_built_in(storage)
        .await
        .unwrap();
    let demo = isotint::storage::calibrations::list(
        storage,
        &isotint::storage::calibrations::ListFilter {
            text: None,
            include_archived: false,
        },
        None,
        1,
    )
    .await
    .unwrap()
    .remove(0)
    .id
    .to_string();
    let token = Token::generate().unwrap();
    let name: TokenName = "api-tester".parse().unwrap();
    let origin = Origin::local(Actor::CommandLine);
    tokens::create(storage, &name, Role::Admin, &token.sha256(), &origin)
        .await
        .unwrap();
    let settings = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/api_conformance");
    let url = format!("http://{}/api/v1/openapi.json", server.addr);
    let authorization = format!("Authorization: Bearer {}", token.reveal());
    let config = settings.join("schemathesis.toml");
    // The tester keeps a cache where it runs: a scratch directory, not the source tree.
    let log = tempfile::tempdir().unwrap();
    let scratch = log.path().to_path_buf();
    let (out_path, err_path) = (log.path().join("out.txt"), log.path().join("err.txt"));
    let (out_file, err_file) = (
        std::fs::File::create(&out_path).unwrap(),
        std::fs::File::create(&err_path).unwrap(),
    );
    let status = tokio::task::spawn_blocking(move || {
        let child = Command::new(python)
            .args([
                "-c",
                "import sys; from schemathesis.cli import schemathesis; sys.exit(schemathesis())",
                "--config-file",
                config.to_str().unwrap(),
                "run",
                &url,
                "--header",
                &authorization,
            ])
            .current_dir(&scratch)
            .env("PYTHONPATH", &settings)
            .env("PYTHONDONTWRITEBYTECODE", "1")
            .env("ISOTINT_DEMO_CALIBRATION", demo)
            .env("NO_COLOR", "1")
            .stdout(Stdio::from(out_file))
            .stderr(Stdio::from(err_file))
            .spawn()
            .expect("the tester starts");
        finish_within(child, TIME_LIMIT)
    })
    .await
    .unwrap();
    let stdout = std::fs::read_to_string(&out_path).unwrap();
    println!("{stdout}");
    assert!(
        status.success(),
        "the tester found mismatches:\n{stdout}{}",
        std::fs::read_to_string(&err_path).unwrap()
    );
    // Every operation the description holds was tested.
    let total = stdout
        .lines()
        .find_map(|l| l.trim().strip_prefix("Operations:"))
        .and_then(|l| l.split_whitespace().rev().nth(1))
        .expect("the tester names the operations' count")
        .to_string();
    assert!(stdout.contains(&format!("Tested: {total}")), "{stdout}");
}

/// Waits for `child`, killing it when it runs past `limit` (the test then fails).
fn finish_within(mut child: std::process::Child, limit: Duration) -> std::process::ExitStatus {
    let started = Instant::now();
    loop {
        if let Some(status) = child.try_wait().unwrap() {
            return status;
        }
        if started.elapsed() > limit {
            child.kill().unwrap();
            panic!("the tester ran past {limit:?}");
        }
        std::thread::sleep(Duration::from_millis(200));
    }
}
