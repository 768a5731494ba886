//! Admission of the CPU- and memory-heavy work (photo decoding, mapping, calibrating, storing
//! results). A job is admitted once its request body has fully arrived, against two budgets
//! taken in arrival order: memory (its estimate, from the photo's header, out of
//! `memory_budget_bytes`) and a CPU slot (one of `max_jobs`). Both are tokio semaphores, which
//! serve waiters first come, first served, so a big job is not overtaken for ever by small
//! ones. Requests wait for admission rather than being refused: 503 with `Retry-After` only
//! when the wait would pass `job_wait_limit` or the bodies waiting would pass
//! `queue_memory_bytes`; a job larger than the whole budget is refused at once with 413.
//! Admissions, refusals, waits, run times and the budget in use go to the service's
//! [`Metrics`].

use std::sync::Arc;
use std::time::{Duration, Instant};

use tokio::sync::{OwnedSemaphorePermit, Semaphore};

use super::error::ApiError;
use super::metrics::{Metrics, Refusal};
use crate::config::ServiceConfig;

/// Seconds a refused client is told to wait.
pub const RETRY_AFTER_S: u64 = 2;

/// The memory budget is counted in these units (semaphores count in `u32`).
const UNIT_BYTES: u64 = 1 << 20;

/// Admission control of pixel jobs. Cheap to clone.
#[derive(Debug, Clone)]
pub struct JobGate {
    memory: Arc<Semaphore>,
    slots: Arc<Semaphore>,
    budget_units: u32,
    max_jobs: usize,
    wait_limit: Duration,
    queue_limit_bytes: u64,
    /// Bytes of request bodies waiting for admission now.
    queued_bytes: Arc<std::sync::atomic::AtomicU64>,
    metrics: Metrics,
}

/// What a job needs: its memory estimate while it runs (bytes) and the bytes of its request
/// that it holds while it waits.
#[derive(Debug, Clone, Copy)]
pub struct JobSize {
    /// Estimated peak memory of the job, bytes (request bytes included).
    pub memory_bytes: u64,
    /// Bytes of the request held while waiting (its body).
    pub waiting_bytes: u64,
}

/// An admitted job's share of the budgets: held until the job (computation and storing of its
/// results) ends, even if its request is dropped meanwhile.
#[derive(Debug, Clone)]
pub struct Admission {
    permits: Arc<(OwnedSemaphorePermit, OwnedSemaphorePermit)>,
    metrics: Metrics,
}

/// A request's place among the waiting ones: keeps the waiting gauges and the queued bytes
/// right however the wait ends.
struct Waiting<'a> {
    gate: &'a JobGate,
    bytes: u64,
}

impl Drop for Waiting<'_> {
    fn drop(&mut self) {
        use std::sync::atomic::Ordering;
        self.gate
            .queued_bytes
            .fetch_sub(self.bytes, Ordering::SeqCst);
        self.gate.metrics.jobs_waiting.dec();
    }
}

fn units(bytes: u64) -> u64 {
    bytes.div_ceil(UNIT_BYTES)
}

fn mib(bytes: u64) -> u64 {
    bytes.div_ceil(1 << 20)
}

impl JobGate {
    /// A gate with the budgets of `config`, counting into `metrics`.
    pub fn new(config: &ServiceConfig, metrics: Metrics) -> Self {
        let budget_units =
            u32::try_from(units(config.memory_budget_bytes).max(1)).unwrap_or(u32::MAX);
        let max_jobs = config.max_jobs.max(1);
        metrics
            .memory_budget_bytes
            .set(i64::try_from(u64::from(budget_units) * UNIT_BYTES).unwrap_or(i64::MAX));
        JobGate {
            memory: Arc::new(Semaphore::new(budget_units as usize)),
            slots: Arc::new(Semaphore::new(max_jobs)),
            budget_units,
            max_jobs,
            wait_limit: config.job_wait_limit,
            queue_limit_bytes: config.queue_memory_bytes,
            queued_bytes: Arc::default(),
            metrics,
        }
    }

