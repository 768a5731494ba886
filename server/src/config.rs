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
    /// Calibration and map jobs that run at once.
    pub max_jobs: usize,
    /// Jobs that may wait for a free slot; one more is refused with 503.
    pub job_queue: usize,
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
            job_queue: 4,
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
