//! The command line: `serve`, `calibrate`, `map`, `boundary`, `series`, `compare`, `report`,
//! `demo`, `token`, `backup`, `restore`, `client`.

use std::net::SocketAddr;
use std::path::{Path, PathBuf};
use std::time::Duration;

use anyhow::Context;
use clap::{Args, Parser, Subcommand, ValueEnum};
use isotint_core::beam::estimate::ESTIMATE_CAUTION;
use isotint_core::beam::{BeamReport, BeamSpec, EdgeLoad, EdgeLoadFields};
use isotint_core::boundary::{boundary_stress, edge_csv, EdgePath};
use isotint_core::comparison::{compare, difference_csv, PointPair, Prediction, Registration};
use isotint_core::export::{self, FileKind, OutputFormat};
use isotint_core::geometry::{PixelPoint, Scale};
use isotint_core::order_map::MapStatistics;
use isotint_core::render::demo::DemoScenario;
use isotint_core::report::{ReportInputs, ReportOptions};
use isotint_core::series::{LoadSeries, SeriesSpec};
use isotint_core::specimen::{MaskSource, MaskUsed};
use isotint_core::stress::{
    maximum_text, InputOrigins, Specimen, SpecimenFields, SpecimenKind, STRESS_CAUTION,
};
use isotint_core::{
    CalibrationMetadata, CalibrationTable, CoreError, CoreResult, DecodeLimits, MapOptions,
    OrderHint, OrderMap, PixelRect,
};
use time::OffsetDateTime;

use crate::access::{AccessMode, Actor, Origin, Role, Token, TokenName};
use crate::backup::Restored;
use crate::client::{ClientFormat, NotDone, EXIT_NOT_DONE};
use crate::config::{machine_memory_budget, ServiceConfig};
use crate::domain::WithOrigins;
use crate::domain::{beam_spec, rfc3339, DEFAULT_ORDER_STEP};
use crate::pipeline::{self, MaskChoice};
use crate::storage::tokens::{self, TokenRow};
use crate::storage::{Storage, StorageError};

/// Fringe-order maps from white-light photoelastic photos (dark-field circular polariscope).
///
/// Pixel coordinates are pixel-edge coordinates: x right, y down; pixel (x, y) covers
/// [x, x+1) × [y, y+1).
#[derive(Debug, Parser)]
#[command(name = "isotint", version)]
pub struct Cli {
    /// Log format.
    #[arg(
        long,
        global = true,
        env = "ISOTINT_LOG_FORMAT",
        hide_env_values = true,
        default_value = "text"
    )]
    pub log_format: LogFormat,
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// Log output format.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum LogFormat {
    /// Human-readable lines.
    Text,
    /// One JSON object per line.
    Json,
}

/// Subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Run the HTTP service.
    Serve(ServeArgs),
    /// Build a calibration table from a photo of a beam in four-point bending.
    Calibrate(CalibrateArgs),
    /// Map the fringe orders of a specimen photo with a calibration table.
    Map(MapArgs),
    /// Free-edge stress |σ_t| = N·f_σ/h along the specimen's outline (from the mask), its
    /// maximum and, with a nominal stress, K_t.
    Boundary(BoundaryArgs),
    /// Fit a load series: photos of one specimen at known loads, the slope of each pixel's
    /// order against the load, how linearly it scales and, for a disc, the material fringe value.
    Series(SeriesArgs),
    /// Compare the measured σ1 − σ2 with a finite-element prediction (CSV of nodes) registered
    /// to the photo by point pairs.
    Compare(CompareArgs),
    /// Write a PDF report of one photo: every input, the order and stress maps with numbered
    /// colour bars, the free-edge stress profile with its maximum and K_t, the map's figures,
    /// the flags and the caution.
    Report(ReportArgs),
    /// Write the demo scenario (rendered photos, masks, true orders) and a calibration
    /// measured on its beam photo.
    Demo(DemoArgs),
    /// Make, list and revoke the service's API tokens, on the database itself (no running
    /// service needed).
    #[command(subcommand)]
    Token(TokenCommand),
    /// Write the whole library (calibrations with their ids, corrections and archived state,
    /// the audit trail, the tokens' hashes) as files with a manifest of checksums.
    Backup(BackupArgs),
    /// Load a backup into an empty database, keeping its ids, in one transaction. Restoring
    /// into a database that holds exactly that backup changes nothing.
    Restore(RestoreArgs),
    /// Work a running service from a script: many photos at once, retried while it is busy.
    #[command(subcommand)]
    Client(ClientCommand),
}

/// `isotint client` commands. Exit code 0 when everything was done, 3 when requests were sent
/// but not everything was done (the service refused some, or stayed busy), 1 when nothing was
/// sent (a flag or an input file at fault).
#[derive(Debug, Subcommand)]
pub enum ClientCommand {
    /// Map photos on a running service, writing OUT_DIR/<photo stem>.<format> for each. Exit
    /// code 0 when every photo was mapped, 3 when some were not, 1 when none was sent.
    Map(ClientMapArgs),
    /// Measure a calibration from a beam photo on a running service and store it there;
    /// prints its id on the last line. Exit code 0 when stored, 3 when the service did not
    /// store it, 1 when nothing was sent.
    Calibrate(ClientCalibrateArgs),
    /// Fit a load series on a running service; prints its JSON answer (or writes it to
    /// --out). Exit code 0 when fitted, 3 when the service did not fit it, 1 when nothing was
    /// sent.
    Series(ClientSeriesArgs),
}

/// How the client commands reach the service.
#[derive(Debug, Clone, Args)]
pub struct ServiceArgs {
    /// The service's base URL (http://HOST:PORT or https://HOST).
    #[arg(long, env = "ISOTINT_SERVER")]
    pub server: String,
    /// API token, for a service that asks for one.
    #[arg(long, env = "ISOTINT_TOKEN", hide_env_values = true)]
    pub token: Option<String>,
    /// How often a request is sent again after the service answers 503 (busy), each time
    /// after the Retry-After it asks for.
    #[arg(long, default_value_t = 10)]
    pub retries: u32,
}

/// Options of `isotint client map`.
#[derive(Debug, Clone, Args)]
pub struct ClientMapArgs {
    /// The service.
    #[command(flatten)]
    pub service: ServiceArgs,
    /// Id of the calibration to map with.
    #[arg(long)]
    pub calibration: String,
    /// Mask PNG (white = specimen) sent with every photo.
    #[arg(long)]
    pub mask: Option<PathBuf>,
    /// File of each map: npy, png16 or csv.
    #[arg(long, value_enum, default_value_t = ClientFormat::Npy)]
    pub format: ClientFormat,
    /// Photos sent at once.
    #[arg(long, default_value_t = 2, value_parser = clap::value_parser!(u16).range(1..=64))]
    pub jobs: u16,
    /// Directory the maps are written into (made if missing).
    #[arg(long)]
    pub out_dir: PathBuf,
    /// The photos (PNG, TIFF or JPEG).
    #[arg(required = true, value_name = "PHOTO")]
    pub photos: Vec<PathBuf>,
}

/// Options of `isotint client calibrate`.
#[derive(Debug, Clone, Args)]
#[command(allow_negative_numbers = true)]
pub struct ClientCalibrateArgs {
    /// The service.
    #[command(flatten)]
    pub service: ServiceArgs,
    /// The beam photo and what is known about it.
    #[command(flatten)]
    pub beam: BeamArgs,
    /// Id of the calibration this one corrects.
    #[arg(long)]
    pub supersedes: Option<String>,
}

/// Options of `isotint client series`.
#[derive(Debug, Clone, Args)]
#[command(allow_negative_numbers = true)]
pub struct ClientSeriesArgs {
    /// The service.
    #[command(flatten)]
    pub service: ServiceArgs,
    /// Id of the calibration to map the photos with.
    #[arg(long)]
    pub calibration: String,
    /// The photos, their loads and the specimen.
    #[command(flatten)]
    pub series: SeriesPhotos,
    /// Write the JSON answer to this file instead of printing it.
    #[arg(long)]
    pub out: Option<PathBuf>,
}

/// Options of `isotint backup`.
#[derive(Debug, Args)]
pub struct BackupArgs {
    /// The database.
    #[command(flatten)]
    pub database: DatabaseArg,
    /// Directory to write the backup into (new or empty).
    #[arg(long)]
    pub out: PathBuf,
}

/// Options of `isotint restore`.
#[derive(Debug, Args)]
pub struct RestoreArgs {
    /// The database (empty, or holding exactly this backup).
    #[command(flatten)]
    pub database: DatabaseArg,
    /// Directory of the backup (as `isotint backup --out` wrote it).
    #[arg(long)]
    pub from: PathBuf,
}

/// The database a command works on.
#[derive(Debug, Args)]
pub struct DatabaseArg {
    /// Database URL: sqlite://FILE?mode=rwc (created if missing) or postgres://….
    #[arg(
        long,
        env = "ISOTINT_DATABASE_URL",
        hide_env_values = true,
        default_value = "sqlite://isotint.sqlite?mode=rwc"
    )]
    pub database: String,
}

