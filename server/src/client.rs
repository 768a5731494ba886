//! `isotint client`: the scripts' side of the HTTP API. Maps many photos on a running service,
//! a few at a time, measures a calibration from a beam photo, fits a load series; every request
//! waits and is sent again when the service answers 503 (honouring `Retry-After`). `client map`
//! shows a progress bar on a terminal (plain lines otherwise) and ends with a summary. Plain
//! `http://` and `https://` (rustls, the machine's trusted certificates) URLs are both spoken.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Duration;

use anyhow::Context;
use clap::ValueEnum;
use indicatif::{ProgressBar, ProgressStyle};
use isotint_core::beam::{BeamReport, BeamSpec, EdgeLoadFields};
use reqwest::multipart::{Form, Part};
use reqwest::StatusCode;
use tokio::sync::Semaphore;
use tokio::task::JoinSet;

use crate::cli::{
    report_text, with_flags, ClientCalibrateArgs, ClientCommand, ClientMapArgs, ClientSeriesArgs,
    ServiceArgs,
};
use crate::domain::CalibrationId;

/// Runs an `isotint client` command.
pub async fn run(command: ClientCommand) -> anyhow::Result<()> {
    match command {
        ClientCommand::Map(args) => map_photos(args).await,
        ClientCommand::Calibrate(args) => calibrate(args).await,
        ClientCommand::Series(args) => series(args).await,
    }
}

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

/// A client run that sent its requests but did not get everything done: exit code
/// [`EXIT_NOT_DONE`].
#[derive(Debug, thiserror::Error)]
pub enum NotDone {
    /// Some photos of `client map` were not mapped (the others were).
    #[error("{failed} of {total} photos were not mapped")]
    SomePhotos {
        /// Photos not mapped.
        failed: usize,
        /// Photos given.
        total: usize,
    },
    /// The one request of `client calibrate` or `client series` was refused, or the service
    /// stayed busy or did not answer.
    #[error("{0}")]
    Refused(String),
}

/// Exit code of a client run that sent its requests but did not get everything done.
pub const EXIT_NOT_DONE: u8 = 3;

/// Longest wait honoured from a `Retry-After` header, seconds.
const LONGEST_WAIT_S: u64 = 60;
/// Wait after a 503 without `Retry-After`, seconds.
const DEFAULT_WAIT_S: u64 = 2;
/// Time limit of one request, uploads and answer included.
const REQUEST_TIME_LIMIT: Duration = Duration::from_secs(600);

/// A running service as the client commands reach it: one HTTP client (plain HTTP or TLS),
/// the base URL, the token and the retry budget.
#[derive(Debug)]
struct Service {
    http: reqwest::Client,
    base: String,
    token: Option<String>,
    retries: u32,
}

/// A request the service carried out.
#[derive(Debug)]
struct Answer {
    /// The answer's body.
    body: axum::body::Bytes,
    /// How often the request was sent again after a 503.
    retries: u32,
}

impl Service {
    /// The service `args` names; refuses a `--server` that is not an http(s) URL.
    fn new(args: &ServiceArgs) -> anyhow::Result<Self> {
        let url = reqwest::Url::parse(&args.server)
            .with_context(|| format!("--server: {:?} is not a URL", args.server))?;
        if !matches!(url.scheme(), "http" | "https") || !url.has_host() {
            anyhow::bail!(
                "--server: {:?} is not an http:// or https:// URL of a host",
                args.server
            );
        }
        let http = reqwest::Client::builder()
            .timeout(REQUEST_TIME_LIMIT)
            .build()
            .context("could not set up the HTTP client")?;
        Ok(Service {
            http,
            base: args.server.trim_end_matches('/').to_string(),
            token: args.token.clone(),
            retries: args.retries,
        })
    }

    /// POSTs the multipart form `form` makes to `path` (with its query) until the service
    /// answers other than 503 or `--retries` retries are spent, waiting as `Retry-After` asks
    /// between tries. Fails with the service's message (in flag names) when it refuses.
    async fn post(&self, path: &str, form: impl Fn() -> Form) -> anyhow::Result<Answer> {
        let url = format!("{}{path}", self.base);
        let mut retries = 0;
        loop {
            let mut request = self.http.post(&url).multipart(form());
            if let Some(token) = &self.token {
                request = request.bearer_auth(token);
            }
            let reply = request
                .send()
                .await
                .with_context(|| format!("the service at {} did not answer", self.base))?;
            let status = reply.status();
            if status == StatusCode::SERVICE_UNAVAILABLE && retries < self.retries {
                let wait = retry_after_s(reply.headers()).unwrap_or(DEFAULT_WAIT_S);
                tokio::time::sleep(Duration::from_secs(wait.min(LONGEST_WAIT_S))).await;
                retries += 1;
                continue;
            }
            let body = reply.bytes().await.context("the answer was cut off")?;
            if !status.is_success() {
                anyhow::bail!("{status}: {}", with_flags(&error_message(&body)));
            }
            return Ok(Answer { body, retries });
        }
    }
}

