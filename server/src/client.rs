//! `isotint client`: the scripts' side of the HTTP API. Maps many photos on a running service,
//! a few at a time, waits and retries when the service answers 503 (honouring `Retry-After`),
//! shows a progress bar on a terminal (plain lines otherwise) and ends with a summary.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Duration;

use anyhow::Context;
use clap::ValueEnum;
use indicatif::{ProgressBar, ProgressStyle};
use reqwest::multipart::{Form, Part};
use reqwest::StatusCode;
use tokio::sync::Semaphore;
use tokio::task::JoinSet;

use crate::cli::ClientMapArgs;

/// The file an order map comes back as.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum ClientFormat {
    /// NPY float32 of shape (height, width), fringes, NaN where no value.
    Npy,
    /// 16-bit greyscale PNG, grey = round(N × 1000), 65535 = no value.
    Png16,
    /// CSV, one row per pixel: x, y, order, residual, flags.
    Csv,
}

impl ClientFormat {
    /// The API's `format` name, which is also the file's extension.
    fn name(self) -> &'static str {
        match self {
            ClientFormat::Npy => "npy",
            ClientFormat::Png16 => "png16",
            ClientFormat::Csv => "csv",
        }
    }

    fn extension(self) -> &'static str {
        match self {
            ClientFormat::Png16 => "png",
            other => other.name(),
        }
    }
}

/// Some photos could not be mapped (the others were): the exit code says so.
#[derive(Debug, thiserror::Error)]
#[error("{failed} of {total} photos were not mapped")]
pub struct SomeFailed {
    /// Photos not mapped.
    pub failed: usize,
    /// Photos given.
    pub total: usize,
}

/// Exit code of a run in which some photos were not mapped.
pub const EXIT_SOME_FAILED: u8 = 3;

/// Longest wait honoured from a `Retry-After` header, seconds.
const LONGEST_WAIT_S: u64 = 60;
/// Wait after a 503 without `Retry-After`, seconds.
const DEFAULT_WAIT_S: u64 = 2;
/// Time limit of one request, uploads and answer included.
const REQUEST_TIME_LIMIT: Duration = Duration::from_secs(600);

/// Maps every photo of `run`, writing `out_dir/<stem>.<ext>`; prints one line per photo (or a
/// progress bar on a terminal) and a summary. Fails before sending anything when the flags do
/// not make sense, and with [`SomeFailed`] when some photos were not mapped.
pub async fn map_photos(run: ClientMapArgs) -> anyhow::Result<()> {
    let outputs = output_paths(&run)?;
    let mask = match &run.mask {
        Some(path) => Some(
            tokio::fs::read(path)
                .await
                .with_context(|| format!("--mask: cannot read {}", path.display()))?,
        ),
        None => None,
    };
    tokio::fs::create_dir_all(&run.out_dir)
        .await
        .with_context(|| format!("--out-dir: cannot create {}", run.out_dir.display()))?;
    let http = reqwest::Client::builder()
        .timeout(REQUEST_TIME_LIMIT)
        .build()
        .context("could not set up the HTTP client")?;
    let url = format!(
        "{}/api/v1/order-maps?format={}",
        run.server.trim_end_matches('/'),
        run.format.name()
    );
    let total = run.photos.len();
    let progress = if std::io::stderr().is_terminal() {
        let bar = ProgressBar::new(total as u64);
        bar.set_style(
            ProgressStyle::with_template("{bar:40} {pos}/{len} photos {elapsed} {msg}")
                .context("progress bar template")?,
        );
        Some(bar)
    } else {
        None
    };
    let slots = Arc::new(Semaphore::new(usize::from(run.jobs)));
    let shared = Arc::new((http, url, run.clone(), mask));
    let mut tasks = JoinSet::new();
    for (photo, out) in run.photos.iter().cloned().zip(outputs) {
        let (slots, shared) = (slots.clone(), shared.clone());
        tasks.spawn(async move {
            let _slot = slots.acquire_owned().await;
            let (http, url, run, mask) = &*shared;
            let outcome = map_one(http, url, run, mask.as_deref(), &photo, &out).await;
            (photo, out, outcome)
        });
    }
    let (mut failed, mut retried) = (0, 0);
    while let Some(joined) = tasks.join_next().await {
        let (photo, out, outcome) = joined.context("a photo's task stopped")?;
        let line = match outcome {
            Ok(retries) => {
                retried += retries;
                format!("ok     {} → {}", photo.display(), out.display())
            }
            Err(e) => {
                failed += 1;
                format!("failed {}: {e:#}", photo.display())
            }
        };
        match &progress {
            Some(bar) => {
                bar.println(line);
                bar.inc(1);
            }
            None => println!("{line}"),
        }
    }
    if let Some(bar) = progress {
        bar.finish_and_clear();
    }
    println!(
        "mapped {} of {total} photos into {} ({retried} retries after 503)",
        total - failed,
        run.out_dir.display()
    );
    if failed > 0 {
        return Err(SomeFailed { failed, total }.into());
    }
    Ok(())
}