/// Subcommands of `isotint token`.
#[derive(Debug, Subcommand)]
pub enum TokenCommand {
    /// Make a token and print it, once, alone on the last line.
    Create(TokenCreateArgs),
    /// List the tokens: name, role, when made, last used, revoked (never the token).
    List(DatabaseArg),
    /// Revoke a token: every replica refuses it from its next request.
    Revoke(TokenRevokeArgs),
}

/// Options of `isotint token create`.
#[derive(Debug, Args)]
pub struct TokenCreateArgs {
    /// The database.
    #[command(flatten)]
    pub database: DatabaseArg,
    /// Name of the token (1–64 letters, digits, '.', '_', '-'); the audit trail records it.
    #[arg(long)]
    pub name: TokenName,
    /// What the token may do: reader, writer or admin.
    #[arg(long)]
    pub role: Role,
}

/// Options of `isotint token revoke`.
#[derive(Debug, Args)]
pub struct TokenRevokeArgs {
    /// The database.
    #[command(flatten)]
    pub database: DatabaseArg,
    /// Name of the token to revoke.
    pub name: TokenName,
}

/// Options of `isotint serve`.
#[derive(Debug, Args)]
pub struct ServeArgs {
    /// Address to listen on.
    #[arg(
        long,
        env = "ISOTINT_BIND",
        hide_env_values = true,
        default_value = "127.0.0.1:8080"
    )]
    pub bind: SocketAddr,
    /// The database.
    #[command(flatten)]
    pub database: DatabaseArg,
    /// Directory whose *.json calibration files are imported (once each) at start, besides the
    /// demo set built into the binary.
    #[arg(
        long,
        env = "ISOTINT_CALIBRATION_SETS",
        hide_env_values = true,
        default_value = "calibration-sets"
    )]
    pub calibration_sets: PathBuf,
    /// Largest accepted request body, MiB.
    #[arg(
        long,
        env = "ISOTINT_UPLOAD_LIMIT_MIB",
        hide_env_values = true,
        default_value_t = 64,
        value_parser = at_least_one
    )]
    pub upload_limit_mib: usize,
    /// Calibration and map jobs that run at once.
    #[arg(
        long,
        env = "ISOTINT_MAX_JOBS",
        hide_env_values = true,
        default_value_t = 2,
        value_parser = at_least_one
    )]
    pub max_jobs: usize,
    /// Memory that admitted jobs may take together, MiB (each job's estimate from its photo's
    /// header); default half the machine's (or control group's) memory.
    #[arg(long, env = "ISOTINT_MEMORY_BUDGET_MIB", hide_env_values = true, value_parser = clap::value_parser!(u64).range(1..))]
    pub memory_budget_mib: Option<u64>,
    /// Largest total of uploads waiting for admission, MiB; past it requests get 503 with
    /// Retry-After. Default a quarter of the memory budget.
    #[arg(long, env = "ISOTINT_QUEUE_MEMORY_MIB", hide_env_values = true, value_parser = clap::value_parser!(u64).range(1..))]
    pub queue_memory_mib: Option<u64>,
    /// Longest a request waits for admission (e.g. 60s); past it 503 with Retry-After.
    #[arg(long, env = "ISOTINT_JOB_WAIT_LIMIT", hide_env_values = true, default_value = "60s", value_parser = positive_duration)]
    pub job_wait_limit: Duration,
    /// File downloads of stored maps streamed at once; past it 503 with Retry-After.
    #[arg(long, env = "ISOTINT_MAX_DOWNLOADS", hide_env_values = true, default_value_t = 8, value_parser = at_least_one)]
    pub max_downloads: usize,
    /// Longest a file download may take (e.g. 10m); a slower reader is cut off.
    #[arg(long, env = "ISOTINT_DOWNLOAD_TIME_LIMIT", hide_env_values = true, default_value = "10m", value_parser = positive_duration)]
    pub download_time_limit: Duration,
    /// Time limit of one request (e.g. 90s, 2m).
    #[arg(long, env = "ISOTINT_REQUEST_TIMEOUT", hide_env_values = true, default_value = "120s", value_parser = positive_duration)]
    pub request_timeout: Duration,
    /// Time a connection has to send a request's headers, also how long an idle connection is
    /// kept open (e.g. 30s).
    #[arg(long, env = "ISOTINT_HEADER_TIMEOUT", hide_env_values = true, default_value = "30s", value_parser = positive_duration)]
    pub header_timeout: Duration,
    /// Longest pause while a request body arrives; a stalled upload is answered 408.
    #[arg(long, env = "ISOTINT_BODY_TIMEOUT", hide_env_values = true, default_value = "30s", value_parser = positive_duration)]
    pub body_timeout: Duration,
    /// Connections served at once; further ones wait until one closes.
    #[arg(long, env = "ISOTINT_MAX_CONNECTIONS", hide_env_values = true, default_value_t = 512, value_parser = at_least_one)]
    pub max_connections: usize,
    /// How long stored order maps are served (e.g. 24h, 30m).
    #[arg(long, env = "ISOTINT_RETENTION", hide_env_values = true, default_value = "24h", value_parser = positive_duration)]
    pub retention: Duration,
    /// How often expired order maps are deleted.
    #[arg(long, env = "ISOTINT_PURGE_INTERVAL", hide_env_values = true, default_value = "5m", value_parser = positive_duration)]
    pub purge_interval: Duration,
    /// Largest accepted photo, pixels in all (checked on the header, before decoding).
    #[arg(
        long,
        env = "ISOTINT_MAX_IMAGE_PIXELS",
        hide_env_values = true,
        default_value_t = 50_000_000,
        value_parser = clap::value_parser!(u64).range(1..)
    )]
    pub max_image_pixels: u64,
    /// Whether API requests need `Authorization: Bearer TOKEN`: `auto` asks for tokens when
    /// the service listens beyond loopback or uses PostgreSQL.
    #[arg(
        long,
        env = "ISOTINT_AUTH",
        hide_env_values = true,
        default_value = "auto"
    )]
    pub auth: AuthSetting,
}

/// The `--auth` setting of `isotint serve`.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum AuthSetting {
    /// Tokens when listening beyond loopback or on PostgreSQL, open otherwise.
    Auto,
    /// Every API request but the health check needs a token.
    Required,
    /// No tokens (only for a service nobody else can reach).
    Open,
}

impl AuthSetting {
    /// The mode asked for; `None` lets the service choose.
    pub fn requested(self) -> Option<AccessMode> {
        match self {
            AuthSetting::Auto => None,
            AuthSetting::Required => Some(AccessMode::Tokens),
            AuthSetting::Open => Some(AccessMode::Open),
        }
    }
}

impl ServeArgs {
    /// The service configuration these options describe.
    pub fn config(&self) -> ServiceConfig {
        let budget = self
            .memory_budget_mib
            .map_or_else(machine_memory_budget, |m| m.saturating_mul(1 << 20));
        ServiceConfig {
            upload_limit_bytes: self.upload_limit_mib.saturating_mul(1 << 20),
            max_jobs: self.max_jobs,
            memory_budget_bytes: budget,
            queue_memory_bytes: self
                .queue_memory_mib
                .map_or(budget / 4, |m| m.saturating_mul(1 << 20)),
            job_wait_limit: self.job_wait_limit,
            max_downloads: self.max_downloads,
            download_time_limit: self.download_time_limit,
            request_timeout: self.request_timeout,
            header_timeout: self.header_timeout,
            body_timeout: self.body_timeout,
            max_connections: self.max_connections,
            retention: self.retention,
            purge_interval: self.purge_interval.max(Duration::from_secs(1)),
            decode_limits: DecodeLimits {
                max_pixels: self.max_image_pixels,
                ..DecodeLimits::default()
            },
            calibration_sets: Some(self.calibration_sets.clone()),
            access: AccessMode::Open, // replaced by the resolved mode in `service::run`
        }
    }
}

/// Options of `isotint calibrate`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct CalibrateArgs {
    /// The beam photo and what is known about it.
    #[command(flatten)]
    pub beam: BeamArgs,
    /// Where to write the calibration file (JSON).
    #[arg(long)]
    pub out: PathBuf,
}

