//! `/api/v1/reports`: the PDF report of one photo in one request — mapped with a stored
//! calibration, its stresses through the request's specimen, the free-edge stress and K_t, every
//! input and the caution — and `/api/v1/order-maps/{id}/report`, the same of a stored map
//! (whose photo is not kept). Nothing is stored.

use axum::body::Bytes;
use axum::extract::multipart::MultipartRejection;
use axum::extract::rejection::BytesRejection;
use axum::extract::{Multipart, Path, State};
use axum::http::header;
use axum::response::{IntoResponse, Response};
use isotint_core::boundary::EdgePath;
use isotint_core::report::{report_pdf, ReportInputs, ReportOptions};
use isotint_core::stress::SpecimenKind;
use isotint_core::{CalibrationTable, CoreError, MapOptions, PixelPoint};
use serde::Deserialize;
use utoipa::ToSchema;
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use super::error::{ApiError, ErrorBody};
use super::form::{parse_json, path_id, Form};
use super::openapi;
use super::order_maps::{admit_stored_map, stored_map};
use super::AppState;
use crate::domain::{CalibrationId, OrderMapId};
use crate::pipeline;

/// Routes of this module.
pub fn router() -> OpenApiRouter<AppState> {
    OpenApiRouter::new()
        .routes(routes!(create_report))
        .routes(routes!(stored_map_report))
}

/// The `report` part of `POST /api/v1/reports`: the specimen (as the stress query of an order
/// map), the optional inputs the report states, and the edge.
#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ReportRequest {
    /// `transmission` (default), `slice` or `coating`.
    #[schema(schema_with = openapi::optional_specimen_kind)]
    pub specimen: Option<SpecimenKind>,
    /// Material fringe value f_σ, N/mm per fringe (of a slice: at the critical temperature).
    #[serde(alias = "fringe_value")]
    #[schema(schema_with = openapi::optional_positive)]
    pub fringe_value_n_per_mm: Option<f64>,
    /// Model thickness h, mm (of a slice: the slice's).
    #[serde(alias = "thickness")]
    #[schema(schema_with = openapi::optional_positive)]
    pub thickness_mm: Option<f64>,
    /// Coating: strain fringe value f_ε, µm per fringe.
    #[schema(schema_with = openapi::optional_positive)]
    pub strain_fringe_value_um: Option<f64>,
    /// Coating: thickness t_c, mm.
    #[schema(schema_with = openapi::optional_positive)]
    pub coating_thickness_mm: Option<f64>,
    /// Coating: the part's Young's modulus E, MPa.
    #[schema(schema_with = openapi::optional_positive)]
    pub youngs_modulus_mpa: Option<f64>,
    /// Coating: the part's Poisson's ratio ν (0 ≤ ν < 0.5).
    #[schema(schema_with = openapi::optional_poisson_ratio)]
    pub poisson_ratio: Option<f64>,
    /// Nominal stress σ_nom, MPa (positive): adds K_t.
    #[serde(alias = "nominal_stress")]
    #[schema(schema_with = openapi::optional_positive)]
    pub nominal_stress_mpa: Option<f64>,
    /// The load the photo was taken at, N (positive), as the report states it.
    #[schema(schema_with = openapi::optional_positive)]
    pub load_n: Option<f64>,
    /// Image scale, mm per pixel (positive).
    #[schema(schema_with = openapi::optional_positive)]
    pub mm_per_px: Option<f64>,
    /// Title of the first page.
    #[schema(schema_with = openapi::optional_title)]
    pub title: Option<String>,
    /// A polyline [{x, y}, …] along part of the edge (pixel-edge coordinates); without it the
    /// mask's whole outline.
    #[schema(schema_with = openapi::optional_polyline)]
    pub polyline: Option<Vec<PixelPoint>>,
}

impl ReportRequest {
    /// The report's inputs with calibration `table` (stored as `calibration_id`) for the photo
    /// named `photo_name`: a transmission model's missing f_σ and h taken from the table; 422
    /// naming the field at fault, or `fringe_value_n_per_mm` when there is no specimen at all.
    fn inputs(
        self,
        table: &CalibrationTable,
        calibration_id: CalibrationId,
        photo_name: String,
    ) -> Result<ReportInputs, ApiError> {
        let options = ReportOptions {
            nominal_stress_mpa: self.nominal_stress_mpa,
            load_n: self.load_n,
            mm_per_px: self.mm_per_px,
            title: self.title,
        };
        options.validate()?;
        let (specimen, origins) = specimen_fields!(self).specimen_with(table.stress_defaults())?;
        let specimen = specimen.ok_or_else(|| {
            CoreError::invalid(
                "fringe_value_n_per_mm",
                "is required (with thickness_mm, each defaulting to the calibration's), or the \
                 coating's fields, for a report",
            )
        })?;
        Ok(ReportInputs {
            photo_name,
            calibration_name: table.metadata.name.clone(),
            calibration_id: calibration_id.to_string(),
            material: table.metadata.material.clone(),
            specimen,
            origins,
            edge: self.polyline.map_or(EdgePath::Outline, EdgePath::Polyline),
            options,
        })
    }
}

