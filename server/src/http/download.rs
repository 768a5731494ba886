//! Streaming a map's files from its compact form (`isotint_core::compact`): a band of rows at
//! a time is read, decoded and encoded (`export::FileWriter`) while the client reads, so a
//! download holds memory for a band or two whatever the map's size. At most `max_downloads`
//! stream at once (one more is refused with 503 and `Retry-After`), and each must end within
//! `download_time_limit`: a slower reader is cut off (its connection closed; a download cut
//! short never ends as if whole).

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::Duration;

use axum::body::{Body, Bytes};
use axum::http::header;
use axum::response::{IntoResponse, Response};
use isotint_core::compact;
use isotint_core::export::{FileKind, FileWriter, OutputFormat};
use isotint_core::order_map::MapStatistics;
use isotint_core::{CoreError, CoreResult};
use tokio::sync::{mpsc, Notify, OwnedSemaphorePermit, Semaphore};

use super::error::ApiError;
use super::jobs::RETRY_AFTER_S;
use super::metrics::Metrics;
use crate::domain::{shorten, OrderMapId};
use crate::storage::order_maps as store;
use crate::storage::Storage;

/// Whether a request's `format` asks for its one file format `only` (`None`: the JSON answer);
/// any other name is refused naming `format`.
pub(super) fn asks_for_file(format: Option<&str>, only: &str) -> CoreResult<bool> {
    match format {
        None => Ok(false),
        Some(name) if name == only => Ok(true),
        Some(other) => Err(CoreError::invalid(
            "format",
            format!("{:?} is not {only}", shorten(other, 40)),
        )),
    }
}

/// A file made at once (not streamed) as an NPY attachment named `filename`.
pub(super) fn npy_attachment(bytes: Vec<u8>, filename: &str) -> Response {
    let disposition = format!("attachment; filename=\"{filename}\"");
    (
        [
            (
                header::CONTENT_TYPE,
                OutputFormat::Npy.content_type().to_string(),
            ),
            (header::CONTENT_DISPOSITION, disposition),
        ],
        bytes,
    )
        .into_response()
}

/// Closes the connection a request came on: set per connection by `service::serve`, used
/// to cut off a reader slower than the download time limit.
#[derive(Debug, Clone, Default)]
pub struct ConnectionCut(pub Arc<Notify>);

/// The cap on concurrent downloads and their time limit. Cheap to clone.
#[derive(Debug, Clone)]
pub struct Downloads {
    slots: Arc<Semaphore>,
    max: usize,
    time_limit: Duration,
    metrics: Metrics,
}

/// A place among the streaming downloads, held until the stream ends.
#[derive(Debug)]
pub struct DownloadSlot {
    _permit: OwnedSemaphorePermit,
    metrics: Metrics,
}

impl Drop for DownloadSlot {
    fn drop(&mut self) {
        self.metrics.downloads_active.dec();
    }
}

/// Where the bands of a map come from.
#[derive(Debug, Clone)]
pub enum Bands {
    /// A stored map, read from the database band by band.
    Stored(Storage, OrderMapId),
    /// A map just made and not stored (`POST …?format=`).
    Made(Arc<Vec<Vec<u8>>>),
}

impl Bands {
    async fn get(&self, index: u32) -> Result<Vec<u8>, ApiError> {
        match self {
            Bands::Stored(storage, id) => Ok(store::band(storage, *id, index).await?),
            Bands::Made(bands) => bands
                .get(index as usize)
                .cloned()
                .ok_or_else(|| ApiError::Internal(format!("no band {index}"))),
        }
    }
}

/// The size and figures of the map a file is made of.
#[derive(Debug, Clone, Copy)]
pub struct MapShape {
    /// Width, pixels.
    pub width: u32,
    /// Height, pixels.
    pub height: u32,
    /// Summary figures (the preview's colour bar reads the table's last order).
    pub statistics: MapStatistics,
}

impl Downloads {
    /// A cap of `max` downloads at once, each within `time_limit`.
    pub fn new(max: usize, time_limit: Duration, metrics: Metrics) -> Self {
        Downloads {
            slots: Arc::new(Semaphore::new(max.max(1))),
            max: max.max(1),
            time_limit,
            metrics,
        }
    }