/// A beam photo and what is known about it: the flags `isotint calibrate` and
/// `isotint client calibrate` share.
#[derive(Debug, Clone, Args)]
pub struct BeamArgs {
    /// Photo of the beam in four-point bending (PNG, JPEG or TIFF).
    #[arg(long)]
    pub photo: PathBuf,
    /// Constant-moment zone LEFT,TOP,RIGHT,BOTTOM in pixel-edge coordinates (pixels); TOP and
    /// BOTTOM are the beam's edges.
    #[arg(long, value_parser = parse_region, allow_hyphen_values = true)]
    pub region: PixelRect,
    /// Fringe order at the beam edges (dimensionless).
    #[arg(long)]
    pub edge_order: Option<f64>,
    /// Bending moment in the constant-moment zone, N·mm (with --depth-mm and
    /// --fringe-value-n-per-mm, or with --edge-order and --depth-mm to report the fringe value).
    #[arg(long, alias = "moment")]
    pub moment_n_mm: Option<f64>,
    /// Beam depth (edge to edge), mm.
    #[arg(long, alias = "depth")]
    pub depth_mm: Option<f64>,
    /// Material fringe value f_σ, N/mm per fringe.
    #[arg(long, alias = "fringe-value")]
    pub fringe_value_n_per_mm: Option<f64>,
    /// Estimate the edge order from the beam's own colour sequence instead of giving it or the
    /// load (alone, without --edge-order, --moment-n-mm, --depth-mm, --fringe-value-n-per-mm).
    /// An estimate: confirm it against a known load where possible.
    #[arg(long)]
    pub estimate_edge_order: bool,
    /// Name of the calibration (default: the photo's file name).
    #[arg(long)]
    pub name: Option<String>,
    /// Move TOP and BOTTOM to the beam edges found in the photo before measuring.
    #[arg(long)]
    pub refine_edges: bool,
    /// Grid spacing of the table, fringes.
    #[arg(long, default_value_t = DEFAULT_ORDER_STEP)]
    pub order_step: f64,
    /// Model or coating material.
    #[arg(long)]
    pub material: Option<String>,
    /// Specimen thickness, mm.
    #[arg(long)]
    pub thickness_mm: Option<f64>,
    /// Light source, e.g. "halogen 3200 K".
    #[arg(long)]
    pub light_source: Option<String>,
    /// Camera and exposure settings.
    #[arg(long)]
    pub camera: Option<String>,
    /// Free text.
    #[arg(long)]
    pub notes: Option<String>,
}

impl BeamArgs {
    /// The load fields as given, unchecked.
    pub fn load_fields(&self) -> EdgeLoadFields {
        EdgeLoadFields {
            edge_order: self.edge_order,
            moment_n_mm: self.moment_n_mm,
            depth_mm: self.depth_mm,
            fringe_value_n_per_mm: self.fringe_value_n_per_mm,
            estimate_edge_order: self.estimate_edge_order,
        }
    }

    /// The checked beam specification these flags give; errors name the flag at fault.
    pub fn spec(&self) -> anyhow::Result<BeamSpec> {
        let load = EdgeLoad::from_fields(self.load_fields()).in_flags()?;
        let name = self.name.clone().unwrap_or_else(|| {
            self.photo
                .file_stem()
                .map(|s| s.to_string_lossy().into_owned())
                .unwrap_or_else(|| "beam".into())
        });
        let metadata = CalibrationMetadata {
            name,
            material: self.material.clone().unwrap_or_default(),
            thickness_mm: self.thickness_mm,
            light_source: self.light_source.clone().unwrap_or_default(),
            camera: self.camera.clone().unwrap_or_default(),
            notes: self.notes.clone().unwrap_or_default(),
        };
        beam_spec(
            self.region,
            load,
            self.refine_edges,
            Some(self.order_step),
            metadata,
        )
        .in_flags()
    }
}

/// Options of `isotint map`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct MapArgs {
    /// Calibration file (JSON, as written by `isotint calibrate`).
    #[arg(long)]
    pub calibration: PathBuf,
    /// Specimen photo (PNG, JPEG or TIFF).
    #[arg(long)]
    pub photo: PathBuf,
    /// Mask image of the photo's size; non-zero = specimen. Without it the specimen is found
    /// from the photo (the dark, featureless background and large holes left out).
    #[arg(long, conflicts_with = "whole_photo")]
    pub mask: Option<PathBuf>,
    /// Map every pixel of the photo instead of the specimen found from it.
    #[arg(long)]
    pub whole_photo: bool,
    /// A light-field photo of the same set-up (analyser turned 90°, nothing else moved; same
    /// size): the model's outline in it brings back zero-order zones on the specimen's edge
    /// that the dark-field photo alone leaves out.
    #[arg(long, value_name = "FILE", conflicts_with_all = ["mask", "whole_photo"])]
    pub light_field_photo: Option<PathBuf>,
    /// Do not fit an exposure / white-balance / vignetting correction.
    #[arg(long)]
    pub no_exposure_compensation: bool,
    /// Largest order to consider, fringes (default: the table's maximum).
    #[arg(long)]
    pub max_order: Option<f64>,
    /// Largest plausible change of order between neighbouring pixels, fringes per pixel.
    #[arg(long)]
    pub max_gradient: Option<f64>,
    /// Known order at a point: X,Y,N in pixel-edge coordinates (repeatable).
    #[arg(long = "hint", value_parser = parse_hint, allow_hyphen_values = true)]
    pub hints: Vec<OrderHint>,
    /// Output file; the format follows the extension: .npy (float32, NaN = no value), .png
    /// (16-bit, N × 1000), .preview.png (false colour), .csv.
    #[arg(long)]
    pub out: PathBuf,
    /// Also write the standard uncertainty (1 σ) of each pixel's order, fringes, to this .npy
    /// file (float32, NaN = no value).
    #[arg(long)]
    pub uncertainty_out: Option<PathBuf>,
    /// How orders become stresses: with these the command also reports σ1 − σ2 statistics, MPa
    /// (and a coating's ε1 − ε2, µε).
    #[command(flatten)]
    pub specimen: SpecimenArgs,
    /// Also write the σ1 − σ2 map, MPa, to this file (needs a specimen: --fringe-value-n-per-mm
    /// and --thickness-mm, or a coating's flags); the format follows the extension: .npy
    /// (float32, NaN = no value), .preview.png (false colour, numbered MPa bar), .csv
    /// (x,y,stress_mpa,flags).
    #[arg(long)]
    pub stress_out: Option<PathBuf>,
    /// Also write a coating's ε1 − ε2 map, µε, to this file (needs a coating's flags); .npy,
    /// .preview.png (numbered µε bar) or .csv (x,y,strain_microstrain,flags).
    #[arg(long)]
    pub strain_out: Option<PathBuf>,
}

/// The specimen: how fringe orders become stresses. A transmission model (default) or a
/// frozen-stress slice takes --fringe-value-n-per-mm and --thickness-mm; a coating takes
/// --strain-fringe-value-um, --coating-thickness-mm, --youngs-modulus-mpa and --poisson-ratio.
#[derive(Debug, Args)]
pub struct SpecimenArgs {
    /// transmission (σ1 − σ2 = N·f_σ/h), slice (a frozen-stress slice: f_σ at the critical
    /// temperature, h the slice's thickness) or coating (in reflection: ε1 − ε2 = N·f_ε/(2·t_c),
    /// σ1 − σ2 = E/(1 + ν)·(ε1 − ε2)).
    #[arg(long, value_parser = parse_specimen_kind)]
    pub specimen: Option<SpecimenKind>,
    /// Material fringe value f_σ, N/mm per fringe (of a slice: at the critical temperature).
    #[arg(long, alias = "fringe-value")]
    pub fringe_value_n_per_mm: Option<f64>,
    /// Thickness h along the light path, mm (of a model or slice).
    #[arg(long, alias = "thickness")]
    pub thickness_mm: Option<f64>,
    /// Coating: strain fringe value f_ε, µm per fringe.
    #[arg(long)]
    pub strain_fringe_value_um: Option<f64>,
    /// Coating: thickness t_c, mm.
    #[arg(long)]
    pub coating_thickness_mm: Option<f64>,
    /// Coating: Young's modulus E of the coated part, MPa.
    #[arg(long)]
    pub youngs_modulus_mpa: Option<f64>,
    /// Coating: Poisson's ratio ν of the coated part (0 ≤ ν < 0.5).
    #[arg(long)]
    pub poisson_ratio: Option<f64>,
}

impl SpecimenArgs {
    /// The specimen these flags describe (`None` when none is given), a transmission model's
    /// missing --fringe-value-n-per-mm and --thickness-mm taken from the calibration `table`,
    /// and where each came from; errors name the flag.
    fn specimen(
        &self,
        table: &CalibrationTable,
    ) -> anyhow::Result<(Option<Specimen>, InputOrigins)> {
        SpecimenFields {
            specimen: self.specimen,
            fringe_value_n_per_mm: self.fringe_value_n_per_mm,
            thickness_mm: self.thickness_mm,
            strain_fringe_value_um: self.strain_fringe_value_um,
            coating_thickness_mm: self.coating_thickness_mm,
            youngs_modulus_mpa: self.youngs_modulus_mpa,
            poisson_ratio: self.poisson_ratio,
        }
        .specimen_with(table.stress_defaults())
        .in_flags()
    }

    /// As [`SpecimenArgs::specimen`], for a command that cannot go without one (`command`).
    fn required(
        &self,
        table: &CalibrationTable,
        command: &str,
    ) -> anyhow::Result<(Specimen, InputOrigins)> {
        let (specimen, origins) = self.specimen(table)?;
        let specimen = specimen.ok_or_else(|| {
            anyhow::anyhow!(
                "{command} needs --fringe-value-n-per-mm and --thickness-mm (each defaults to \
                 the calibration's value where it has one) or, for a coating, \
                 --strain-fringe-value-um, --coating-thickness-mm, --youngs-modulus-mpa and \
                 --poisson-ratio"
            )
        })?;
        Ok((specimen, origins))
    }
}

/// The line printed about inputs taken from the calibration (empty when none was).
fn origins_text(origins: &InputOrigins) -> String {
    match origins.lines() {
        lines if lines.is_empty() => String::new(),
        lines => format!("  inputs from         {}\n", lines.join("; ")),
    }
}

