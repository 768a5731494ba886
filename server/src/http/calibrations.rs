//! `/api/v1/calibrations`: list, read, export, import, create from a beam photo, archive,
//! restore. Calibrations are immutable; a correction names the old one in `supersedes`.

use axum::body::Bytes;
use axum::extract::multipart::MultipartRejection;
use axum::extract::rejection::{BytesRejection, QueryRejection};
use axum::extract::{Multipart, Path, Query, State};
use axum::http::{header, HeaderMap, StatusCode};
use axum::response::{IntoResponse, Response};
use axum::Json;
use isotint_core::beam::{BeamReport, BeamSpec, EdgeLoad, EdgeLoadFields};
use isotint_core::render::camera::CameraModel;
use isotint_core::render::light::LightSource;
use isotint_core::{CalibrationMetadata, CalibrationTable, CoreError, PixelRect};
use serde::{Deserialize, Serialize};
use utoipa::{IntoParams, ToSchema};
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use super::error::{ApiError, ErrorBody};
use super::form::{parse_json, path_id, Form};
use super::openapi;
use super::paging::{cursor_key, next_link, page_after, page_limit};
use super::AppState;
use crate::access::Origin;
use crate::domain::{beam_spec, check_metadata, check_text, rfc3339, CalibrationId};
use crate::pipeline;
use crate::storage::audit::AuditAction;
use crate::storage::calibrations::{self as store, CalibrationRow, ListFilter};

/// Routes of this module.
pub fn router() -> OpenApiRouter<AppState> {
    OpenApiRouter::new()
        .routes(routes!(list_calibrations, create_calibration))
        .routes(routes!(import_calibration))
        .routes(routes!(get_calibration))
        .routes(routes!(export_calibration))
        .routes(routes!(archive_calibration))
        .routes(routes!(restore_calibration))
}

/// What lists and detail views show of a calibration.
#[derive(Debug, Serialize, ToSchema)]
pub struct CalibrationSummary {
    /// Calibration id (UUID).
    #[schema(value_type = String, format = Uuid)]
    pub id: CalibrationId,
    /// Short human name.
    pub name: String,
    /// Model or coating material.
    pub material: String,
    /// Specimen thickness h, mm; with `fringe_value_n_per_mm` the default of stress inputs.
    pub thickness_mm: Option<f64>,
    /// Material fringe value f_σ the calibration was made for, N/mm per fringe: implied by a
    /// beam's edge order and load (6M/(N_edge·d²)) or given at calibration; the default of
    /// stress inputs that leave it out.
    pub fringe_value_n_per_mm: Option<f64>,
    /// Light source, in words (the renderer's short names are written out).
    pub light_source: String,
    /// Camera and exposure settings, in words (the renderer's short names are written out).
    pub camera: String,
    /// Free text.
    pub notes: String,
    /// When the table was made, RFC 3339.
    pub created_at: String,
    /// Order spacing of the table, fringes.
    pub order_step: f64,
    /// Largest calibrated order, fringes.
    pub max_order: f64,
    /// `beam_photo` or `rendered`.
    pub source_kind: String,
    /// Mean CIEDE2000 residual (beam calibrations only).
    pub residual_de2000: Option<f64>,
    /// The calibration this one corrects.
    #[schema(value_type = Option<String>, format = Uuid)]
    pub supersedes: Option<CalibrationId>,
    /// The calibration that corrects this one.
    #[schema(value_type = Option<String>, format = Uuid)]
    pub superseded_by: Option<CalibrationId>,
    /// Hidden from lists unless `include_archived=true`.
    pub archived: bool,
}

impl From<CalibrationRow> for CalibrationSummary {
    fn from(r: CalibrationRow) -> Self {
        CalibrationSummary {
            id: r.id,
            name: r.metadata.name,
            material: r.metadata.material,
            thickness_mm: r.metadata.thickness_mm,
            fringe_value_n_per_mm: r.stress_defaults.fringe_value_n_per_mm,
            light_source: light_in_words(r.metadata.light_source),
            camera: camera_in_words(r.metadata.camera),
            notes: r.metadata.notes,
            created_at: rfc3339(r.created_at),
            order_step: r.order_step,
            max_order: r.max_order,
            source_kind: r.source_kind,
            residual_de2000: r.residual_de2000,
            supersedes: r.supersedes,
            superseded_by: r.superseded_by,
            archived: r.archived,
        }
    }
}

/// A stored light source as people read it: one of the renderer's own names (`halogen`, `d65`,
/// …) becomes its description; anything else is the lab's own words, unchanged.
fn light_in_words(text: String) -> String {
    LightSource::from_name(&text).map_or(text, |l| l.description().to_string())
}