    /// Takes a place among the downloads, or refuses with 503 and `Retry-After` when all
    /// are taken.
    pub fn start(&self) -> Result<DownloadSlot, ApiError> {
        let permit = self.slots.clone().try_acquire_owned().map_err(|_| {
            self.metrics.downloads_refused.inc();
            ApiError::Busy {
                message: format!(
                    "{} downloads are streaming already, the most the service serves at once; \
                     retry in {RETRY_AFTER_S} s",
                    self.max
                ),
                retry_after_s: RETRY_AFTER_S,
            }
        })?;
        self.metrics.downloads_active.inc();
        Ok(DownloadSlot {
            _permit: permit,
            metrics: self.metrics.clone(),
        })
    }

    /// The response streaming the `kind` file of the map of `shape` from `bands`, named after
    /// `stem`. The file is encoded while it is sent; `cut` (if the connection has one) closes
    /// the connection of a reader slower than the time limit.
    pub fn stream(
        &self,
        slot: DownloadSlot,
        kind: FileKind,
        shape: MapShape,
        bands: Bands,
        stem: &str,
        cut: Option<ConnectionCut>,
    ) -> Result<Response, ApiError> {
        let writer = FileWriter::new(kind, shape.width, shape.height, &shape.statistics)?;
        // One chunk waits in the channel while the next is made: a band or two in memory.
        let (sender, receiver) = mpsc::channel::<Bytes>(1);
        let finished = Arc::new(AtomicBool::new(false));
        let done = finished.clone();
        let time_limit = self.time_limit;
        tokio::spawn(async move {
            let _slot = slot;
            let outcome =
                tokio::time::timeout(time_limit, produce(writer, shape, bands, &sender)).await;
            match outcome {
                Ok(Ok(())) => done.store(true, Ordering::SeqCst),
                // Most often the client went away.
                Ok(Err(e)) => tracing::info!(error = ?e, "a download ended before the file did"),
                Err(_) => {
                    tracing::warn!(limit = ?time_limit, "a download was cut off at its time limit");
                    if let Some(ConnectionCut(notify)) = cut {
                        notify.notify_one();
                    }
                }
            }
        });
        let body = futures_util::stream::unfold(
            (receiver, finished),
            |(mut receiver, finished)| async move {
                let item = match receiver.recv().await {
                    Some(bytes) => Ok(bytes),
                    None if finished.load(Ordering::SeqCst) => return None,
                    // Ending without an error would tell the client the file is whole.
                    None => Err(std::io::Error::other(
                        "the download ended before the file did",
                    )),
                };
                Some((item, (receiver, finished)))
            },
        );
        let disposition = format!("attachment; filename=\"{}\"", kind.file_name(stem));
        Ok((
            [
                (header::CONTENT_TYPE, kind.content_type().to_string()),
                (header::CONTENT_DISPOSITION, disposition),
            ],
            Body::from_stream(body),
        )
            .into_response())
    }
}

/// Feeds `writer` every band of the map of `shape` and sends the bytes as they come.
async fn produce(
    mut writer: FileWriter,
    shape: MapShape,
    bands: Bands,
    sender: &mpsc::Sender<Bytes>,
) -> Result<(), ApiError> {
    let send = |bytes: Vec<u8>| async move {
        if bytes.is_empty() {
            return Ok(());
        }
        sender
            .send(Bytes::from(bytes))
            .await
            .map_err(|_| ApiError::Internal("the client went away".to_string()))
    };
    send(writer.header()).await?;
    let (width, height) = (shape.width as usize, shape.height);
    for index in 0..compact::band_count(height) {
        let data = bands.get(index).await?;
        let rows = compact::band_rows(index, height) as usize;
        let (back, bytes) = tokio::task::spawn_blocking(move || {
            let bytes =
                compact::decode_band(&data, width, rows).and_then(|band| writer.write(band.rows()));
            (writer, bytes)
        })
        .await
        .map_err(|e| ApiError::Internal(format!("encoding failed: {e}")))?;
        writer = back;
        send(bytes?).await?;
    }
    let tail = tokio::task::spawn_blocking(move || writer.finish())
        .await
        .map_err(|e| ApiError::Internal(format!("encoding failed: {e}")))??;
    send(tail).await
}