/// Options of `isotint boundary`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct BoundaryArgs {
    /// Calibration file (JSON, as written by `isotint calibrate`).
    #[arg(long)]
    pub calibration: PathBuf,
    /// Specimen photo (PNG, JPEG or TIFF).
    #[arg(long)]
    pub photo: PathBuf,
    /// Mask image of the photo's size; non-zero = specimen. Its outline is the edge sampled
    /// (not where it meets the photo's border). Without it the specimen is found from the photo.
    #[arg(long)]
    pub mask: Option<PathBuf>,
    /// How orders become stresses (a transmission model's --fringe-value-n-per-mm and
    /// --thickness-mm default to the calibration's values; or a slice's, or a coating's flags).
    #[command(flatten)]
    pub specimen: SpecimenArgs,
    /// Nominal stress σ_nom, MPa: adds K_t = σ_max / σ_nom.
    #[arg(long, alias = "nominal-stress")]
    pub nominal_stress_mpa: Option<f64>,
    /// Sample along this polyline instead of the mask's outline: "X1,Y1;X2,Y2;…" in
    /// pixel-edge coordinates (at least two points, inside the photo, the specimen on one side).
    #[arg(long, value_parser = parse_polyline, allow_hyphen_values = true)]
    pub polyline: Option<Polyline>,
    /// The photo's scale, mm per pixel: positions are also given in mm (x_mm, y_mm; the CSV's
    /// x_mm, y_mm, along_mm).
    #[arg(long)]
    pub mm_per_px: Option<f64>,
    /// Also write every edge point, in order along the edge, to this CSV file
    /// (x,y,normal_x,normal_y,order,stress_mpa,beyond_range,contour,along_px and, with
    /// --mm-per-px, x_mm,y_mm,along_mm).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Print one JSON object (max_stress_mpa, x, y, order, kt, beyond_range, …) instead of text.
    #[arg(long)]
    pub json: bool,
}

/// Options of `isotint series`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct SeriesArgs {
    /// Calibration file (JSON, as written by `isotint calibrate`).
    #[arg(long)]
    pub calibration: PathBuf,
    /// The photos, their loads and the specimen.
    #[command(flatten)]
    pub series: SeriesPhotos,
    /// Also write the slope of every pixel, fringes per N, to this .npy file (float32, NaN =
    /// not fitted).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Print one JSON object (fringe_value, slope_fringes_per_n, linearity_rms,
    /// nonlinear_share, …) instead of text.
    #[arg(long)]
    pub json: bool,
}

/// The photos of a load series and what is known about them: the flags `isotint series` and
/// `isotint client series` share.
#[derive(Debug, Clone, Args)]
pub struct SeriesPhotos {
    /// Mask image of the photos' size; non-zero = specimen (for a disc: the disc alone).
    /// Without it the specimen is found from the photo of the largest load.
    #[arg(long)]
    pub mask: Option<PathBuf>,
    /// A photo of the series (repeat, at least twice; all of one size, one view).
    #[arg(long = "photo", required = true)]
    pub photos: Vec<PathBuf>,
    /// Load of the photo in the same place, N (repeat once per --photo, in the same order).
    #[arg(long = "load-n", alias = "load")]
    pub loads_n: Vec<f64>,
    /// Diameter of a disc in diametral compression, mm: adds its fringe value from the centre,
    /// where σ1 − σ2 = 8P/(πDh).
    #[arg(long, alias = "disc-diameter")]
    pub disc_diameter_mm: Option<f64>,
    /// The disc's thickness, mm (with --disc-diameter-mm): adds its stress per fringe f_σ/h.
    #[arg(long, alias = "thickness")]
    pub thickness_mm: Option<f64>,
}

impl SeriesPhotos {
    /// The checked series these flags describe; errors name the flag at fault.
    pub fn spec(&self) -> anyhow::Result<SeriesSpec> {
        SeriesSpec::new(
            self.photos.len(),
            self.loads_n.clone(),
            self.disc_diameter_mm,
            self.thickness_mm,
        )
        .in_flags()
    }

    /// The input files, each with its flag.
    fn inputs(&self) -> Vec<(&'static str, Option<&PathBuf>)> {
        let mut inputs = vec![("--mask", self.mask.as_ref())];
        inputs.extend(self.photos.iter().map(|p| ("--photo", Some(p))));
        inputs
    }
}

/// Options of `isotint compare`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct CompareArgs {
    /// Calibration file (JSON, as written by `isotint calibrate`).
    #[arg(long)]
    pub calibration: PathBuf,
    /// Specimen photo (PNG, JPEG or TIFF).
    #[arg(long)]
    pub photo: PathBuf,
    /// Mask image of the photo's size; non-zero = specimen. Without it the specimen is found
    /// from the photo (the whole photo when none is found).
    #[arg(long)]
    pub mask: Option<PathBuf>,
    /// How orders become stresses (a transmission model's --fringe-value-n-per-mm and
    /// --thickness-mm default to the calibration's values; or a slice's, or a coating's flags).
    #[command(flatten)]
    pub specimen: SpecimenArgs,
    /// The predicted σ1 − σ2: CSV of nodes x_mm,y_mm,stress_mpa (model coordinates, mm; MPa);
    /// one header row allowed.
    #[arg(long)]
    pub prediction: PathBuf,
    /// A pixel and the model point it shows: XPX,YPX,XMM,YMM (pixel-edge coordinates, mm;
    /// repeat: two pairs give a similarity, three or more a least-squares affine map, needed
    /// when the model's y axis points up).
    #[arg(long = "pair", value_parser = parse_pair, allow_hyphen_values = true)]
    pub pairs: Vec<PointPair>,
    /// Also write measured − predicted, MPa: .npy (float32, NaN = not compared) or .csv
    /// (x,y,difference_mpa).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Print one JSON object (mean_abs_difference_mpa, rms_difference_mpa,
    /// max_abs_difference_mpa, compared_pixels, …) instead of text.
    #[arg(long)]
    pub json: bool,
}

/// Options of `isotint report`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct ReportArgs {
    /// Calibration file (JSON, as written by `isotint calibrate`).
    #[arg(long)]
    pub calibration: PathBuf,
    /// Specimen photo (PNG, JPEG or TIFF).
    #[arg(long)]
    pub photo: PathBuf,
    /// Mask image of the photo's size; non-zero = specimen. Its outline is the edge sampled.
    #[arg(long)]
    pub mask: PathBuf,
    /// How orders become stresses (required: --fringe-value-n-per-mm and --thickness-mm, or a
    /// coating's flags).
    #[command(flatten)]
    pub specimen: SpecimenArgs,
    /// Nominal stress σ_nom, MPa: adds K_t = σ_max / σ_nom.
    #[arg(long, alias = "nominal-stress")]
    pub nominal_stress_mpa: Option<f64>,
    /// The load the photo was taken at, N (stated in the report).
    #[arg(long, alias = "load")]
    pub load_n: Option<f64>,
    /// Image scale, mm per pixel: positions are also given in mm.
    #[arg(long)]
    pub mm_per_px: Option<f64>,
    /// Sample the edge along this polyline instead of the mask's outline: "X1,Y1;X2,Y2;…".
    #[arg(long, value_parser = parse_polyline, allow_hyphen_values = true)]
    pub polyline: Option<Polyline>,
    /// Title of the report's first page.
    #[arg(long)]
    pub title: Option<String>,
    /// Where to write the report (PDF).
    #[arg(long)]
    pub out: PathBuf,
}

/// Options of `isotint demo`.
#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Directory to write to (created if missing).
    #[arg(long)]
    pub out: PathBuf,
}

/// A count of at least one (for `usize` flags).
fn at_least_one(text: &str) -> Result<usize, String> {
    match text.trim().parse::<usize>() {
        Ok(n) if n >= 1 => Ok(n),
        _ => Err(format!("{text:?} is not a whole number of at least 1")),
    }
}

/// A duration of at least a millisecond, as humantime spells it (90s, 2m, 24h).
fn positive_duration(text: &str) -> Result<Duration, String> {
    let d = humantime::parse_duration(text).map_err(|e| e.to_string())?;
    if d < Duration::from_millis(1) {
        return Err(format!("{text:?} is not a positive duration"));
    }
    Ok(d)
}

fn parse_region(text: &str) -> Result<PixelRect, String> {
    PixelRect::parse(text).map_err(|e| e.to_string())
}

fn parse_pair(text: &str) -> Result<PointPair, String> {
    PointPair::parse(text).map_err(|e| e.to_string())
}

fn parse_specimen_kind(text: &str) -> Result<SpecimenKind, String> {
    SpecimenKind::from_name(text).map_err(|e| e.to_string())
}

/// The points of a `--polyline` flag, in pixel-edge coordinates.
#[derive(Debug, Clone, PartialEq)]
pub struct Polyline(pub Vec<PixelPoint>);

