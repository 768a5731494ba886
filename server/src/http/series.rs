//! `/api/v1/series`: a load series in one request — several photos of one specimen at known
//! loads, fitted pixel by pixel (slope of the order against the load, linearity, pixels that
//! do not scale) and, for a disc, the material fringe value. Nothing is stored.

use axum::extract::multipart::MultipartRejection;
use axum::extract::rejection::QueryRejection;
use axum::extract::{Multipart, Query, State};
use axum::response::{IntoResponse, Response};
use axum::Json;
use isotint_core::series::{LoadSeries, SeriesSpec};
use isotint_core::specimen::MaskUsed;
use isotint_core::CoreResult;
use serde::{Deserialize, Serialize};
use utoipa::{IntoParams, ToSchema};
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use super::download::{asks_for_file, npy_attachment};
use super::error::{ApiError, ErrorBody};
use super::form::{parse_json, Form};
use super::jobs::JobSize;
use super::openapi;
use super::AppState;
use crate::domain::CalibrationId;
use crate::pipeline;

/// Routes of this module.
pub fn router() -> OpenApiRouter<AppState> {
    OpenApiRouter::new().routes(routes!(create_series))
}

/// The `series` part of `POST /api/v1/series`.
#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct SeriesRequest {
    /// One load per `photo` part, in the same order, N (positive).
    #[serde(alias = "loads", alias = "load_n")]
    #[schema(schema_with = openapi::loads)]
    pub loads_n: Vec<f64>,
    /// Diameter of a disc in diametral compression, mm (positive): adds `fringe_value` from its
    /// centre, where σ1 − σ2 = 8P/(πDh).
    #[serde(default, alias = "disc_diameter")]
    #[schema(schema_with = openapi::optional_positive)]
    pub disc_diameter_mm: Option<f64>,
    /// The disc's thickness, mm (positive; only with `disc_diameter_mm`): adds
    /// `stress_per_fringe_mpa`.
    #[serde(default, alias = "thickness")]
    #[schema(schema_with = openapi::optional_positive)]
    pub thickness_mm: Option<f64>,
}

/// Multipart body of `POST /api/v1/series`: these parts, `photo` repeated, the others once,
/// and no other.
#[derive(ToSchema)]
#[serde(deny_unknown_fields)]
pub struct SeriesForm {
    /// Calibration id.
    #[schema(schema_with = openapi::uuid)]
    pub calibration: String,
    /// Optional mask PNG of the photos' size; non-zero = specimen (for a disc, the disc
    /// alone). Without it the specimen is found from the photo of the largest load (dark
    /// background and large holes left out); 422 naming `mask` when none is found there.
    #[schema(value_type = Option<String>, format = Binary)]
    pub mask: Option<Vec<u8>>,
    /// The photos (PNG, JPEG or TIFF), one part each, two to twelve, all of one size.
    #[schema(schema_with = openapi::series_photos)]
    pub photo: Vec<Vec<u8>>,
    /// JSON (a part of type application/json): `loads_n` (one per photo, N),
    /// `disc_diameter_mm`, `thickness_mm`.
    pub series: SeriesRequest,
}

/// JSON answer of `POST /api/v1/series`: the fit and the mask it used.
#[derive(Debug, Serialize)]
struct SeriesAnswer {
    #[serde(flatten)]
    series: LoadSeries,
    mask: MaskUsed,
}

/// Query of `POST /api/v1/series`.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct SeriesQuery {
    /// `slope`: answer with the slope of every pixel, fringes per N, as NPY float32 (height,
    /// width; NaN = not fitted) instead of the JSON figures.
    #[param(schema_with = openapi::series_format)]
    pub format: Option<String>,
}

/// Fits a load series: every photo is mapped with the calibration and the mask (given or
/// found), then each specimen pixel's order is fitted against the load through the origin.
/// Answers `slope_fringes_per_n` (at the mask's centroid), `linearity_rms` (fringes),
/// `nonlinear_share` (pixels whose residual rms exceeds 0.1 fringe), `mask` (`source`: given
/// or found, `specimen_share`: 0–1) and, with `disc_diameter_mm`, `fringe_value` (N/mm per
/// fringe) from the disc's centre. Nothing is stored.
#[utoipa::path(post, path = "/api/v1/series", tag = "order-maps", params(SeriesQuery),
    request_body(content((SeriesForm = "multipart/form-data",
        encoding(("series" = (content_type = "application/json")))))),
    responses((status = 200, description = "The fitted series; with format=slope the slope map instead, as NPY \
                (application/octet-stream)", body = Object),
              (status = 400, body = ErrorBody), (status = 404, body = ErrorBody),
              (status = 408, body = ErrorBody), (status = 413, body = ErrorBody),
              (status = 415, body = ErrorBody), (status = 422, body = ErrorBody),
              (status = 503, body = ErrorBody), (status = 504, body = ErrorBody)))]
async fn create_series(
    State(state): State<AppState>,
    query: Result<Query<SeriesQuery>, QueryRejection>,
    multipart: Result<Multipart, MultipartRejection>,
) -> Result<Response, ApiError> {
    let Query(query) = query?;
    let slope_file = asks_for_file(query.format.as_deref(), "slope")?;
    let mut form = Form::read_repeating(
        multipart,
        &["calibration", "mask", "photo", "series"],
        &["photo"],
    )
    .await?;
    let request: SeriesRequest = parse_json("series", &form.require("series")?)?;
    let photos = form.take_all("photo");
    let spec = SeriesSpec::new(
        photos.len(),
        request.loads_n,
        request.disc_diameter_mm,
        request.thickness_mm,
    )?;
    let calibration_id: CalibrationId = form.require_id("calibration")?;
    let mask = form.take("mask");
    let table = crate::storage::calibrations::table(&state.storage, calibration_id).await?;
    let limits = state.config.decode_limits;
    let held = photos.iter().chain(&mask).map(|p| p.len()).sum::<usize>();
    let first = photos.first().map_or(&[][..], |p| &p[..]);
    let admission = state
        .jobs
        .admit(JobSize {
            memory_bytes: pipeline::series_memory(first, photos.len(), held, &limits)?,
            waiting_bytes: held as u64,
        })
        .await?;
    let (series, mask, file) = admission
        .run(
            move || -> CoreResult<(LoadSeries, MaskUsed, Option<Vec<u8>>)> {
                let (series, used) =
                    pipeline::series(&spec, &photos, mask.as_deref(), &table, &limits)?;
                let file = slope_file.then(|| pipeline::slope_npy(&series));
                Ok((series, used, file))
            },
        )
        .await??;
    if let Some(bytes) = file {
        return Ok(npy_attachment(bytes, "series-slope.npy"));
    }
    Ok(Json(SeriesAnswer { series, mask }).into_response())
}
