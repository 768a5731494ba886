//! The browser workbench in a real headless browser: starts the service in-process on
//! 127.0.0.1 with a fresh SQLite database, writes the demo photos with `isotint demo`, then runs
//! `node tests/browser/workbench.mjs BASE_URL DEMO_DIR`, which drives Debian's Chromium through
//! playwright-core (calibrate from the beam photo, estimate its edge order from the colours and
//! see a refused estimate explained, analyse the disc photo, hover, profile, download the NPY
//! map).
//!
//! Needs /usr/bin/chromium, node and `tests/browser/node_modules` (see [`INSTALL`]). Without
//! them the test fails when the environment variable `CI` is set and is skipped otherwise.
//! `ISOTINT_WORKBENCH_DEMO=DIR` runs it on the photos in DIR (a `*beam*` and a `*disc*` photo)
//! instead of fresh demo photos.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::Command;

use isotint::config::ServiceConfig;
use isotint::http::{app, AppState};
use isotint::storage::Storage;

const CHROMIUM: &str = "/usr/bin/chromium";
const INSTALL: &str =
    "apt-get update && apt-get install -y chromium nodejs npm && (cd tests/browser && npm ci)";

/// What the browser test needs that this machine lacks.
fn missing_tools(browser_dir: &Path) -> Vec<String> {
    let mut missing = Vec::new();
    if !Path::new(CHROMIUM).exists() {
        missing.push(CHROMIUM.to_string());
    }
    if Command::new("node").arg("--version").output().is_err() {
        missing.push("node".to_string());
    }
    let playwright = browser_dir.join("node_modules/playwright-core");
    if !playwright.exists() {
        missing.push(playwright.display().to_string());
    }
    missing
}

/// The demo photos: ISOTINT_WORKBENCH_DEMO if set, else fresh ones from `isotint demo`.
fn demo_photos(scratch: &Path) -> PathBuf {
    if let Some(dir) = std::env::var_os("ISOTINT_WORKBENCH_DEMO") {
        return PathBuf::from(dir);
    }
    let out = scratch.join("demo");
    let result = Command::new(env!("CARGO_BIN_EXE_isotint"))
        .arg("demo")
        .arg("--out")
        .arg(&out)
        .output()
        .expect("could not run isotint demo");
    assert!(
        result.status.success(),
        "isotint demo --out {} failed:\n{}",
        out.display(),
        String::from_utf8_lossy(&result.stderr)
    );
    out
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn workbench_works_in_a_headless_browser() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let browser_dir = root.join("tests/browser");
    let missing = missing_tools(&browser_dir);
    if !missing.is_empty() {
        let what = missing.join(", ");
        if std::env::var_os("CI").is_some() {
            panic!("the browser test needs {what}; install with: {INSTALL}");
        }
        // Straight to stderr, past the test harness's capture, so that the skip is seen.
        let _ = writeln!(
            std::io::stderr(),
            "skipped: the browser test needs {what}; install with: {INSTALL}"
        );
        return;
    }

    let scratch = tempfile::tempdir().expect("temp dir");
    let demo = demo_photos(scratch.path());
    let database = format!(
        "sqlite://{}?mode=rwc",
        scratch.path().join("isotint.sqlite").display()
    );
    let storage = Storage::connect(&database).await.expect("database");
    let state = AppState::new(storage, ServiceConfig::default());
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0")
        .await
        .expect("listen");
    let base_url = format!("http://{}/", listener.local_addr().expect("address"));
    let config = state.config.clone();
    let server = tokio::spawn(async move {
        isotint::service::serve(listener, app(state), &config, std::future::pending()).await
    });

    let script = browser_dir.join("workbench.mjs");
    let run = {
        let base_url = base_url.clone();
        tokio::task::spawn_blocking(move || {
            Command::new("node")
                .arg(&script)
                .arg(&base_url)
                .arg(&demo)
                .current_dir(script.parent().expect("tests/browser"))
                .output()
                .expect("could not run node")
        })
    };
    let output = run.await.expect("browser run");
    server.abort();

    let stdout = String::from_utf8_lossy(&output.stdout);
    let stderr = String::from_utf8_lossy(&output.stderr);
    println!("{stdout}");
    eprintln!("{stderr}");
    assert!(
        output.status.success(),
        "the workbench failed in the browser against {base_url} (see the steps above)"
    );
}