/// A stored camera as people read it: one of the renderer's own names (`gaussian-sensor`,
/// `cie1931`) becomes its description; anything else is the lab's own words, unchanged.
fn camera_in_words(text: String) -> String {
    CameraModel::from_name(&text).map_or(text, |c| c.description().to_string())
}

/// One page of the list.
#[derive(Debug, Serialize, ToSchema)]
pub struct CalibrationList {
    /// Matching calibrations of this page, newest first (by the time the table was made, then
    /// by id).
    pub calibrations: Vec<CalibrationSummary>,
    /// How many calibrations match the query, over all pages.
    pub total: i64,
    /// Link to the next page; absent on the last.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub next: Option<String>,
}

/// A calibration with its table.
#[derive(Debug, Serialize, ToSchema)]
pub struct CalibrationDetail {
    /// The summary fields.
    #[serde(flatten)]
    pub summary: CalibrationSummary,
    /// The calibration table file (format `isotint-calibration`).
    #[schema(value_type = Object)]
    pub table: CalibrationTable,
}

/// Response of a stored beam calibration.
#[derive(Debug, Serialize, ToSchema)]
pub struct CreatedCalibration {
    /// The summary fields.
    #[serde(flatten)]
    pub summary: CalibrationSummary,
    /// Quality report of the measurement; `edge_order_estimate` (estimate, runner-up, cost
    /// ratio, confidence, statement) is set when the edge order was estimated.
    #[schema(value_type = Object)]
    pub report: BeamReport,
}

/// Response of a dry run: nothing is stored.
#[derive(Debug, Serialize, ToSchema)]
pub struct DryRunCalibration {
    /// Quality report of the measurement; `edge_order_estimate` (estimate, runner-up, cost
    /// ratio, confidence, statement) is set when the edge order was estimated.
    #[schema(value_type = Object)]
    pub report: BeamReport,
    /// The table that would be stored.
    #[schema(value_type = Object)]
    pub table: CalibrationTable,
}

/// Query of the list.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct ListQuery {
    /// Case-insensitive text matched against name, material, light source and camera: at most
    /// 200 characters, no control characters.
    #[param(schema_with = openapi::query_text)]
    pub q: Option<String>,
    /// Include archived calibrations (default false).
    #[serde(default)]
    pub include_archived: bool,
    /// Calibrations per page, 1–500 (default 50).
    #[param(minimum = 1, maximum = 500)]
    pub limit: Option<i64>,
    /// The `cursor` of the previous page's `next` link; it belongs to that page's `q` and
    /// `include_archived`.
    #[param(schema_with = openapi::cursor)]
    pub cursor: Option<String>,
}

/// Query of the import.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct ImportQuery {
    /// Id of the calibration the imported one corrects.
    #[param(schema_with = openapi::uuid)]
    pub supersedes: Option<String>,
}