/// "X1,Y1;X2,Y2;…" as points; each pair two finite numbers.
fn parse_polyline(text: &str) -> Result<Polyline, String> {
    text.split(';')
        .filter(|p| !p.trim().is_empty())
        .map(|pair| {
            let parts: Vec<&str> = pair.split(',').map(str::trim).collect();
            let [x, y] = parts[..] else {
                return Err(format!("expected X,Y between the semicolons, got {pair:?}"));
            };
            let number = |s: &str| {
                s.parse::<f64>()
                    .ok()
                    .filter(|v| v.is_finite())
                    .ok_or_else(|| format!("{s:?} is not a finite number"))
            };
            Ok(PixelPoint {
                x: number(x)?,
                y: number(y)?,
            })
        })
        .collect::<Result<Vec<_>, _>>()
        .map(Polyline)
}

fn parse_hint(text: &str) -> Result<OrderHint, String> {
    let parts: Vec<&str> = text.split(',').map(str::trim).collect();
    let [x, y, n] = parts[..] else {
        return Err(format!("expected X,Y,N, got {text:?}"));
    };
    let number = |s: &str| {
        s.parse::<f64>()
            .ok()
            .filter(|v| v.is_finite())
            .ok_or_else(|| format!("{s:?} is not a finite number"))
    };
    Ok(OrderHint {
        at: PixelPoint {
            x: number(x)?,
            y: number(y)?,
        },
        order: number(n)?,
    })
}

/// The API field names of the core's and the service's messages, each with the flag that
/// carries it on the command line.
const FIELD_FLAGS: &[(&str, &str)] = &[
    ("edge_order", "--edge-order"),
    ("moment_n_mm", "--moment-n-mm"),
    ("depth_mm", "--depth-mm"),
    ("fringe_value_n_per_mm", "--fringe-value-n-per-mm"),
    ("estimate_edge_order", "--estimate-edge-order"),
    ("region", "--region"),
    ("order_step", "--order-step"),
    ("name", "--name"),
    ("material", "--material"),
    ("thickness_mm", "--thickness-mm"),
    ("light_source", "--light-source"),
    ("camera", "--camera"),
    ("notes", "--notes"),
    ("photo", "--photo"),
    ("mask", "--mask"),
    ("light_field_photo", "--light-field-photo"),
    ("calibration", "--calibration"),
    ("max_order", "--max-order"),
    ("max_gradient", "--max-gradient"),
    ("hints", "--hint"),
    ("out", "--out"),
    ("stress_out", "--stress-out"),
    ("nominal_stress_mpa", "--nominal-stress-mpa"),
    ("loads_n", "--load-n"),
    ("disc_diameter_mm", "--disc-diameter-mm"),
    ("prediction", "--prediction"),
    ("pairs", "--pair"),
    ("polyline", "--polyline"),
    ("specimen", "--specimen"),
    ("strain_fringe_value_um", "--strain-fringe-value-um"),
    ("coating_thickness_mm", "--coating-thickness-mm"),
    ("youngs_modulus_mpa", "--youngs-modulus-mpa"),
    ("poisson_ratio", "--poisson-ratio"),
    ("load_n", "--load-n"),
    ("mm_per_px", "--mm-per-px"),
    ("title", "--title"),
    ("supersedes", "--supersedes"),
];

/// The flag that carries an API field (the field itself if no flag does).
fn flag_of(field: &str) -> &str {
    FIELD_FLAGS
        .iter()
        .find(|(f, _)| *f == field)
        .map_or(field, |(_, flag)| flag)
}

/// `text` with every API field name written in `snake_case` replaced by its flag (plain words
/// such as "photo" stay words).
pub(crate) fn with_flags(text: &str) -> String {
    fn push_word(word: &mut String, out: &mut String) {
        out.push_str(if word.contains('_') {
            flag_of(word)
        } else {
            word
        });
        word.clear();
    }
    let mut out = String::with_capacity(text.len() + 16);
    let mut word = String::new();
    for c in text.chars() {
        if c.is_ascii_alphanumeric() || c == '_' {
            word.push(c);
        } else {
            push_word(&mut word, &mut out);
            out.push(c);
        }
    }
    push_word(&mut word, &mut out);
    out
}

/// Core results as the command line reports them: an invalid value names the flag the user
/// typed, not the API field.
trait InFlags<T> {
    fn in_flags(self) -> anyhow::Result<T>;
}

impl<T> InFlags<T> for CoreResult<T> {
    fn in_flags(self) -> anyhow::Result<T> {
        self.map_err(|e| match e {
            CoreError::Invalid { field, message } => {
                anyhow::anyhow!("invalid {}: {}", flag_of(field), with_flags(&message))
            }
            // The decoder names its input ("the photo is …"): lead with its flag.
            e @ (CoreError::Decode(_) | CoreError::TooLarge(_)) => match input_flag(&e.to_string())
            {
                Some(flag) => anyhow::anyhow!("{flag}: {e}"),
                None => e.into(),
            },
            other => other.into(),
        })
    }
}

/// The flag of the first input file a decoder's message names ("the photo is …" → "--photo").
fn input_flag(message: &str) -> Option<&'static str> {
    const INPUTS: [(&str, &str); 2] = [("photo", "--photo"), ("mask", "--mask")];
    message
        .split(|c: char| !c.is_ascii_alphanumeric())
        .find_map(|word| INPUTS.iter().find(|(w, _)| *w == word).map(|(_, f)| *f))
}

fn init_tracing(format: LogFormat) {
    let filter = tracing_subscriber::EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new("info,sqlx=warn"));
    let builder = tracing_subscriber::fmt().with_env_filter(filter);
    match format {
        LogFormat::Text => builder.init(),
        LogFormat::Json => builder.json().init(),
    }
}

/// Runs a parsed command line.
pub fn run(cli: Cli) -> anyhow::Result<()> {
    init_tracing(cli.log_format);
    match cli.command {
        Command::Serve(args) => serve(&args),
        Command::Calibrate(args) => calibrate(&args),
        Command::Map(args) => map(&args),
        Command::Boundary(args) => boundary(&args),
        Command::Series(args) => series(&args),
        Command::Compare(args) => compare_prediction(&args),
        Command::Report(args) => report(&args),
        Command::Demo(args) => demo(&args),
        Command::Token(command) => runtime()?.block_on(token(command)),
        Command::Backup(args) => runtime()?.block_on(backup(&args)),
        Command::Restore(args) => runtime()?.block_on(restore(&args)),
        Command::Client(command) => runtime()?.block_on(crate::client::run(command)),
    }
}

fn runtime() -> anyhow::Result<tokio::runtime::Runtime> {
    tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
        .context("could not start the async runtime")
}

fn serve(args: &ServeArgs) -> anyhow::Result<()> {
    runtime()?.block_on(crate::service::run(
        args.bind,
        &args.database.database,
        args.auth.requested(),
        args.config(),
    ))
}

async fn open_database(arg: &DatabaseArg) -> anyhow::Result<Storage> {
    Storage::connect(&arg.database)
        .await
        .context("--database: could not open the database")
}

/// Runs `isotint token …` on its database.
async fn token(command: TokenCommand) -> anyhow::Result<()> {
    match command {
        TokenCommand::Create(args) => {
            let storage = open_database(&args.database).await?;
            let token = Token::generate().context("could not draw random bytes for the token")?;
            let origin = Origin::local(Actor::CommandLine);
            tokens::create(&storage, &args.name, args.role, &token.sha256(), &origin)
                .await
                .map_err(|e| match e {
                    StorageError::Conflict(m) => anyhow::anyhow!("--name: {m}"),
                    other => other.into(),
                })?;
            storage.close().await;
            println!(
                "token {} ({}) made; it is shown only this once, keep it secret:",
                args.name, args.role
            );
            println!("{}", token.reveal());
        }
        TokenCommand::List(args) => {
            let storage = open_database(&args).await?;
            let rows = tokens::list(&storage).await?;
            storage.close().await;
            print!("{}", token_table(&rows));
        }
        TokenCommand::Revoke(args) => {
            let storage = open_database(&args.database).await?;
            tokens::revoke(&storage, &args.name, &Origin::local(Actor::CommandLine))
                .await
                .map_err(|e| match e {
                    StorageError::NotFound { .. } => anyhow::anyhow!(
                        "NAME: no token named {} to revoke (none by that name, or it is revoked already)",
                        args.name
                    ),
                    other => other.into(),
                })?;
            storage.close().await;
            println!("token {} revoked", args.name);
        }
    }
    Ok(())
}

/// Runs `isotint backup`.
async fn backup(args: &BackupArgs) -> anyhow::Result<()> {
    // Opening a SQLite URL creates a missing file: a mistyped path would back up an empty
    // library without a word.
    if let Some(file) = sqlite_file(&args.database.database).filter(|f| !f.exists()) {
        anyhow::bail!(
            "--database: no SQLite database at {}; nothing to back up",
            file.display()
        );
    }
    let storage = open_database(&args.database).await?;
    let written = crate::backup::write(&storage, &args.out).await;
    storage.close().await;
    println!("backup of {} written to {}", written?, args.out.display());
    Ok(())
}

/// The file of a `sqlite:` database URL (`sqlite://FILE?…` or `sqlite:FILE`), `None` for other
/// databases and for an in-memory one.
fn sqlite_file(url: &str) -> Option<PathBuf> {
    let rest = url
        .strip_prefix("sqlite://")
        .or_else(|| url.strip_prefix("sqlite:"))?;
    let file = rest.split('?').next().unwrap_or_default();
    (!file.is_empty() && file != ":memory:").then(|| PathBuf::from(file))
}

