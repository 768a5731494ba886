//! The README's Python example, run as it is written (the fenced block read out of README.md)
//! against the real service on a loopback port, with the demo calibration and the demo photos.
//! Bounded in time; skipped locally without Python's `requests`, which `.ci/run` installs.

mod common;

use std::path::Path;
use std::process::Command;
use std::time::Duration;

use common::{python_with, start};
use isotint::config::ServiceConfig;

/// The text of the README's one ```python block.
fn readme_python() -> String {
    let readme = std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("README.md"))
        .expect("README.md");
    let start = readme
        .find("```python\n")
        .expect("README has a python block")
        + 10;
    let end = start + readme[start..].find("```").expect("the block ends");
    assert!(
        !readme[end + 3..].contains("```python"),
        "README has more than one python block"
    );
    readme[start..end].to_string()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_readme_python_example_maps_the_demo_disc_on_the_running_service() {
    let Some(python) = python_with("requests") else {
        return;
    };
    let server = start(ServiceConfig::default()).await;
    isotint::calibration_sets::import_built_in(&server.svc.storage)
        .await
        .unwrap();
    let dir = tempfile::tempdir().unwrap();
    let (bin, cwd) = (env!("CARGO_BIN_EXE_isotint"), dir.path().to_path_buf());
    let script = readme_python();
    let url = format!("http://{}", server.addr);
    let run = tokio::time::timeout(
        Duration::from_secs(300),
        tokio::task::spawn_blocking(move || {
            let demo = Command::new(bin)
                .args(["demo", "--out", "demo"])
                .current_dir(&cwd)
                .output()
                .unwrap();
            assert!(demo.status.success(), "{demo:?}");
            Command::new(python)
                .args(["-c", &script])
                .current_dir(&cwd)
                .env("ISOTINT_SERVER", url)
                .output()
                .unwrap()
        }),
    )
    .await
    .expect("the example finishes in bounded time")
    .unwrap();
    let stdout = String::from_utf8_lossy(&run.stdout);
    assert!(
        run.status.success(),
        "{stdout}{}",
        String::from_utf8_lossy(&run.stderr)
    );
    // The demo disc photo is 600 × 600 pixels (render::demo); the example prints its size and
    // the peak σ1 − σ2 in MPa.
    let line = stdout.lines().last().unwrap_or_default();
    let words: Vec<&str> = line.split_whitespace().collect();
    assert_eq!(words.get(..2), Some(&["600", "600"][..]), "{stdout}");
    let mpa = words
        .iter()
        .position(|w| *w == "MPa")
        .expect("a stress in MPa");
    let peak: f64 = words[mpa - 1].parse().expect("a number before MPa");
    assert!(peak.is_finite() && peak > 0.0, "{stdout}");
}