/// Reads an input file; the error names its flag.
async fn read_input(path: &Path, flag: &str) -> anyhow::Result<Vec<u8>> {
    tokio::fs::read(path)
        .await
        .with_context(|| format!("{flag}: cannot read {}", path.display()))
}

/// A file part named after `path`'s file name.
fn file_part(bytes: &[u8], path: &Path) -> Part {
    let name = path
        .file_name()
        .map_or_else(|| "photo".into(), |n| n.to_string_lossy().into_owned());
    Part::bytes(bytes.to_vec()).file_name(name)
}

/// A JSON part.
fn json_part(json: &str) -> Part {
    Part::text(json.to_string())
        .mime_str("application/json")
        .expect("application/json is a MIME type")
}

/// Writes `bytes` to `out` through a temporary file beside it, so that a cut answer never
/// looks whole.
async fn write_whole(out: &Path, bytes: &[u8]) -> anyhow::Result<()> {
    let partial = out.with_extension("partial");
    tokio::fs::write(&partial, bytes)
        .await
        .with_context(|| format!("cannot write {}", partial.display()))?;
    tokio::fs::rename(&partial, out)
        .await
        .with_context(|| format!("cannot write {}", out.display()))
}

/// Maps every photo of `run`, writing `out_dir/<stem>.<ext>`; prints one line per photo (or a
/// progress bar on a terminal) and a summary. Fails before sending anything when the flags do
/// not make sense, and with [`NotDone::SomePhotos`] when some photos were not mapped.
pub async fn map_photos(run: ClientMapArgs) -> anyhow::Result<()> {
    let outputs = output_paths(&run)?;
    let service = Service::new(&run.service)?;
    let mask = match &run.mask {
        Some(path) => Some(read_input(path, "--mask").await?),
        None => None,
    };
    tokio::fs::create_dir_all(&run.out_dir)
        .await
        .with_context(|| format!("--out-dir: cannot create {}", run.out_dir.display()))?;
    let path = format!("/api/v1/order-maps?format={}", run.format.name());
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
    let shared = Arc::new((service, path, run.calibration.clone(), mask));
    let mut tasks = JoinSet::new();
    for (photo, out) in run.photos.iter().cloned().zip(outputs) {
        let (slots, shared) = (slots.clone(), shared.clone());
        tasks.spawn(async move {
            let _slot = slots.acquire_owned().await;
            let (service, path, calibration, mask) = &*shared;
            let outcome = map_one(service, path, calibration, mask.as_deref(), &photo, &out).await;
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
        return Err(NotDone::SomePhotos { failed, total }.into());
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

/// Maps one photo and writes the answer to `out`. Returns the number of retries.
async fn map_one(
    service: &Service,
    path: &str,
    calibration: &str,
    mask: Option<&[u8]>,
    photo: &Path,
    out: &Path,
) -> anyhow::Result<u32> {
    let bytes = tokio::fs::read(photo)
        .await
        .with_context(|| format!("cannot read {}", photo.display()))?;
    let form = || {
        let form = Form::new()
            .part("photo", file_part(&bytes, photo))
            .text("calibration", calibration.to_string());
        match mask {
            Some(mask) => form.part("mask", Part::bytes(mask.to_vec()).file_name("mask.png")),
            None => form,
        }
    };
    let answer = service.post(path, form).await?;
    write_whole(out, &answer.body).await?;
    Ok(answer.retries)
}

/// What a stored calibration's answer tells the client.
#[derive(Debug, serde::Deserialize)]
struct StoredCalibration {
    id: String,
    name: String,
    report: BeamReport,
}

/// The `spec` part of `POST /api/v1/calibrations` for a checked beam specification.
fn beam_spec_json(
    spec: &BeamSpec,
    load: EdgeLoadFields,
    supersedes: Option<CalibrationId>,
) -> anyhow::Result<String> {
    let mut fields = serde_json::to_value(&spec.metadata)?;
    let object = fields
        .as_object_mut()
        .context("calibration metadata is a JSON object")?;
    if let serde_json::Value::Object(load) = serde_json::to_value(load)? {
        object.extend(load);
    }
    object.insert("region".into(), serde_json::to_value(spec.region)?);
    object.insert("refine_edges".into(), spec.refine_edges.into());
    object.insert("order_step".into(), spec.order_step.into());
    object.insert(
        "supersedes".into(),
        supersedes.map(|id| id.to_string()).into(),
    );
    Ok(fields.to_string())
}

/// `isotint client calibrate`: checks the flags as `isotint calibrate` does, sends the beam
/// photo and its specification, and prints the stored calibration's report and, last, its id.
async fn calibrate(args: ClientCalibrateArgs) -> anyhow::Result<()> {
    let spec = args.beam.spec()?;
    let supersedes = args
        .supersedes
        .as_deref()
        .map(|id| {
            id.parse::<CalibrationId>()
                .map_err(|e| anyhow::anyhow!("--supersedes: {e}"))
        })
        .transpose()?;
    let spec_json = beam_spec_json(&spec, args.beam.load_fields(), supersedes)?;
    let service = Service::new(&args.service)?;
    let photo = read_input(&args.beam.photo, "--photo").await?;
    let form = || {
        Form::new()
            .part("photo", file_part(&photo, &args.beam.photo))
            .part("spec", json_part(&spec_json))
    };
    let answer = service
        .post("/api/v1/calibrations", form)
        .await
        .map_err(|e| NotDone::Refused(format!("calibration not stored: {e:#}")))?;
    let stored: StoredCalibration = serde_json::from_slice(&answer.body)
        .map_err(|e| NotDone::Refused(format!("the service's answer is not a calibration: {e}")))?;
    println!(
        "calibration {:?} stored ({} retries after 503)",
        stored.name, answer.retries
    );
    print!("{}", report_text(&stored.report));
    println!("{}", stored.id);
    Ok(())
}

/// `isotint client series`: checks the flags as `isotint series` does, sends the photos with
/// their loads, and prints the JSON answer or writes it to `--out`.
async fn series(args: ClientSeriesArgs) -> anyhow::Result<()> {
    let photos = &args.series;
    photos.spec()?;
    args.calibration
        .parse::<CalibrationId>()
        .map_err(|e| anyhow::anyhow!("--calibration: {e}"))?;
    if let Some(out) = &args.out {
        let inputs = photos.photos.iter().chain(photos.mask.iter());
        if inputs.into_iter().any(|input| same_file(input, out)) {
            anyhow::bail!(
                "--out {} is an input file; refusing to overwrite it",
                out.display()
            );
        }
    }
    let series_json = serde_json::json!({
        "loads_n": photos.loads_n,
        "disc_diameter_mm": photos.disc_diameter_mm,
        "thickness_mm": photos.thickness_mm,
    })
    .to_string();
    let service = Service::new(&args.service)?;
    let mask = match &photos.mask {
        Some(path) => Some((read_input(path, "--mask").await?, path)),
        None => None,
    };
    let mut files = Vec::with_capacity(photos.photos.len());
    for path in &photos.photos {
        files.push((read_input(path, "--photo").await?, path));
    }
    let form = || {
        let form = Form::new()
            .text("calibration", args.calibration.clone())
            .part("series", json_part(&series_json));
        let form = match &mask {
            Some((bytes, path)) => form.part("mask", file_part(bytes, path)),
            None => form,
        };
        files.iter().fold(form, |form, (bytes, path)| {
            form.part("photo", file_part(bytes, path))
        })
    };
    let answer = service
        .post("/api/v1/series", form)
        .await
        .map_err(|e| NotDone::Refused(format!("series not fitted: {e:#}")))?;
    match &args.out {
        Some(out) => {
            write_whole(out, &answer.body).await?;
            println!(
                "series fitted ({} retries after 503), written to {}",
                answer.retries,
                out.display()
            );
        }
        None => println!("{}", String::from_utf8_lossy(&answer.body)),
    }
    Ok(())
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
            service: ServiceArgs {
                server: "http://127.0.0.1:9".into(),
                token: None,
                retries: 0,
            },
            calibration: "x".into(),
            mask: None,
            format: ClientFormat::Png16,
            jobs: 1,
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