/// The process's exit code after `error`: [`EXIT_NOT_DONE`] when a client run sent its
/// requests but not everything was done, 1 otherwise.
pub fn exit_code(error: &anyhow::Error) -> u8 {
    if error.downcast_ref::<NotDone>().is_some() {
        EXIT_NOT_DONE
    } else {
        1
    }
}

/// Runs `isotint restore`.
async fn restore(args: &RestoreArgs) -> anyhow::Result<()> {
    let storage = open_database(&args.database).await?;
    let restored = crate::backup::restore(&storage, &args.from).await;
    storage.close().await;
    match restored? {
        Restored::Written(summary) => {
            println!("restored {summary} from {}", args.from.display())
        }
        Restored::AlreadyPresent(summary) => {
            println!("the database holds this backup already ({summary}); nothing was changed")
        }
    }
    Ok(())
}

/// The table `isotint token list` prints.
fn token_table(rows: &[TokenRow]) -> String {
    let seconds = |t: OffsetDateTime| rfc3339(t.replace_nanosecond(0).unwrap_or(t));
    let time = |t: Option<OffsetDateTime>, none: &str| t.map_or(none.to_string(), seconds);
    let mut out = format!(
        "{:<24} {:<7} {:<20} {:<20} {}\n",
        "NAME", "ROLE", "CREATED", "LAST USED", "REVOKED"
    );
    for r in rows {
        out += &format!(
            "{:<24} {:<7} {:<20} {:<20} {}\n",
            r.name.as_str(),
            r.role.name(),
            seconds(r.created_at),
            time(r.last_used_at, "never"),
            time(r.revoked_at, "-")
        );
    }
    out
}

fn read(path: &Path, what: &str) -> anyhow::Result<Vec<u8>> {
    std::fs::read(path).with_context(|| format!("could not read the {what} {}", path.display()))
}

fn write(path: &Path, bytes: &[u8]) -> anyhow::Result<()> {
    std::fs::write(path, bytes).with_context(|| format!("could not write {}", path.display()))
}

fn calibrate(args: &CalibrateArgs) -> anyhow::Result<()> {
    let beam = &args.beam;
    refuse_overwriting(&[("--photo", Some(&beam.photo))], "--out", &args.out)?;
    let spec = beam.spec()?;
    let photo = read(&beam.photo, "photo")?;
    let calibration = pipeline::calibrate(&photo, &spec, &DecodeLimits::default()).in_flags()?;
    write(&args.out, calibration.table.to_json().as_bytes())?;
    println!(
        "calibration {:?} written to {}",
        calibration.table.metadata.name,
        args.out.display()
    );
    print!("{}", report_text(&calibration.report));
    Ok(())
}

/// The lines `isotint calibrate` prints about a calibration.
pub fn report_text(r: &BeamReport) -> String {
    let mut out = format!(
        "  edge order          {:.3} fringes\n  max order in table  {:.3} fringes\n  \
         residual            mean {:.2}, p95 {:.2} ΔE00 (CIEDE2000)\n  \
         rows                {} used, {} edge rows skipped, {} outlier rows, {:.1} % outlier pixels\n",
        r.edge_order,
        r.max_order,
        r.residual_mean_de2000,
        r.residual_p95_de2000,
        r.rows_used,
        r.edge_rows_skipped,
        r.outlier_rows,
        100.0 * r.outlier_pixel_share
    );
    if let Some(s) = r.edge_shift {
        out += &format!(
            "  edge shift          top {:+.2} px, bottom {:+.2} px\n",
            s.top_px, s.bottom_px
        );
    }
    if let Some(f) = r.fringe_value_n_per_mm {
        out += &format!("  fringe value        {f:.3} N/mm per fringe\n");
    }
    if let Some(e) = &r.edge_order_estimate {
        let [red, green, blue] = e.channel_gains;
        out += &format!(
            "  edge-order estimate {:.3} fringes, confidence {}; best match {} / {}, mean ΔE00 \
             {:.2}, channel gains {red:.2} {green:.2} {blue:.2}\n",
            e.edge_order,
            e.confidence.name(),
            e.light.description(),
            e.camera.description(),
            e.residual_de2000
        );
        match (e.runner_up, e.cost_ratio) {
            (Some(alt), Some(ratio)) => {
                out += &format!(
                    "  runner-up           {:.3} fringes, mean ΔE00 {:.2} (cost {ratio:.1} × the estimate's)\n",
                    alt.edge_order, alt.residual_de2000
                )
            }
            _ => out += "  runner-up           none (no separate minimum)\n",
        }
        out += &format!("  caution             {ESTIMATE_CAUTION}\n");
    }
    out
}

/// Whether `a` and `b` name the same existing file (false when either does not exist).
fn same_file(a: &Path, b: &Path) -> bool {
    match (std::fs::canonicalize(a), std::fs::canonicalize(b)) {
        (Ok(a), Ok(b)) => a == b,
        _ => false,
    }
}

/// Refuses an output path (given with `flag`) that is one of the command's input files, each
/// given as (its flag, its path if any).
fn refuse_overwriting(
    inputs: &[(&str, Option<&PathBuf>)],
    flag: &str,
    out: &Path,
) -> anyhow::Result<()> {
    for (input, path) in inputs {
        if path.is_some_and(|p| same_file(p, out)) {
            anyhow::bail!(
                "{flag} {} is the {input} file; refusing to overwrite an input",
                out.display()
            );
        }
    }
    Ok(())
}

/// Reads and checks a calibration file.
fn read_table(path: &Path) -> anyhow::Result<CalibrationTable> {
    read_table_file(path).map(|(table, _)| table)
}

/// A calibration file's table and its bytes.
fn read_table_file(path: &Path) -> anyhow::Result<(CalibrationTable, Vec<u8>)> {
    let bytes = read(path, "calibration")?;
    let table = CalibrationTable::from_json(&bytes)
        .with_context(|| format!("{} is not a usable calibration file", path.display()))?;
    Ok((table, bytes))
}

fn boundary(args: &BoundaryArgs) -> anyhow::Result<()> {
    if let Some(out) = &args.out {
        let inputs = [
            ("--photo", Some(&args.photo)),
            ("--mask", args.mask.as_ref()),
            ("--calibration", Some(&args.calibration)),
        ];
        refuse_overwriting(&inputs, "--out", out)?;
    }
    let scale = args.mm_per_px.map(Scale::new).transpose().in_flags()?;
    let table = read_table(&args.calibration)?;
    let (specimen, origins) = args.specimen.required(&table, "boundary")?;
    let photo = read(&args.photo, "photo")?;
    let (map, used) = map_with_mask(&photo, args.mask.as_deref(), &table)?;
    if used.source == MaskSource::WholePhoto && args.polyline.is_none() {
        anyhow::bail!(
            "--mask is needed: no specimen was found in the photo, so it has no outline to \
             sample (or give --polyline)"
        );
    }
    let path = args
        .polyline
        .clone()
        .map_or(EdgePath::Outline, |p| EdgePath::Polyline(p.0));
    let result =
        boundary_stress(&map, &specimen.law(), args.nominal_stress_mpa, &path).in_flags()?;
    let result = match scale {
        Some(scale) => result.with_scale(scale),
        None => result,
    };
    if let Some(out) = &args.out {
        write(out, &edge_csv(&result))?;
    }
    if args.json {
        let answer = WithOrigins {
            result: &result,
            inputs_from: origins,
        };
        println!("{}", with_mask(&answer, used)?);
        return Ok(());
    }
    print!("{}", mask_text(&used, MASK_FLAG));
    print!("{}", origins_text(&origins));
    let in_mm = match (result.x_mm, result.y_mm) {
        (Some(x), Some(y)) => format!(" px = ({x:.2}, {y:.2}) mm"),
        _ => String::new(),
    };
    println!(
        "  max |σ_t|           {} at ({:.1}, {:.1}){in_mm}, order {:.3}",
        maximum_text(result.max_stress_mpa, "MPa", result.max_is_lower_bound),
        result.x,
        result.y,
        result.order
    );
    if let Some(kt) = result.kt {
        println!(
            "  K_t                 {}",
            maximum_text(kt, "", result.max_is_lower_bound)
        );
    }
    println!(
        "  edge points         {} sampled, {} with a value\n  stress caution      {}",
        result.edge_points, result.valued_points, result.caution
    );
    Ok(())
}

fn series(args: &SeriesArgs) -> anyhow::Result<()> {
    let photos = &args.series;
    if let Some(out) = &args.out {
        let mut inputs = photos.inputs();
        inputs.push(("--calibration", Some(&args.calibration)));
        refuse_overwriting(&inputs, "--out", out)?;
        if !out.to_string_lossy().to_ascii_lowercase().ends_with(".npy") {
            anyhow::bail!(
                "--out {}: the slope map is written as NPY; use a .npy file",
                out.display()
            );
        }
    }
    let spec = photos.spec()?;
    let table = read_table(&args.calibration)?;
    let mask = photos.mask.as_ref().map(|m| read(m, "mask")).transpose()?;
    let photos = photos
        .photos
        .iter()
        .map(|p| read(p, "photo"))
        .collect::<anyhow::Result<Vec<_>>>()?;
    let limits = DecodeLimits::default();
    let (result, used) =
        pipeline::series(&spec, &photos, mask.as_deref(), &table, &limits).in_flags()?;
    if let Some(out) = &args.out {
        write(out, &pipeline::slope_npy(&result))?;
    }
    if args.json {
        println!("{}", with_mask(&result, used)?);
    } else {
        print!("{}{}", series_text(&result), mask_text(&used, MASK_FLAG));
    }
    Ok(())
}

