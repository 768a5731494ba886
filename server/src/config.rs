//! Settings of the HTTP service, filled from the command line (see `cli.rs`).

use std::path::PathBuf;
use std::time::Duration;

use isotint_core::DecodeLimits;

use crate::access::AccessMode;

/// Limits and policies of a running service.
#[derive(Debug, Clone)]
pub struct ServiceConfig {
    /// Largest accepted request body, bytes.
    pub upload_limit_bytes: usize,
    /// Calibration and map jobs that run at once (CPU slots).
    pub max_jobs: usize,
    /// Memory that admitted jobs may take together, bytes (each job's estimate from its
    /// photo's header, see `pipeline::job_memory`).
    pub memory_budget_bytes: u64,
    /// Largest total of request bodies waiting for admission, bytes; a request that would pass
    /// it is refused with 503.
    pub queue_memory_bytes: u64,
    /// Longest wait for admission; a request that would wait longer is refused with 503.
    pub job_wait_limit: Duration,
    /// File downloads of order maps streamed at once; one more is refused with 503.
    pub max_downloads: usize,
    /// Longest a file download may take; a slower reader is cut off.
    pub download_time_limit: Duration,
    /// Time limit of one request.
    pub request_timeout: Duration,
    /// Time a connection has to send a request's headers, from its opening or from the end
    /// of its previous response (so also how long an idle connection is kept open).
    pub header_timeout: Duration,
    /// Longest pause while a request body arrives; a stalled upload is answered 408.
    pub body_timeout: Duration,
    /// Connections served at once; further ones wait in the listen backlog.
    pub max_connections: usize,
    /// How long stored order maps are served.
    pub retention: Duration,
    /// How often expired order maps are deleted.
    pub purge_interval: Duration,
    /// Header checks applied before any photo or mask is decoded.
    pub decode_limits: DecodeLimits,
    /// Directory whose `*.json` calibration files are imported at start, after the sets built
    /// into the binary.
    pub calibration_sets: Option<PathBuf>,
    /// Whether API requests need a token. `isotint serve` resolves it at start
    /// ([`AccessMode::resolve`]); the default is open, as for SQLite on loopback.
    pub access: AccessMode,
}

impl Default for ServiceConfig {
    fn default() -> Self {
        ServiceConfig {
            upload_limit_bytes: 64 << 20,
            max_jobs: 2,
            memory_budget_bytes: machine_memory_budget(),
            queue_memory_bytes: machine_memory_budget() / 4,
            job_wait_limit: Duration::from_secs(60),
            max_downloads: 8,
            download_time_limit: Duration::from_secs(600),
            request_timeout: Duration::from_secs(120),
            header_timeout: Duration::from_secs(30),
            body_timeout: Duration::from_secs(30),
            max_connections: 512,
            retention: Duration::from_secs(24 * 3600),
            purge_interval: Duration::from_secs(300),
            decode_limits: DecodeLimits {
                max_pixels: 50_000_000,
                ..DecodeLimits::default()
            },
            calibration_sets: None,
            access: AccessMode::Open,
        }
    }
}

/// The default memory budget of the jobs: half of the machine's memory, or of the control
/// group's limit where that is lower (`/proc/meminfo` `MemTotal`, cgroup v2 `memory.max` or v1
/// `memory.limit_in_bytes`); 2 GiB where neither can be read.
pub fn machine_memory_budget() -> u64 {
    let total = std::fs::read_to_string("/proc/meminfo")
        .ok()
        .and_then(|text| {
            let line = text.lines().find(|l| l.starts_with("MemTotal:"))?;
            let kib: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
            Some(kib * 1024)
        });
    let cgroup = [
        "/sys/fs/cgroup/memory.max",
        "/sys/fs/cgroup/memory/memory.limit_in_bytes",
    ]
    .iter()
    .find_map(|path| {
        std::fs::read_to_string(path)
            .ok()?
            .trim()
            .parse::<u64>()
            .ok()
    });
    match (total, cgroup) {
        (Some(t), Some(c)) => t.min(c) / 2,
        (Some(m), None) | (None, Some(m)) => m / 2,
        (None, None) => 2 << 30,
    }
}
