//! Bounding the CPU-heavy work: at most `max_jobs` jobs run at once and at most `queue` more
//! wait; one more is refused at once with 503 and `Retry-After`. Admissions, refusals, waits
//! and run times go to the service's [`Metrics`].

use std::sync::Arc;
use std::time::Instant;

use tokio::sync::{OwnedSemaphorePermit, Semaphore};

use super::error::ApiError;
use super::metrics::Metrics;

/// Seconds a refused client is told to wait.
pub const RETRY_AFTER_S: u64 = 2;

/// Admission control of pixel jobs. Cheap to clone.
#[derive(Debug, Clone)]
pub struct JobGate {
    admission: Arc<Semaphore>,
    workers: Arc<Semaphore>,
    max_jobs: usize,
    places: usize,
    metrics: Metrics,
}

/// A place among the running or waiting jobs, held from admission until the job ends.
#[derive(Debug)]
pub struct Admission {
    admitted: OwnedSemaphorePermit,
    workers: Arc<Semaphore>,
    metrics: Metrics,
}

impl JobGate {
    /// A gate running `max_jobs` jobs at once with `queue` waiting places, counting into
    /// `metrics`.
    pub fn new(max_jobs: usize, queue: usize, metrics: Metrics) -> Self {
        let max_jobs = max_jobs.max(1);
        JobGate {
            admission: Arc::new(Semaphore::new(max_jobs + queue)),
            workers: Arc::new(Semaphore::new(max_jobs)),
            max_jobs,
            places: max_jobs + queue,
            metrics,
        }
    }

    /// Sets the running and waiting gauges of the metrics to the jobs running and waiting now.
    pub fn record_occupancy(&self) {
        let running = self.max_jobs - self.workers.available_permits();
        let admitted = self.places - self.admission.available_permits();
        self.metrics.jobs_running.set(running as i64);
        self.metrics
            .jobs_waiting
            .set(admitted.saturating_sub(running) as i64);
    }

    /// Takes a place or refuses with 503 when all are taken. Call before reading the upload.
    pub fn admit(&self) -> Result<Admission, ApiError> {
        let admitted = self.admission.clone().try_acquire_owned().map_err(|_| {
            self.metrics.jobs_refused.inc();
            ApiError::Busy {
                retry_after_s: RETRY_AFTER_S,
            }
        })?;
        self.metrics.jobs_admitted.inc();
        Ok(Admission {
            admitted,
            workers: self.workers.clone(),
            metrics: self.metrics.clone(),
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
        let asked = Instant::now();
        let worker = self
            .workers
            .clone()
            .acquire_owned()
            .await
            .map_err(|e| ApiError::Internal(format!("job gate closed: {e}")))?;
        self.metrics.observe_wait(asked.elapsed());
        let (admitted, metrics) = (self.admitted, self.metrics);
        tokio::task::spawn_blocking(move || {
            let _slots = (admitted, worker);
            let started = Instant::now();
            let result = work();
            metrics.observe_job(started.elapsed());
            result
        })
        .await
        .map_err(|e| ApiError::Internal(format!("job failed: {e}")))
    }
}