/// The lines `isotint series` prints about a fitted series.
fn series_text(s: &LoadSeries) -> String {
    let optional =
        |v: Option<f64>, unit: &str| v.map_or("—".into(), |v| format!("{v:.4} {unit}"));
    let loads: Vec<String> = s.loads_n.iter().map(|p| format!("{p}")).collect();
    let mut out = format!(
        "  photos              {} at {} N
  fitted pixels       {} of {} specimen pixels          (a value in two or more photos)
  slope at centre     {} (at {:.1}, {:.1}; {} pixels)
           mean slope          {:.4e} fringes/N
  linearity rms       {:.4} fringes
           not linear          {:.2} % of fitted pixels (residual rms above {} fringe)
",
        s.photos,
        loads.join(", "),
        s.fitted_pixels,
        s.specimen_pixels,
        s.slope_fringes_per_n
            .map_or("—".into(), |v| format!("{v:.4e} fringes/N")),
        s.centre_x,
        s.centre_y,
        s.centre_pixels,
        s.mean_slope_fringes_per_n,
        s.linearity_rms,
        100.0 * s.nonlinear_share,
        s.nonlinear_tolerance
    );
    if s.disc.is_some() {
        out += &format!(
            "  fringe value        {}
  stress per fringe   {}
  caution             {}
",
            optional(s.fringe_value, "N/mm per fringe"),
            optional(s.stress_per_fringe_mpa, "MPa"),
            s.caution
        );
    }
    out
}

fn compare_prediction(args: &CompareArgs) -> anyhow::Result<()> {
    if let Some(out) = &args.out {
        let inputs = [
            ("--photo", Some(&args.photo)),
            ("--mask", args.mask.as_ref()),
            ("--calibration", Some(&args.calibration)),
            ("--prediction", Some(&args.prediction)),
        ];
        refuse_overwriting(&inputs, "--out", out)?;
    }
    let format = match &args.out {
        None => None,
        Some(out) => match OutputFormat::from_path(&out.to_string_lossy()) {
            Ok(f @ (OutputFormat::Npy | OutputFormat::Csv)) => Some(f),
            _ => anyhow::bail!(
                "--out {}: use .npy (float32 MPa) or .csv (x,y,difference_mpa)",
                out.display()
            ),
        },
    };
    let table = read_table(&args.calibration)?;
    let (specimen, origins) = args.specimen.required(&table, "compare")?;
    let registration = Registration::fit(&args.pairs).in_flags()?;
    let text = String::from_utf8(read(&args.prediction, "prediction")?).map_err(|_| {
        anyhow::anyhow!(
            "--prediction {} is not UTF-8 text",
            args.prediction.display()
        )
    })?;
    let prediction = Prediction::from_csv(&text).in_flags()?;
    let photo = read(&args.photo, "photo")?;
    let (map, used) = map_with_mask(&photo, args.mask.as_deref(), &table)?;
    let result = compare(&map, &specimen.law(), &prediction, &registration).in_flags()?;
    if let (Some(out), Some(format)) = (&args.out, format) {
        let bytes = match format {
            OutputFormat::Csv => difference_csv(&result),
            _ => export::npy_f32(
                &result.difference,
                result.height as usize,
                result.width as usize,
            ),
        };
        write(out, &bytes)?;
    }
    if args.json {
        let answer = WithOrigins {
            result: &result,
            inputs_from: origins,
        };
        println!("{}", with_mask(&answer, used)?);
        return Ok(());
    }
    print!("{}", mask_text(&used, MASK_FLAG));
    print!("{}", origins_text(&origins));
    println!(
        "  compared pixels     {} of {} specimen pixels ({:.1} % inside the model)
           measured − predicted mean {:+.3}, mean |Δ| {:.3}, rms {:.3} MPa
           max |Δ|             {} at ({:.1}, {:.1}) px = ({:.2}, {:.2}) mm in the model
           registration        {:?} from {} pairs, rms {:.3} mm, {:.4} mm/px{}
           stress caution      {}",
        result.compared_pixels,
        result.specimen_pixels,
        100.0 * result.model_coverage,
        result.mean_difference_mpa,
        result.mean_abs_difference_mpa,
        result.rms_difference_mpa,
        maximum_text(
            result.max_abs_difference_mpa,
            "MPa",
            result.max_is_lower_bound
        ),
        result.max_x,
        result.max_y,
        result.max_x_mm,
        result.max_y_mm,
        result.registration.kind,
        result.registration.pairs,
        result.registration.rms_mm,
        result.registration.mm_per_px,
        if result.registration.mirrored {
            ", mirrored"
        } else {
            ""
        },
        result.caution
    );
    Ok(())
}

fn report(args: &ReportArgs) -> anyhow::Result<()> {
    let inputs = [
        ("--photo", Some(&args.photo)),
        ("--mask", Some(&args.mask)),
        ("--calibration", Some(&args.calibration)),
    ];
    refuse_overwriting(&inputs, "--out", &args.out)?;
    let (table, table_bytes) = read_table_file(&args.calibration)?;
    let (specimen, origins) = args.specimen.required(&table, "a report")?;
    let options = ReportOptions {
        nominal_stress_mpa: args.nominal_stress_mpa,
        load_n: args.load_n,
        mm_per_px: args.mm_per_px,
        title: args.title.clone(),
    };
    options.validate().in_flags()?;
    let file_name = |p: &Path| {
        p.file_name().map_or_else(
            || p.display().to_string(),
            |n| n.to_string_lossy().into_owned(),
        )
    };
    let inputs = ReportInputs {
        photo_name: file_name(&args.photo),
        calibration_name: table.metadata.name.clone(),
        calibration_id: format!(
            "file {}, SHA-256 {}",
            file_name(&args.calibration),
            crate::storage::calibrations::sha256_hex(&table_bytes)
        ),
        material: table.metadata.material.clone(),
        specimen,
        origins,
        edge: args
            .polyline
            .clone()
            .map_or(EdgePath::Outline, |p| EdgePath::Polyline(p.0)),
        options,
    };
    let photo = read(&args.photo, "photo")?;
    let mask = read(&args.mask, "mask")?;
    let pdf = pipeline::report(
        &photo,
        Some(&mask),
        &table,
        &MapOptions::default(),
        &DecodeLimits::default(),
        &inputs,
    )
    .in_flags()?;
    write(&args.out, &pdf)?;
    println!("report written to {}", args.out.display());
    Ok(())
}

/// What `isotint map` writes, checked before any work: the orders' format, the specimen (if
/// given) and the stress and strain files (if asked for).
struct MapOutputs {
    orders: OutputFormat,
    table: CalibrationTable,
    specimen: Option<Specimen>,
    origins: InputOrigins,
    scaled: Vec<(PathBuf, FileKind)>,
}

/// Checks the output paths of `isotint map` before any work: none is an input file or another
/// output, the uncertainty goes to a .npy file, the stress map to .npy, .preview.png or .csv
/// and only with a fringe value and thickness.
fn map_outputs(args: &MapArgs) -> anyhow::Result<MapOutputs> {
    let inputs = [
        ("--photo", Some(&args.photo)),
        ("--mask", args.mask.as_ref()),
        ("--light-field-photo", args.light_field_photo.as_ref()),
        ("--calibration", Some(&args.calibration)),
    ];
    let outputs = [
        ("--out", Some(&args.out)),
        ("--uncertainty-out", args.uncertainty_out.as_ref()),
        ("--stress-out", args.stress_out.as_ref()),
        ("--strain-out", args.strain_out.as_ref()),
    ];
    for (i, (flag, path)) in outputs.iter().enumerate() {
        let Some(path) = path else { continue };
        refuse_overwriting(&inputs, flag, path)?;
        for (earlier, other) in &outputs[..i] {
            if other.is_some_and(|o| o == *path || same_file(o, path)) {
                anyhow::bail!(
                    "{flag} {} is the {earlier} file; give each output its own file",
                    path.display()
                );
            }
        }
    }
    let orders = OutputFormat::from_path(&args.out.to_string_lossy()).in_flags()?;
    if let Some(u) = &args.uncertainty_out {
        if !u.to_string_lossy().to_ascii_lowercase().ends_with(".npy") {
            anyhow::bail!(
                "--uncertainty-out {}: the uncertainty is written as NPY; use a .npy file",
                u.display()
            );
        }
    }
    let table = read_table(&args.calibration)?;
    let (specimen, origins) = args.specimen.specimen(&table)?;
    let mut scaled = Vec::new();
    for (flag, path, prefix) in [
        ("--stress-out", &args.stress_out, "stress-"),
        ("--strain-out", &args.strain_out, "strain-"),
    ] {
        let Some(path) = path else { continue };
        let format = match OutputFormat::from_path(&path.to_string_lossy()) {
            Ok(OutputFormat::Png16) | Err(_) => anyhow::bail!(
                "{flag} {}: use .npy (float32), .preview.png or .csv",
                path.display()
            ),
            Ok(format) => format,
        };
        let kind =
            FileKind::from_name(&format!("{prefix}{}", format.name()), specimen).map_err(|e| {
                match e {
                    CoreError::Invalid { field, message } => anyhow::anyhow!(
                        "{flag} {} needs {}: {}",
                        path.display(),
                        flag_of(field),
                        with_flags(&message)
                    ),
                    other => other.into(),
                }
            })?;
        scaled.push((path.clone(), kind));
    }
    Ok(MapOutputs {
        orders,
        table,
        specimen,
        origins,
        scaled,
    })
}

