//! `/api/v1/reports`: the PDF report of one photo in one request — mapped with a stored
//! calibration, its stresses through the request's specimen, the free-edge stress and K_t, every
//! input and the caution. Nothing is stored.

use axum::extract::multipart::MultipartRejection;
use axum::extract::{Multipart, State};
use axum::http::header;
use axum::response::{IntoResponse, Response};
use isotint_core::boundary::EdgePath;
use isotint_core::report::{ReportInputs, ReportOptions};
use isotint_core::stress::{SpecimenFields, SpecimenKind};
use isotint_core::{CoreError, MapOptions, PixelPoint};
use serde::Deserialize;
use utoipa::ToSchema;
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use super::error::{ApiError, ErrorBody};
use super::form::{parse_json, Form};
use super::openapi;
use super::AppState;
use crate::domain::CalibrationId;
use crate::pipeline;

/// Routes of this module.
pub fn router() -> OpenApiRouter<AppState> {
    OpenApiRouter::new().routes(routes!(create_report))
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
    let fields = SpecimenFields {
        specimen: request.specimen,
        fringe_value_n_per_mm: request.fringe_value_n_per_mm,
        thickness_mm: request.thickness_mm,
        strain_fringe_value_um: request.strain_fringe_value_um,
        coating_thickness_mm: request.coating_thickness_mm,
        youngs_modulus_mpa: request.youngs_modulus_mpa,
        poisson_ratio: request.poisson_ratio,
    };
    let options = ReportOptions {
        nominal_stress_mpa: request.nominal_stress_mpa,
        load_n: request.load_n,
        mm_per_px: request.mm_per_px,
        title: request.title,
    };
    options.validate()?;
    let calibration_id: CalibrationId = form.require_id("calibration")?;
    let map_options: MapOptions = match form.take("options") {
        Some(bytes) => parse_json("options", &bytes)?,
        None => MapOptions::default(),
    };
    let photo = form.require("photo")?;
    let mask = form.require("mask")?;
    let table = crate::storage::calibrations::table(&state.storage, calibration_id).await?;
    map_options.validate(&table)?;
    let (specimen, origins) = fields.specimen_with(table.stress_defaults())?;
    let specimen = specimen.ok_or_else(|| {
        CoreError::invalid(
            "fringe_value_n_per_mm",
            "is required (with thickness_mm, each defaulting to the calibration's), or the \
             coating's fields, for a report",
        )
    })?;
    let inputs = ReportInputs {
        photo_name: "upload".to_string(),
        calibration_name: table.metadata.name.clone(),
        calibration_id: calibration_id.to_string(),
        material: table.metadata.material.clone(),
        specimen,
        origins,
        edge: request
            .polyline
            .map_or(EdgePath::Outline, EdgePath::Polyline),
        options,
    };
    let limits = state.config.decode_limits;
    let admission = state.jobs.admit(form.job_size(&photo, &limits)?).await?;
    let pdf = admission
        .run(move || pipeline::report(&photo, Some(&mask), &table, &map_options, &limits, &inputs))
        .await??;
    Ok((
        [
            (header::CONTENT_TYPE, "application/pdf"),
            (
                header::CONTENT_DISPOSITION,
                "attachment; filename=\"stress-report.pdf\"",
            ),
        ],
        pdf,
    )
        .into_response())
}