/// The `spec` part of a beam calibration: where the constant-moment zone is and what is known
/// about the load. Give `edge_order`, or `moment_n_mm` + `depth_mm` + `fringe_value_n_per_mm`,
/// or `edge_order` + `moment_n_mm` + `depth_mm` (then the fringe value is reported), or
/// `edge_order` + `fringe_value_n_per_mm` (stored with the table), or
/// `estimate_edge_order: true` alone (the edge order is estimated from the beam's colour
/// sequence and reported in `report.edge_order_estimate`).
///
/// The metadata fields (`name`, `material`, …) are spelled out here rather than flattened from
/// the core's `CalibrationMetadata`: serde cannot refuse unknown fields of a struct with a
/// flattened part, and a misspelt field must be refused, not dropped.
#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct BeamRequest {
    /// Short human name, 1–200 characters, not all white space.
    #[schema(schema_with = openapi::name_text)]
    pub name: String,
    /// Constant-moment zone `{left, top, right, bottom}` in pixel-edge coordinates; `top` and
    /// `bottom` are the beam's edges, right > left, bottom > top, inside the photo.
    #[schema(schema_with = openapi::region)]
    pub region: PixelRect,
    /// Fringe order at the beam edges (positive).
    #[schema(schema_with = openapi::optional_positive)]
    pub edge_order: Option<f64>,
    /// Bending moment in the constant-moment zone, N·mm (positive).
    #[schema(schema_with = openapi::optional_positive)]
    pub moment_n_mm: Option<f64>,
    /// Beam depth, mm (positive).
    #[schema(schema_with = openapi::optional_positive)]
    pub depth_mm: Option<f64>,
    /// Material fringe value, N/mm per fringe (positive): with the moment and depth, or beside
    /// the edge order alone; stored with the table as the default of stress inputs (as is the
    /// fringe value that edge order, moment and depth imply).
    #[schema(schema_with = openapi::optional_positive)]
    pub fringe_value_n_per_mm: Option<f64>,
    /// Estimate the edge order (fringes) from the beam's own colour sequence instead of giving
    /// it or the load; no edge-order or load field may come with it. An estimate: confirm it
    /// against a known load where possible.
    #[serde(default)]
    pub estimate_edge_order: bool,
    /// Move top and bottom to the edges found in the photo.
    #[serde(default)]
    pub refine_edges: bool,
    /// Grid spacing of the table, fringes, 0.001–0.1 (default 0.01).
    #[schema(schema_with = openapi::optional_order_step)]
    pub order_step: Option<f64>,
    /// Model or coating material (at most 200 characters on one line).
    #[serde(default)]
    #[schema(schema_with = openapi::short_text)]
    pub material: String,
    /// Specimen thickness h, mm (positive): the default of stress inputs with this calibration.
    #[schema(schema_with = openapi::optional_positive)]
    pub thickness_mm: Option<f64>,
    /// Light source (at most 200 characters on one line).
    #[serde(default)]
    #[schema(schema_with = openapi::short_text)]
    pub light_source: String,
    /// Camera and exposure settings (at most 200 characters on one line).
    #[serde(default)]
    #[schema(schema_with = openapi::short_text)]
    pub camera: String,
    /// Free text (at most 4000 characters).
    #[serde(default)]
    #[schema(schema_with = openapi::notes_text)]
    pub notes: String,
    /// Id of the calibration this one corrects.
    #[schema(schema_with = openapi::optional_uuid)]
    pub supersedes: Option<CalibrationId>,
    /// Measure and report, but store nothing.
    #[serde(default)]
    pub dry_run: bool,
}

/// Multipart body of `POST /api/v1/calibrations`: these two parts, each once, and no other.
#[derive(ToSchema)]
#[serde(deny_unknown_fields)]
pub struct BeamForm {
    /// Photo of the beam (PNG, JPEG or TIFF).
    #[schema(value_type = String, format = Binary)]
    pub photo: Vec<u8>,
    /// JSON of the specification (a part of type application/json).
    pub spec: BeamRequest,
}

impl BeamRequest {
    /// Checks every field and builds the core's spec.
    pub fn into_spec(self) -> Result<BeamSpec, CoreError> {
        let load = EdgeLoad::from_fields(EdgeLoadFields {
            edge_order: self.edge_order,
            moment_n_mm: self.moment_n_mm,
            depth_mm: self.depth_mm,
            fringe_value_n_per_mm: self.fringe_value_n_per_mm,
            estimate_edge_order: self.estimate_edge_order,
        })?;
        let metadata = CalibrationMetadata {
            name: self.name,
            material: self.material,
            thickness_mm: self.thickness_mm,
            light_source: self.light_source,
            camera: self.camera,
            notes: self.notes,
        };
        beam_spec(
            self.region,
            load,
            self.refine_edges,
            self.order_step,
            metadata,
        )
    }
}

/// The list's parameters other than the page's, as its `next` link spells them (each after a
/// `&`); a cursor belongs to them.
fn list_scope(text: Option<&str>, include_archived: bool) -> String {
    let mut pairs = form_urlencoded::Serializer::new(String::new());
    if let Some(q) = text {
        pairs.append_pair("q", q);
    }
    if include_archived {
        pairs.append_pair("include_archived", "true");
    }
    match pairs.finish() {
        pairs if pairs.is_empty() => pairs,
        pairs => format!("&{pairs}"),
    }
}

/// Lists calibrations, newest first, in pages (follow `next` until it is absent); archived ones
/// only on request. `total` counts every match.
#[utoipa::path(get, path = "/api/v1/calibrations", tag = "calibrations", params(ListQuery),
    responses((status = 200, body = CalibrationList), (status = 400, body = ErrorBody),
              (status = 422, body = ErrorBody), (status = 503, body = ErrorBody)))]