fn map(args: &MapArgs) -> anyhow::Result<()> {
    let outputs = map_outputs(args)?;
    let table = &outputs.table;
    let mut options = MapOptions {
        exposure_compensation: !args.no_exposure_compensation,
        max_order: args.max_order,
        hints: args.hints.clone(),
        ..MapOptions::default()
    };
    if let Some(g) = args.max_gradient {
        options.max_gradient = g;
    }
    options.validate(table).in_flags()?;
    let photo = read(&args.photo, "photo")?;
    let mask = args.mask.as_deref().map(|m| read(m, "mask")).transpose()?;
    let light_field = (args.light_field_photo.as_deref())
        .map(|p| read(p, "--light-field-photo"))
        .transpose()?;
    let choice = match (&mask, &light_field, args.whole_photo) {
        (Some(bytes), _, _) => MaskChoice::Given(bytes),
        (None, _, true) => MaskChoice::WholePhoto,
        (None, Some(bytes), false) => MaskChoice::FindWithLightField(bytes),
        (None, None, false) => MaskChoice::Find,
    };
    let (map, mask_used) =
        pipeline::map(&photo, choice, table, &options, &DecodeLimits::default()).in_flags()?;
    write(
        &args.out,
        &export::encode(&map, FileKind::Orders(outputs.orders)).in_flags()?,
    )?;
    println!(
        "{}×{} order map ({}) written to {}",
        map.width,
        map.height,
        outputs.orders.name(),
        args.out.display()
    );
    if let Some(u) = &args.uncertainty_out {
        write(u, &export::encode(&map, FileKind::Uncertainty).in_flags()?)?;
        println!(
            "{}×{} order uncertainty (1 σ, npy) written to {}",
            map.width,
            map.height,
            u.display()
        );
    }
    for (path, kind) in &outputs.scaled {
        write(path, &export::encode(&map, *kind).in_flags()?)?;
        println!(
            "{}×{} {} written to {}",
            map.width,
            map.height,
            match kind {
                FileKind::Strain(..) => "ε1−ε2 map, µε",
                _ => "σ1−σ2 map, MPa",
            },
            path.display()
        );
    }
    print!(
        "{}",
        mask_text(
            &mask_used,
            "--light-field-photo FILE, --mask FILE or --whole-photo"
        )
    );
    print!(
        "{}",
        statistics_text(&map.statistics, outputs.specimen.as_ref())
    );
    if outputs.specimen.is_some() {
        print!("{}", origins_text(&outputs.origins));
    }
    Ok(())
}

/// How `boundary`, `compare` and `series` let a user keep what a found mask leaves out.
const MASK_FLAG: &str = "--mask FILE";

/// The line a command prints about the mask it used, with a note on how to change a found one
/// (`keep`: the flags that do).
pub fn mask_text(used: &MaskUsed, keep: &str) -> String {
    let mut out = format!("  mask                {}\n", used.describe());
    if used.source == MaskSource::Found {
        out += &format!(
            "  mask note           the dark background and large holes are left out, and so \
             are zero-order zones on the specimen's edge; give {keep} to keep them\n"
        );
    }
    if used.source == MaskSource::FoundWithLightField {
        out += "  mask note           the dark background and large holes are left out; \
                zero-order zones on the edge are kept where the light-field photo's outline \
                closes around them\n";
    }
    out
}

/// `result` as one JSON object with the mask used added as `mask` ({source, specimen_share}).
fn with_mask(result: &impl serde::Serialize, used: MaskUsed) -> anyhow::Result<String> {
    let mut value = serde_json::to_value(result)?;
    if let Some(object) = value.as_object_mut() {
        object.insert("mask".into(), serde_json::to_value(used)?);
    }
    Ok(value.to_string())
}

/// Maps `photo` with `table` and default options over the mask given, or else the specimen
/// found from the photo (the whole photo when none is found); errors name the flags.
fn map_with_mask(
    photo: &[u8],
    mask: Option<&Path>,
    table: &CalibrationTable,
) -> anyhow::Result<(OrderMap, MaskUsed)> {
    let mask = mask.map(|m| read(m, "mask")).transpose()?;
    let choice = mask.as_deref().map_or(MaskChoice::Find, MaskChoice::Given);
    pipeline::map(
        photo,
        choice,
        table,
        &MapOptions::default(),
        &DecodeLimits::default(),
    )
    .in_flags()
}

/// The lines `isotint map` prints about a map: its figures, the σ1 − σ2 figures (and a
/// coating's ε1 − ε2) when a specimen is given (with the stress caution), and its range caution
/// if it has one. A maximum that is only a lower bound says "at least".
pub fn statistics_text(s: &MapStatistics, specimen: Option<&Specimen>) -> String {
    let lower_bound = s.max_is_lower_bound();
    let mut out = format!(
        "  specimen pixels     {}\n  valued pixels       {}\n  beyond range        {:.1} %\n  \
         unreliable          {:.1} %\n  orders              min {:.3}, mean {:.3}, max {}\n  \
         mean residual       {:.2} ΔE00 (CIEDE2000)\n",
        s.specimen_pixels,
        s.valued_pixels,
        100.0 * s.beyond_range_share,
        100.0 * s.unreliable_share,
        s.min_order,
        s.mean_order,
        maximum_text(s.max_order, "fringes", lower_bound),
        s.mean_residual
    );
    if let Some(specimen) = specimen {
        let figures = specimen.statistics(s);
        let t = figures.stress;
        out += &format!(
            "  stress inputs       {}\n  σ1−σ2               min {:.3}, mean {:.3}, max {} \
             ({:.4} MPa per fringe)\n",
            specimen.input_lines().join("; "),
            t.min_stress_mpa,
            t.mean_stress_mpa,
            maximum_text(t.max_stress_mpa, "MPa", t.max_is_lower_bound),
            figures.stress_per_fringe_mpa
        );
        if let Some(e) = figures.strain {
            out += &format!(
                "  ε1−ε2               min {:.1}, mean {:.1}, max {}\n",
                e.min_strain_microstrain,
                e.mean_strain_microstrain,
                maximum_text(e.max_strain_microstrain, "µε", e.max_is_lower_bound)
            );
        }
        out += &format!("  stress caution      {STRESS_CAUTION}\n");
    }
    if let Some(c) = s.caution() {
        out += &format!("  caution             {c}\n");
    }
    out
}

/// Share of the constant-moment zone's length left out at each end when the demo calibrates
/// (keeps away from the load points).
const DEMO_ZONE_INSET: f64 = 0.05;

fn demo(args: &DemoArgs) -> anyhow::Result<()> {
    let scenario = DemoScenario::birchfield()?;
    std::fs::create_dir_all(&args.out)
        .with_context(|| format!("could not create {}", args.out.display()))?;
    for file in &scenario.files {
        write(&args.out.join(&file.name), &file.bytes)?;
        println!("{:<26} {}", file.name, file.description);
    }
    let d = &scenario.description;
    let zone = d.beam.constant_moment_zone;
    let inset = DEMO_ZONE_INSET * zone.width();
    let region = PixelRect::new(zone.left + inset, zone.top, zone.right - inset, zone.bottom)?;
    let load = EdgeLoad::Load {
        moment_n_mm: d.beam.moment_n_mm,
        depth_mm: d.beam.depth_mm,
        fringe_value_n_per_mm: d.fringe_value_n_per_mm,
    };
    let metadata = CalibrationMetadata {
        name: "Demo beam, four-point bending".into(),
        material: d.material.clone(),
        thickness_mm: Some(d.thickness_mm),
        light_source: d.setup.light.description().into(),
        camera: d.setup.camera.description().into(),
        notes: format!("Measured by `isotint demo` on {}.", d.beam.photos[0]),
    };
    let spec = beam_spec(region, load, false, None, metadata)?;
    let beam = read(&args.out.join(&d.beam.photos[0]), "demo beam photo")?;
    let calibration = pipeline::calibrate(&beam, &spec, &DecodeLimits::default())?;
    write(
        &args.out.join(DEMO_CALIBRATION),
        calibration.table.to_json().as_bytes(),
    )?;
    println!(
        "{DEMO_CALIBRATION:<26} calibration measured on {}",
        d.beam.photos[0]
    );
    print!("{}", report_text(&calibration.report));
    Ok(())
}

/// File name of the calibration `isotint demo` writes.
pub const DEMO_CALIBRATION: &str = "calibration.json";