/// The PDF as a download named `stress-report.pdf`.
fn pdf_answer(pdf: Vec<u8>) -> Response {
    (
        [
            (header::CONTENT_TYPE, "application/pdf"),
            (
                header::CONTENT_DISPOSITION,
                "attachment; filename=\"stress-report.pdf\"",
            ),
        ],
        pdf,
    )
        .into_response()
}

/// Multipart body of `POST /api/v1/reports`: these parts, each at most once, and no other.
#[derive(ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ReportForm {
    /// Specimen photo (PNG, JPEG or TIFF).
    #[schema(value_type = String, format = Binary)]
    pub photo: Vec<u8>,
    /// Calibration id.
    #[schema(schema_with = openapi::uuid)]
    pub calibration: String,
    /// Mask PNG of the photo's size; non-zero = specimen. Its outline is the edge sampled.
    #[schema(value_type = String, format = Binary)]
    pub mask: Vec<u8>,
    /// Optional JSON map options, as for `POST /api/v1/order-maps`.
    #[schema(schema_with = openapi::map_options)]
    pub options: Option<MapOptions>,
    /// JSON: the specimen's fields, `nominal_stress_mpa`, `load_n`, `mm_per_px`, `title`,
    /// `polyline`.
    pub report: ReportRequest,
}

/// Makes the PDF report of a photo: maps it with the calibration and the mask, reads its
/// stresses through the specimen (transmission model, frozen-stress slice or coating) and the
/// free-edge stress along the mask's outline (or the polyline), and writes the photo, the order
/// and stress maps with numbered colour bars, the edge profile with its maximum and K_t,
/// every input, the map's figures, the flags and the caution. The text can be copied out of
/// the PDF. Nothing is stored.
#[utoipa::path(post, path = "/api/v1/reports", tag = "order-maps",
    request_body(content((ReportForm = "multipart/form-data",
        encoding(("options" = (content_type = "application/json")),
                 ("report" = (content_type = "application/json")))))),
    responses((status = 200, description = "The report", content((Vec<u8> = "application/pdf"))),
              (status = 400, body = ErrorBody), (status = 404, body = ErrorBody),
              (status = 408, body = ErrorBody), (status = 413, body = ErrorBody),
              (status = 415, body = ErrorBody), (status = 422, body = ErrorBody),
              (status = 503, body = ErrorBody), (status = 504, body = ErrorBody)))]
async fn create_report(
    State(state): State<AppState>,
    multipart: Result<Multipart, MultipartRejection>,
) -> Result<Response, ApiError> {
    let mut form = Form::read(
        multipart,
        &["photo", "calibration", "mask", "options", "report"],
    )
    .await?;
    let request: ReportRequest = parse_json("report", &form.require("report")?)?;
    let calibration_id: CalibrationId = form.require_id("calibration")?;
    let map_options: MapOptions = match form.take("options") {
        Some(bytes) => parse_json("options", &bytes)?,
        None => MapOptions::default(),
    };
    let photo = form.require("photo")?;
    let mask = form.require("mask")?;
    let table = crate::storage::calibrations::table(&state.storage, calibration_id).await?;
    map_options.validate(&table)?;
    let inputs = request.inputs(&table, calibration_id, "upload".to_string())?;
    let limits = state.config.decode_limits;
    let admission = state.jobs.admit(form.job_size(&photo, &limits)?).await?;
    let pdf = admission
        .run(move || pipeline::report(&photo, Some(&mask), &table, &map_options, &limits, &inputs))
        .await??;
    Ok(pdf_answer(pdf))
}

/// Makes the PDF report of a stored order map: its stresses through the specimen (a
/// transmission model's f_σ and h default to the map's calibration's), the free-edge stress
/// along the map's mask outline (or the polyline) with its maximum and K_t, the order and
/// stress maps with numbered colour bars, the edge profile, every input, the map's figures,
/// the flags and the caution; the photo is not kept with a stored map, so the report says so
/// in its place. Nothing is stored.
#[utoipa::path(post, path = "/api/v1/order-maps/{id}/report", tag = "order-maps",
    params(("id" = String, Path, description = "Order-map id", format = Uuid)),
    request_body(content = ReportRequest, content_type = "application/json"),
    responses((status = 200, description = "The report", content((Vec<u8> = "application/pdf"))),
              (status = 400, body = ErrorBody), (status = 404, body = ErrorBody),
              (status = 410, body = ErrorBody), (status = 413, body = ErrorBody),
              (status = 422, body = ErrorBody), (status = 503, body = ErrorBody)))]
async fn stored_map_report(
    State(state): State<AppState>,
    Path(id): Path<String>,
    body: Result<Bytes, BytesRejection>,
) -> Result<Response, ApiError> {
    let id: OrderMapId = path_id(&id)?;
    let body = body?;
    let request: ReportRequest = parse_json("report", &body)?;
    let row = stored_map(&state, id).await?;
    let table = crate::storage::calibrations::table(&state.storage, row.calibration_id).await?;
    let inputs = request.inputs(&table, row.calibration_id, format!("stored order map {id}"))?;
    let (admission, map) = admit_stored_map(&state, &row, 0, body.len() as u64).await?;
    let pdf = admission
        .run(move || report_pdf(None, &map, &inputs))
        .await??;
    Ok(pdf_answer(pdf))
}
