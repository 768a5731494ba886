//! Bounding the CPU-heavy work: at most `max_jobs` jobs run at once and at most `queue` more
//! wait; one more is refused at once with 503 and `Retry-After`.

use std::sync::Arc;

use tokio::sync::{OwnedSemaphorePermit, Semaphore};

use super::error::ApiError;

/// Seconds a refused client is told to wait.
pub const RETRY_AFTER_S: u64 = 2;

/// Admission control of pixel jobs. Cheap to clone.
#[derive(Debug, Clone)]
pub struct JobGate {
    admission: Arc<Semaphore>,
    workers: Arc<Semaphore>,
}

/// A place among the running or waiting jobs, held from admission until the job ends.
#[derive(Debug)]
pub struct Admission {
    admitted: OwnedSemaphorePermit,
    workers: Arc<Semaphore>,
}

impl JobGate {
    /// A gate running `max_jobs` jobs at once with `queue` waiting places.
    pub fn new(max_jobs: usize, queue: usize) -> Self {
        let max_jobs = max_jobs.max(1);
        JobGate {
            admission: Arc::new(Semaphore::new(max_jobs + queue)),
            workers: Arc::new(Semaphore::new(max_jobs)),
        }
    }

    /// Takes a place or refuses with 503 when all are taken. Call before reading the upload.
    pub fn admit(&self) -> Result<Admission, ApiError> {
        let admitted = self
            .admission
            .clone()
            .try_acquire_owned()
            .map_err(|_| ApiError::Busy {
                retry_after_s: RETRY_AFTER_S,
            })?;
        Ok(Admission {
            admitted,
            workers: self.workers.clone(),
        })
    }
}

impl Admission {
    /// Waits for a free job slot, then runs `work` on the blocking thread pool. The slot stays
    /// taken until `work` returns, even if the request is dropped (e.g. on timeout).
    pub async fn run<T, F>(self, work: F) -> Result<T, ApiError>
    where
        T: Send + 'static,
        F: FnOnce() -> T + Send + 'static,
    {
        let worker = self
            .workers
            .clone()
            .acquire_owned()
            .await
            .map_err(|e| ApiError::Internal(format!("job gate closed: {e}")))?;
        let admitted = self.admitted;
        tokio::task::spawn_blocking(move || {
            let _slots = (admitted, worker);
            work()
        })
        .await
        .map_err(|e| ApiError::Internal(format!("job failed: {e}")))
    }
}
