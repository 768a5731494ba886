//! The browser workbench in a real headless browser: starts the service in-process on
//! 127.0.0.1 with a fresh SQLite database and runs a script of `tests/browser/`, which drives
//! Debian's Chromium through playwright-core.
//!
//! - `workbench.mjs` (open mode, on photos written by `isotint demo`): calibrate from the beam
//!   photo, estimate its edge order from the colours and see a refused estimate explained,
//!   analyse the disc photo, hover, profile, download the NPY map named after the photo; then
//!   the σ1 − σ2 layer
//!   (MPa bar, lower bound, caution, download), the scale from two clicked points, the
//!   free-edge stress with K_t, the comparison with the disc's predicted field, the demo
//!   beam's edge stress against 6M/(t·d²), and the load-series page; back on the disc, the
//!   specimen found from the photo, outlined, and the whole photo instead; a failed run clears
//!   the old map; the built-in calibration's edge order, light and camera in words; no page
//!   wider than a 360 px screen; every input reachable at 1366 × 768.
//! - `token_mode.mjs` (token mode): sign in with a token, see the name and role, the actions
//!   hidden from a writer, 401 and 403 explained, the audit rows an admin sees, a download
//!   that carries the token.
//!
//! Needs /usr/bin/chromium, node and `tests/browser/node_modules` (see [`INSTALL`]). Without
//! them the tests fail when the environment variable `CI` is set and are skipped otherwise.
//! `ISOTINT_WORKBENCH_DEMO=DIR` runs the workbench on the photos in DIR (a `*beam*` and a
//! `*disc*` photo) instead of fresh demo photos.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::Command;

use isotint::access::{AccessMode, Actor, Origin, Role, Token, TokenName};
use isotint::calibration_sets::import_built_in;
use isotint::config::ServiceConfig;
use isotint::http::{app, AppState};
use isotint::storage::calibrations::{self, ListFilter};
use isotint::storage::{tokens, Storage};

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

/// The browser scripts' directory, or `None` (after saying so) when this machine lacks what
/// they need; under `CI` that is a failure.
fn browser_dir_or_skip() -> Option<PathBuf> {
    let browser_dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/browser");
    let missing = missing_tools(&browser_dir);
    if missing.is_empty() {
        return Some(browser_dir);
    }
    let what = missing.join(", ");
    if std::env::var_os("CI").is_some() {
        panic!("the browser test needs {what}; install with: {INSTALL}");
    }
    // Straight to stderr, past the test harness's capture, so that the skip is seen.
    let _ = writeln!(
        std::io::stderr(),
        "skipped: the browser test needs {what}; install with: {INSTALL}"
    );
    None
}

/// A fresh SQLite database in `scratch`.
async fn fresh_storage(scratch: &Path) -> Storage {
    let database = format!(
        "sqlite://{}?mode=rwc",
        scratch.join("isotint.sqlite").display()
    );
    Storage::connect(&database).await.expect("database")
}

/// Serves `storage` with `config` on a free loopback port while `node SCRIPT BASE_URL ARGS…`
/// runs in `browser_dir`; fails the test, with the script's steps, unless it succeeds.
async fn run_script(
    browser_dir: &Path,
    script: &str,
    storage: Storage,
    config: ServiceConfig,
    args: Vec<String>,
) {
    let state = AppState::new(storage, config);
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0")
        .await
        .expect("listen");
    let base_url = format!("http://{}/", listener.local_addr().expect("address"));
    let config = state.config.clone();
    let server = tokio::spawn(async move {
        isotint::service::serve(listener, app(state), &config, std::future::pending()).await
    });

    let script = browser_dir.join(script);
    let run = {
        let base_url = base_url.clone();
        tokio::task::spawn_blocking(move || {
            Command::new("node")
                .arg(&script)
                .arg(&base_url)
                .args(&args)
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

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn workbench_works_in_a_headless_browser() {
    let Some(browser_dir) = browser_dir_or_skip() else {
        return;
    };
    let scratch = tempfile::tempdir().expect("temp dir");
    let demo = demo_photos(scratch.path());
    let storage = fresh_storage(scratch.path()).await;
    // As a service start does: the calibration page is checked on the built-in demo set.
    import_built_in(&storage).await.expect("demo set imported");
    let args = vec![demo.display().to_string()];
    let config = ServiceConfig::default();
    run_script(&browser_dir, "workbench.mjs", storage, config, args).await;
}

/// Makes a token `name` with `role` on the database, as `isotint token create` does.
async fn token(storage: &Storage, name: &str, role: Role) -> String {
    let token = Token::generate().expect("random bytes");
    let name: TokenName = name.parse().expect("token name");
    let origin = Origin::local(Actor::CommandLine);
    tokens::create(storage, &name, role, &token.sha256(), &origin)
        .await
        .expect("token stored");
    token.reveal().to_string()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn in_token_mode_the_workbench_asks_for_a_token_and_shows_the_role_it_signed_in_with() {
    let Some(browser_dir) = browser_dir_or_skip() else {
        return;
    };
    let scratch = tempfile::tempdir().expect("temp dir");
    let storage = fresh_storage(scratch.path()).await;
    import_built_in(&storage).await.expect("demo set imported");
    let listed = calibrations::list(&storage, &ListFilter::default(), None, 1)
        .await
        .expect("calibrations listed");
    let args = vec![
        token(&storage, "lab-writer", Role::Writer).await,
        token(&storage, "lab-admin", Role::Admin).await,
        listed[0].id.to_string(),
    ];
    let config = ServiceConfig {
        access: AccessMode::Tokens,
        ..ServiceConfig::default()
    };
    run_script(&browser_dir, "token_mode.mjs", storage, config, args).await;
}