async fn list_calibrations(
    State(state): State<AppState>,
    query: Result<Query<ListQuery>, QueryRejection>,
) -> Result<Json<CalibrationList>, ApiError> {
    let Query(query) = query?;
    if let Some(q) = &query.q {
        check_text("q", q, 200, false)?;
    }
    let text = query
        .q
        .map(|q| q.trim().to_string())
        .filter(|q| !q.is_empty());
    let limit = page_limit(query.limit)?;
    let scope = list_scope(text.as_deref(), query.include_archived);
    let after = page_after(query.cursor.as_deref(), &scope)?;
    let filter = ListFilter {
        text,
        include_archived: query.include_archived,
    };
    let after_key = after.as_ref().map(cursor_key);
    let mut rows = store::list(&state.storage, &filter, after_key, limit + 1).await?;
    let next = next_link(&mut rows, limit, "/api/v1/calibrations", &scope, |r| {
        (r.created_at, r.id.to_string())
    });
    let total = store::count(&state.storage, &filter).await?;
    Ok(Json(CalibrationList {
        calibrations: rows.into_iter().map(Into::into).collect(),
        total,
        next,
    }))
}

/// One calibration with its table.
#[utoipa::path(get, path = "/api/v1/calibrations/{id}", tag = "calibrations",
    params(("id" = String, Path, description = "Calibration id", format = Uuid)),
    responses((status = 200, body = CalibrationDetail), (status = 404, body = ErrorBody),
              (status = 503, body = ErrorBody)))]
async fn get_calibration(
    State(state): State<AppState>,
    Path(id): Path<String>,
) -> Result<Json<CalibrationDetail>, ApiError> {
    let id: CalibrationId = path_id(&id)?;
    let summary = store::get(&state.storage, id).await?.into();
    let table = store::table(&state.storage, id).await?;
    Ok(Json(CalibrationDetail { summary, table }))
}

/// A file name made of safe characters only.
fn file_stem(name: &str) -> String {
    let stem: String = name
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '-'
            }
        })
        .take(60)
        .collect();
    let stem = stem.trim_matches('-');
    if stem.is_empty() {
        "calibration".into()
    } else {
        stem.to_string()
    }
}

/// The table file exactly as in `calibration-sets/`, as a download.
#[utoipa::path(get, path = "/api/v1/calibrations/{id}/export", tag = "calibrations",
    params(("id" = String, Path, description = "Calibration id", format = Uuid)),
    responses((status = 200, description = "The calibration file", content_type = "application/json"),
              (status = 404, body = ErrorBody), (status = 503, body = ErrorBody)))]
async fn export_calibration(
    State(state): State<AppState>,
    Path(id): Path<String>,
) -> Result<Response, ApiError> {
    let id: CalibrationId = path_id(&id)?;
    let row = store::get(&state.storage, id).await?;
    let json = store::table_json(&state.storage, id).await?;
    let disposition = format!(
        "attachment; filename=\"{}.json\"",
        file_stem(&row.metadata.name)
    );
    Ok((
        [
            (header::CONTENT_TYPE, "application/json".to_string()),
            (header::CONTENT_DISPOSITION, disposition),
        ],
        json,
    )
        .into_response())
}

fn optional_id(text: Option<&str>) -> Result<Option<CalibrationId>, ApiError> {
    text.map(|t| {
        t.parse().map_err(|e: CoreError| {
            ApiError::unprocessable("invalid_input", format!("supersedes: {e}"))
        })
    })
    .transpose()
}

/// Imports a calibration file (as exported or as in `calibration-sets/`). Importing the same
/// table again returns the stored one with 200.
#[utoipa::path(post, path = "/api/v1/calibrations/import", tag = "calibrations", params(ImportQuery),
    request_body(content = Object, content_type = "application/json", description = "A calibration file"),
    responses((status = 201, body = CalibrationSummary, links(
                  ("calibration" = (operation_id = "get_calibration", parameters(("id" = "$response.body#/id")))),
                  ("export" = (operation_id = "export_calibration", parameters(("id" = "$response.body#/id")))),
                  ("archive" = (operation_id = "archive_calibration", parameters(("id" = "$response.body#/id")))),
                  ("restore" = (operation_id = "restore_calibration", parameters(("id" = "$response.body#/id")))))),
              (status = 200, body = CalibrationSummary, links(
                  ("calibration" = (operation_id = "get_calibration", parameters(("id" = "$response.body#/id")))))),
              (status = 400, body = ErrorBody),
              (status = 404, body = ErrorBody), (status = 408, body = ErrorBody),
              (status = 409, body = ErrorBody), (status = 413, body = ErrorBody),
              (status = 415, body = ErrorBody), (status = 422, body = ErrorBody),
              (status = 503, body = ErrorBody)))]