/// `out_dir/<stem>.<ext>` for each photo; refuses two photos with one stem (one file would
/// overwrite the other) and an output that is one of the inputs.
fn output_paths(run: &ClientMapArgs) -> anyhow::Result<Vec<PathBuf>> {
    let mut outputs: Vec<PathBuf> = Vec::with_capacity(run.photos.len());
    for photo in &run.photos {
        let stem = photo
            .file_stem()
            .with_context(|| format!("PHOTO: {} names no file", photo.display()))?;
        let out = run
            .out_dir
            .join(Path::new(stem).with_extension(run.format.extension()));
        if outputs.contains(&out) {
            anyhow::bail!(
                "PHOTO: two photos would both be written to {}; give photos distinct names",
                out.display()
            );
        }
        let inputs = run.photos.iter().chain(run.mask.iter());
        if inputs.into_iter().any(|input| same_file(input, &out)) {
            anyhow::bail!(
                "--out-dir: {} would overwrite an input; choose another directory",
                out.display()
            );
        }
        outputs.push(out);
    }
    Ok(outputs)
}

/// Whether `a` and `b` name the same existing file.
fn same_file(a: &Path, b: &Path) -> bool {
    match (a.canonicalize(), b.canonicalize()) {
        (Ok(a), Ok(b)) => a == b,
        _ => false,
    }
}

/// Sends one photo until it is mapped, a 503 has been retried `run.retries` times, or the
/// service refuses it; writes the answer to `out` (through a temporary file, so that a cut
/// answer never looks whole). Returns the number of retries.
async fn map_one(
    http: &reqwest::Client,
    url: &str,
    run: &ClientMapArgs,
    mask: Option<&[u8]>,
    photo: &Path,
    out: &Path,
) -> anyhow::Result<u32> {
    let bytes = tokio::fs::read(photo)
        .await
        .with_context(|| format!("cannot read {}", photo.display()))?;
    let name = photo
        .file_name()
        .map_or_else(|| "photo".into(), |n| n.to_string_lossy().into_owned());
    let mut retries = 0;
    loop {
        let mut form = Form::new()
            .part("photo", Part::bytes(bytes.clone()).file_name(name.clone()))
            .text("calibration", run.calibration.clone());
        if let Some(mask) = mask {
            form = form.part("mask", Part::bytes(mask.to_vec()).file_name("mask.png"));
        }
        let mut request = http.post(url).multipart(form);
        if let Some(token) = &run.token {
            request = request.bearer_auth(token);
        }
        let reply = request
            .send()
            .await
            .with_context(|| format!("the service at {} did not answer", run.server))?;
        let status = reply.status();
        if status == StatusCode::SERVICE_UNAVAILABLE && retries < run.retries {
            let wait = retry_after_s(reply.headers()).unwrap_or(DEFAULT_WAIT_S);
            tokio::time::sleep(Duration::from_secs(wait.min(LONGEST_WAIT_S))).await;
            retries += 1;
            continue;
        }
        let body = reply.bytes().await.context("the answer was cut off")?;
        if !status.is_success() {
            anyhow::bail!("{status}: {}", error_message(&body));
        }
        let partial = out.with_extension("partial");
        tokio::fs::write(&partial, &body)
            .await
            .with_context(|| format!("cannot write {}", partial.display()))?;
        tokio::fs::rename(&partial, out)
            .await
            .with_context(|| format!("cannot write {}", out.display()))?;
        return Ok(retries);
    }
}

/// Seconds of a `Retry-After` header given in seconds (the service's form).
fn retry_after_s(headers: &reqwest::header::HeaderMap) -> Option<u64> {
    headers
        .get(reqwest::header::RETRY_AFTER)?
        .to_str()
        .ok()?
        .trim()
        .parse()
        .ok()
}

/// The message of the service's `{"error": {"code", "message"}}` answer, or the start of the
/// body when it is not one.
fn error_message(body: &[u8]) -> String {
    serde_json::from_slice::<serde_json::Value>(body)
        .ok()
        .and_then(|v| v["error"]["message"].as_str().map(str::to_string))
        .unwrap_or_else(|| crate::domain::shorten(&String::from_utf8_lossy(body), 200))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn retry_after_is_read_in_seconds_and_anything_else_is_ignored() {
        let mut headers = reqwest::header::HeaderMap::new();
        assert_eq!(retry_after_s(&headers), None);
        headers.insert(reqwest::header::RETRY_AFTER, "7".parse().unwrap());
        assert_eq!(retry_after_s(&headers), Some(7));
        headers.insert(
            reqwest::header::RETRY_AFTER,
            "Wed, 21 Oct 2026 07:28:00 GMT".parse().unwrap(),
        );
        assert_eq!(retry_after_s(&headers), None);
    }

    #[test]
    fn two_photos_with_one_stem_are_refused_before_anything_is_sent() {
        let run = ClientMapArgs {
            server: "http://127.0.0.1:9".into(),
            token: None,
            calibration: "x".into(),
            mask: None,
            format: ClientFormat::Png16,
            jobs: 1,
            retries: 0,
            out_dir: PathBuf::from("maps"),
            photos: vec![PathBuf::from("a/disc.jpg"), PathBuf::from("b/disc.png")],
        };
        let err = output_paths(&run).unwrap_err().to_string();
        assert!(
            err.contains("PHOTO") && err.contains("maps/disc.png"),
            "{err}"
        );
        let one = ClientMapArgs {
            photos: vec![PathBuf::from("a/disc.jpg")],
            ..run
        };
        assert_eq!(
            output_paths(&one).unwrap(),
            vec![PathBuf::from("maps/disc.png")]
        );
    }
}