    /// Sets the gauges of the jobs running and of the memory budget in use to their values now.
    pub fn record_occupancy(&self) {
        let running = self.max_jobs - self.slots.available_permits();
        let in_use = u64::from(self.budget_units) - self.memory.available_permits() as u64;
        self.metrics.jobs_running.set(running as i64);
        self.metrics
            .memory_in_use_bytes
            .set(i64::try_from(in_use * UNIT_BYTES).unwrap_or(i64::MAX));
    }

    fn refuse(&self, reason: Refusal, message: String) -> ApiError {
        self.metrics.refused(reason);
        match reason {
            Refusal::TooLarge => ApiError::TooLarge(message),
            Refusal::WaitLimit | Refusal::QueueMemory => ApiError::Busy {
                message,
                retry_after_s: RETRY_AFTER_S,
            },
        }
    }

    /// Waits, in arrival order, for the memory and a CPU slot of a job of `size`. Call once the
    /// request body has arrived. Refuses with 413 a job larger than the whole budget, and with
    /// 503 and `Retry-After` when the bodies waiting would pass the queue's memory limit or the
    /// wait would pass the wait limit.
    pub async fn admit(&self, size: JobSize) -> Result<Admission, ApiError> {
        use std::sync::atomic::Ordering;
        let needed = units(size.memory_bytes).max(1);
        let budget = u64::from(self.budget_units);
        let Some(needed) = u32::try_from(needed)
            .ok()
            .filter(|n| u64::from(*n) <= budget)
        else {
            return Err(self.refuse(
                Refusal::TooLarge,
                format!(
                    "the photo needs about {} MiB to process, more than the service's whole \
                     memory budget of {} MiB; send a smaller photo (fewer pixels) or ask for a \
                     larger --memory-budget-mib",
                    mib(size.memory_bytes),
                    mib(budget * UNIT_BYTES)
                ),
            ));
        };
        let queued = self
            .queued_bytes
            .fetch_add(size.waiting_bytes, Ordering::SeqCst);
        self.metrics.jobs_waiting.inc();
        let waiting = Waiting {
            gate: self,
            bytes: size.waiting_bytes,
        };
        if queued + size.waiting_bytes > self.queue_limit_bytes {
            drop(waiting);
            return Err(self.refuse(
                Refusal::QueueMemory,
                format!(
                    "the requests waiting for a job slot already hold {} MiB, the limit of the \
                     queue; retry in {RETRY_AFTER_S} s",
                    mib(queued)
                ),
            ));
        }
        let asked = Instant::now();
        let acquired = tokio::time::timeout(self.wait_limit, async {
            let memory = self.memory.clone().acquire_many_owned(needed).await?;
            let slot = self.slots.clone().acquire_owned().await?;
            Ok::<_, tokio::sync::AcquireError>((memory, slot))
        })
        .await;
        drop(waiting);
        let permits = match acquired {
            Ok(Ok(permits)) => permits,
            Ok(Err(e)) => return Err(ApiError::Internal(format!("job gate closed: {e}"))),
            Err(_) => {
                return Err(self.refuse(
                    Refusal::WaitLimit,
                    format!(
                        "no job slot came free within the wait limit of {}; retry in \
                         {RETRY_AFTER_S} s",
                        humantime::format_duration(self.wait_limit)
                    ),
                ))
            }
        };
        self.metrics.observe_wait(asked.elapsed());
        self.metrics.jobs_admitted.inc();
        Ok(Admission {
            permits: Arc::new(permits),
            metrics: self.metrics.clone(),
        })
    }
}

impl Admission {
    /// Runs `work` on the blocking thread pool. The admission's share stays taken until `work`
    /// returns, even if the request is dropped (e.g. on timeout), and for as long as the
    /// admission itself is held (while the results are stored).
    pub async fn run<T, F>(&self, work: F) -> Result<T, ApiError>
    where
        T: Send + 'static,
        F: FnOnce() -> T + Send + 'static,
    {
        let (permits, metrics) = (self.permits.clone(), self.metrics.clone());
        tokio::task::spawn_blocking(move || {
            let _share = permits;
            let started = Instant::now();
            let result = work();
            metrics.observe_job(started.elapsed());
            result
        })
        .await
        .map_err(|e| ApiError::Internal(format!("job failed: {e}")))
    }
}