async fn import_calibration(
    State(state): State<AppState>,
    origin: Origin,
    query: Result<Query<ImportQuery>, QueryRejection>,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> Result<(StatusCode, Json<CalibrationSummary>), ApiError> {
    let Query(query) = query?;
    let supersedes = optional_id(query.supersedes.as_deref())?;
    let content_type = headers
        .get(header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .unwrap_or("");
    if !content_type.starts_with("application/json") {
        return Err(ApiError::UnsupportedMediaType(format!(
            "a calibration file is sent as application/json, not {:?}",
            crate::domain::shorten(content_type, 60)
        )));
    }
    let body = body?;
    let table = CalibrationTable::from_json(&body)?;
    check_metadata(&table.metadata)?;
    // from_json accepted the body, so it is UTF-8.
    let text = String::from_utf8_lossy(&body);
    let change = (&origin, AuditAction::Import);
    let inserted = store::insert(&state.storage, &table, &text, supersedes, None, change).await?;
    let status = if inserted.created {
        StatusCode::CREATED
    } else {
        StatusCode::OK
    };
    Ok((status, Json(inserted.row.into())))
}

/// Measures a calibration table on a beam photo. With `dry_run` the report and table are
/// returned and nothing is stored.
#[utoipa::path(post, path = "/api/v1/calibrations", tag = "calibrations",
    request_body(content((BeamForm = "multipart/form-data",
        encoding(("spec" = (content_type = "application/json")))))),
    responses((status = 201, body = CreatedCalibration, links(
                  ("calibration" = (operation_id = "get_calibration", parameters(("id" = "$response.body#/id")))),
                  ("export" = (operation_id = "export_calibration", parameters(("id" = "$response.body#/id")))))),
              (status = 200, body = DryRunCalibration),
              (status = 400, body = ErrorBody), (status = 404, body = ErrorBody),
              (status = 408, body = ErrorBody), (status = 409, body = ErrorBody),
              (status = 413, body = ErrorBody), (status = 415, body = ErrorBody),
              (status = 422, body = ErrorBody), (status = 503, body = ErrorBody),
              (status = 504, body = ErrorBody)))]
async fn create_calibration(
    State(state): State<AppState>,
    origin: Origin,
    multipart: Result<Multipart, MultipartRejection>,
) -> Result<Response, ApiError> {
    let mut form = Form::read(multipart, &["photo", "spec"]).await?;
    let request: BeamRequest = parse_json("spec", &form.require("spec")?)?;
    let (supersedes, dry_run) = (request.supersedes, request.dry_run);
    let spec = request.into_spec()?;
    let photo = form.require("photo")?;
    if let Some(old) = supersedes {
        store::correctable(&state.storage, old).await?;
    }
    let limits = state.config.decode_limits;
    let admission = state.jobs.admit(form.job_size(&photo, &limits)?).await?;
    let calibration = admission
        .run(move || pipeline::calibrate(&photo, &spec, &limits))
        .await??;
    if dry_run {
        let body = DryRunCalibration {
            report: calibration.report,
            table: calibration.table,
        };
        return Ok((StatusCode::OK, Json(body)).into_response());
    }
    let json = calibration.table.to_json();
    let change = (&origin, AuditAction::Create);
    let table = &calibration.table;
    let inserted = store::insert(&state.storage, table, &json, supersedes, None, change).await?;
    tracing::info!(id = %inserted.row.id, "calibration stored");
    let body = CreatedCalibration {
        summary: inserted.row.into(),
        report: calibration.report,
    };
    Ok((StatusCode::CREATED, Json(body)).into_response())
}

/// Hides a calibration from lists (it stays readable and usable by id).
#[utoipa::path(post, path = "/api/v1/calibrations/{id}/archive", tag = "calibrations",
    params(("id" = String, Path, description = "Calibration id", format = Uuid)),
    responses((status = 200, body = CalibrationSummary), (status = 404, body = ErrorBody),
              (status = 503, body = ErrorBody)))]
async fn archive_calibration(
    State(state): State<AppState>,
    origin: Origin,
    Path(id): Path<String>,
) -> Result<Json<CalibrationSummary>, ApiError> {
    let row = store::set_archived(&state.storage, path_id(&id)?, true, &origin).await?;
    Ok(Json(row.into()))
}

/// Shows an archived calibration in lists again.
#[utoipa::path(post, path = "/api/v1/calibrations/{id}/restore", tag = "calibrations",
    params(("id" = String, Path, description = "Calibration id", format = Uuid)),
    responses((status = 200, body = CalibrationSummary), (status = 404, body = ErrorBody),
              (status = 503, body = ErrorBody)))]
async fn restore_calibration(
    State(state): State<AppState>,
    origin: Origin,
    Path(id): Path<String>,
) -> Result<Json<CalibrationSummary>, ApiError> {
    let row = store::set_archived(&state.storage, path_id(&id)?, false, &origin).await?;
    Ok(Json(row.into()))
}
