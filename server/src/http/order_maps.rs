//! `/api/v1/order-maps`: map a specimen photo with a stored calibration; fetch stored results
//! as JSON or as files (npy, png16, preview, csv, uncertainty, flags, σ1 − σ2 in MPa as
//! stress-npy, stress-preview, stress-csv, and a coating's ε1 − ε2 in µε as strain-npy,
//! strain-preview, strain-csv) until they expire; their free-edge stress and their comparison
//! with a finite-element prediction.

use axum::body::Bytes;
use axum::extract::multipart::MultipartRejection;
use axum::extract::rejection::{BytesRejection, QueryRejection};
use axum::extract::{Multipart, Path, Query, State};
use axum::http::{header, StatusCode};
use axum::response::{IntoResponse, Response};
use axum::Extension;
use axum::Json;
use isotint_core::boundary::{boundary_stress, BoundaryStress, EdgePath, EdgeSample};
use isotint_core::compact;
use isotint_core::comparison::{compare, PointPair, Prediction, Registration};
use isotint_core::export::{self, FileKind};
use isotint_core::exposure::ExposureCorrection;
use isotint_core::specimen::MaskUsed;
use isotint_core::stress::{
    InputOrigins, Specimen, SpecimenFields, SpecimenKind, SpecimenStatistics, StressDefaults,
    StressOpticLaw, STRESS_CAUTION,
};
use isotint_core::{CoreError, CoreResult, MapOptions, OrderMap, PixelPoint, Scale};
use serde::{Deserialize, Serialize};
use time::OffsetDateTime;
use utoipa::{IntoParams, ToSchema};
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use super::download::{asks_for_file, npy_attachment, Bands, ConnectionCut, MapShape};
use super::error::{ApiError, ErrorBody};
use super::form::{parse_json, path_id, Form};
use super::jobs::{Admission, JobSize};
use super::openapi;
use super::AppState;
use crate::domain::{rfc3339, CalibrationId, FileStem, OrderMapId, WithOrigins};
use crate::pipeline::{self, MaskChoice};
use crate::storage::order_maps::{self as store, statistics_from_json, OrderMapRow};

/// Routes of this module.
pub fn router() -> OpenApiRouter<AppState> {
    OpenApiRouter::new()
        .routes(routes!(create_order_map))
        .routes(routes!(get_order_map))
        .routes(routes!(get_order_map_file))
        .routes(routes!(boundary))
        .routes(routes!(comparison))
}

/// JSON body of `POST /api/v1/order-maps/{id}/boundary`. The short names
/// (`fringe_value`, `thickness`, `nominal_stress`) are accepted too.
#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct BoundaryRequest {
    /// Material fringe value f_σ, N/mm per fringe (positive); default the map's calibration's.
    #[serde(alias = "fringe_value")]
    #[schema(schema_with = openapi::optional_positive)]
    pub fringe_value_n_per_mm: Option<f64>,
    /// Model thickness h, mm (positive); default the map's calibration's.
    #[serde(alias = "thickness")]
    #[schema(schema_with = openapi::optional_positive)]
    pub thickness_mm: Option<f64>,
    /// `transmission` (default), `slice` (f_σ at the critical temperature, h the slice's; no
    /// default from the calibration) or `coating` (with the four coating fields).
    #[schema(schema_with = openapi::optional_specimen_kind)]
    pub specimen: Option<SpecimenKind>,
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
    /// Nominal stress σ_nom, MPa (positive): adds K_t = σ_max / σ_nom.
    #[serde(alias = "nominal_stress")]
    #[schema(schema_with = openapi::optional_positive)]
    pub nominal_stress_mpa: Option<f64>,
    /// A polyline [{x, y}, …] of at least two points in pixel-edge coordinates along part of
    /// the specimen's edge, the specimen on one side; without it, the whole outline of the
    /// map's mask.
    #[schema(schema_with = openapi::optional_polyline)]
    pub polyline: Option<Vec<PixelPoint>>,
    /// The photo's scale, mm per pixel (positive): adds `mm_per_px`, `x_mm`, `y_mm`.
    #[schema(schema_with = openapi::optional_positive)]
    pub mm_per_px: Option<f64>,
    /// Also answer every edge point, in order along the edge, as `edge`: [{x, y, normal_x,
    /// normal_y, order, stress_mpa, beyond_range, contour, along_px}] (order and stress null
    /// where there is no value).
    #[serde(default)]
    pub include_edge: bool,
}

/// The answer of `POST /api/v1/order-maps/{id}/boundary`.
#[derive(Debug, Serialize)]
pub struct BoundaryAnswer {
    /// The figures (see `BoundaryStress`).
    #[serde(flatten)]
    pub result: BoundaryStress,
    /// Where `fringe_value_n_per_mm` and `thickness_mm` came from: `given` or `calibration`.
    pub inputs_from: InputOrigins,
    /// Every edge point, when the request set `include_edge`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub edge: Option<Vec<EdgeSample>>,
}

/// JSON body of `POST /api/v1/order-maps/{id}/comparison`.
#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ComparisonRequest {
    /// Material fringe value f_σ, N/mm per fringe (positive); default the map's calibration's.
    #[serde(alias = "fringe_value")]
    #[schema(schema_with = openapi::optional_positive)]
    pub fringe_value_n_per_mm: Option<f64>,
    /// Model thickness h, mm (positive); default the map's calibration's.
    #[serde(alias = "thickness")]
    #[schema(schema_with = openapi::optional_positive)]
    pub thickness_mm: Option<f64>,
    /// `transmission` (default), `slice` (f_σ at the critical temperature, h the slice's; no
    /// default from the calibration) or `coating` (with the four coating fields).
    #[schema(schema_with = openapi::optional_specimen_kind)]
    pub specimen: Option<SpecimenKind>,
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
    /// The predicted σ1 − σ2 as CSV text: rows x_mm,y_mm,stress_mpa (model coordinates in mm,
    /// MPa, ≥ 0), one header row allowed, at least three nodes not on one line.
    pub prediction: String,
    /// At least two point pairs [{x_px, y_px, x_mm, y_mm}]: a pixel (pixel-edge coordinates)
    /// and the model point it shows. Two give a similarity, three or more a least-squares
    /// affine map (needed when the model's y axis points up).
    #[schema(schema_with = openapi::point_pairs)]
    pub pairs: Vec<PointPair>,
}

/// Query of `POST /api/v1/order-maps/{id}/comparison`.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct ComparisonQuery {
    /// `npy`: answer with measured − predicted of every pixel, MPa, as NPY float32 (height,
    /// width; NaN = not compared) instead of the JSON figures.
    pub format: Option<String>,
}

/// Query of `POST /api/v1/order-maps`.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct CreateQuery {
    /// `npy`, `png16`, `preview`, `csv`, `uncertainty` (1 σ of the order, fringes, NPY float32,
    /// NaN = no value), `flags`, or σ1 − σ2 in MPa as `stress-npy` (float32, NaN = no value),
    /// `stress-preview` or `stress-csv` (these need a specimen: `fringe_value_n_per_mm` and
    /// `thickness_mm`, or a coating's fields), or a coating's ε1 − ε2 in µε as `strain-npy`,
    /// `strain-preview` or `strain-csv`: answer with that file instead of storing the map,
    /// named after the photo's file name as a stored map's file is (`disc-03.png` gives
    /// `disc-03-orders.npy`; `order-map.npy` without a file name).
    #[param(schema_with = openapi::map_file_kind)]
    pub format: Option<String>,
}

/// The specimen of a request: a transmission model (default) or frozen-stress slice from
/// `fringe_value_n_per_mm` and `thickness_mm` (both or neither), or a coating from its four
/// fields. With it, JSON answers carry σ1 − σ2 figures (and a coating's ε1 − ε2) and the
/// stress formats can be asked for.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct StressQuery {
    /// `transmission` (default), `slice` or `coating`.
    #[param(schema_with = openapi::specimen_kind)]
    pub specimen: Option<String>,
    /// Material fringe value f_σ, N/mm per fringe (positive; of a slice: at the critical
    /// temperature).
    #[param(exclusive_minimum = 0)]
    pub fringe_value_n_per_mm: Option<f64>,
    /// Model thickness h along the light path, mm (positive; of a slice: the slice's).
    #[param(exclusive_minimum = 0)]
    pub thickness_mm: Option<f64>,
    /// Coating: strain fringe value f_ε, µm per fringe (positive).
    pub strain_fringe_value_um: Option<f64>,
    /// Coating: thickness t_c, mm (positive).
    pub coating_thickness_mm: Option<f64>,
    /// Coating: the part's Young's modulus E, MPa (positive).
    pub youngs_modulus_mpa: Option<f64>,
    /// Coating: the part's Poisson's ratio ν (0 ≤ ν < 0.5).
    pub poisson_ratio: Option<f64>,
}

impl StressQuery {
    /// The specimen these fields give, a transmission model's missing f_σ and h taken from
    /// `defaults` (the calibration's), and where they came from; 422 naming the missing,
    /// misplaced or out-of-range field.
    fn specimen(&self, defaults: StressDefaults) -> CoreResult<(Option<Specimen>, InputOrigins)> {
        SpecimenFields {
            specimen: self
                .specimen
                .as_deref()
                .map(SpecimenKind::from_name)
                .transpose()?,
            fringe_value_n_per_mm: self.fringe_value_n_per_mm,
            thickness_mm: self.thickness_mm,
            strain_fringe_value_um: self.strain_fringe_value_um,
            coating_thickness_mm: self.coating_thickness_mm,
            youngs_modulus_mpa: self.youngs_modulus_mpa,
            poisson_ratio: self.poisson_ratio,
        }
        .specimen_with(defaults)
    }
}

/// Refuses, naming `format`, a file name no specimen would make known; before any other work
/// (whether a stress or strain file can be made waits for the calibration's stress inputs).
fn check_file_name(name: &str) -> CoreResult<()> {
    match FileKind::from_name(name, None) {
        Err(
            e @ CoreError::Invalid {
                field: "format", ..
            },
        ) => Err(e),
        _ => Ok(()),
    }
}

/// The stress inputs calibration `id` was made for.
async fn stress_defaults(state: &AppState, id: CalibrationId) -> Result<StressDefaults, ApiError> {
    Ok(crate::storage::calibrations::stress_defaults(&state.storage, id).await?)
}

/// The query that describes `specimen` again (for links).
fn specimen_query(specimen: &Specimen) -> String {
    let kind = specimen.kind().name();
    match specimen {
        Specimen::Transmission(law) | Specimen::Slice(law) => format!(
            "specimen={kind}&fringe_value_n_per_mm={}&thickness_mm={}",
            law.fringe_value_n_per_mm, law.thickness_mm
        ),
        Specimen::Coating(c) => format!(
            "specimen={kind}&strain_fringe_value_um={}&coating_thickness_mm={}&\
             youngs_modulus_mpa={}&poisson_ratio={}",
            c.coating.strain_fringe_value_um,
            c.coating.thickness_mm,
            c.part.youngs_modulus_mpa,
            c.part.poisson_ratio
        ),
    }
}

/// The path of a stored map's file.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Path)]
pub struct FilePath {
    /// Order-map id.
    #[param(schema_with = openapi::uuid)]
    pub id: String,
    /// npy, png16, preview, csv, uncertainty, flags, stress-npy, stress-preview, stress-csv,
    /// strain-npy, strain-preview or strain-csv.
    #[param(schema_with = openapi::map_file_kind)]
    pub file: String,
}

/// Query of a stored map's file: the name it is saved under.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct FileNameQuery {
    /// Stem of the saved file's name (Content-Disposition): `disc-03-orders` gives
    /// `disc-03-orders.npy`, `disc-03-orders-stress.npy`, …; 1–100 letters, digits, `.`, `_` or
    /// `-`, not starting with `.`. Default: the photo's file name without its extension, other
    /// characters as `_`, then `-orders` (`disc-03.png` gives `disc-03-orders`), or
    /// `order-map-ID` when the photo came without a file name.
    #[param(schema_with = openapi::file_stem)]
    pub name: Option<String>,
}

impl FileNameQuery {
    /// The stem asked for, checked (422 naming `name`), if any.
    fn stem(&self) -> Result<Option<FileStem>, ApiError> {
        Ok(self.name.as_deref().map(FileStem::parse).transpose()?)
    }
}

/// Multipart body of `POST /api/v1/order-maps`: these parts, each at most once, and no other.
#[derive(ToSchema)]
#[serde(deny_unknown_fields)]
pub struct MapForm {
    /// Specimen photo (PNG, JPEG or TIFF); its file name, if the part has one, names the map's
    /// files.
    #[schema(value_type = String, format = Binary)]
    pub photo: Vec<u8>,
    /// Calibration id.
    #[schema(schema_with = openapi::uuid)]
    pub calibration: String,
    /// Optional mask PNG, same size as the photo; non-zero = specimen.
    #[schema(value_type = Option<String>, format = Binary)]
    pub mask: Option<Vec<u8>>,
    /// Without a mask: `find` (the default) maps the specimen found from the photo (its dark,
    /// featureless background and large holes left out), `whole_photo` every pixel.
    #[schema(schema_with = openapi::mask_source)]
    pub mask_source: Option<String>,
    /// Optional light-field photo of the same set-up (analyser turned 90°, nothing else moved;
    /// the photo's size): with `find`, the model's outline in it brings back zero-order zones
    /// on the specimen's edge that the photo alone leaves out (`mask.source`
    /// `found_with_light_field`). Refused beside a mask or `whole_photo`.
    #[schema(value_type = Option<String>, format = Binary)]
    pub light_field_photo: Option<Vec<u8>>,
    /// Optional JSON (a part of type application/json): `hints` [{x, y, order}] inside the
    /// photo and at most the calibration's last order (or `max_order`), `exposure_compensation`,
    /// `max_order`, `max_gradient`.
    #[schema(schema_with = openapi::map_options)]
    pub options: Option<MapOptions>,
}

/// Where to fetch a stored map's files.
#[derive(Debug, Serialize, ToSchema)]
pub struct OrderMapLinks {
    /// This resource.
    #[serde(rename = "self")]
    pub self_link: String,
    /// Orders, NPY float32 (height, width), NaN = no value.
    pub npy: String,
    /// Orders, 16-bit PNG, grey = round(N × 1000), 65535 = no value.
    pub png16: String,
    /// False-colour preview PNG.
    pub preview: String,
    /// CSV `x,y,order,residual_de2000,flags` (the colour residual in CIEDE2000, ΔE00).
    pub csv: String,
    /// Standard uncertainty (1 σ) of the order, fringes, NPY float32 (height, width), NaN = no
    /// value.
    pub uncertainty: String,
    /// Per-pixel flag bits, NPY uint8.
    pub flags: String,
}

/// Where to fetch a stored map's σ1 − σ2 files (the specimen's fields in the query), and a
/// coating's ε1 − ε2 files.
#[derive(Debug, Serialize, ToSchema)]
pub struct StressLinks {
    /// σ1 − σ2, MPa, NPY float32 (height, width), NaN = no value.
    pub npy: String,
    /// False-colour preview PNG with a numbered MPa colour bar.
    pub preview: String,
    /// CSV `x,y,stress_mpa,flags`.
    pub csv: String,
    /// A coating's ε1 − ε2, µε: NPY float32 (`strain-npy`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub strain_npy: Option<String>,
    /// A coating's ε1 − ε2 preview PNG with a numbered µε colour bar (`strain-preview`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub strain_preview: Option<String>,
    /// A coating's ε1 − ε2 as CSV `x,y,strain_microstrain,flags` (`strain-csv`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub strain_csv: Option<String>,
}

/// σ1 − σ2 figures of a map through the request's specimen.
#[derive(Debug, Serialize, ToSchema)]
pub struct StressResource {
    /// `specimen` (its `kind` and inputs), `stress_per_fringe_mpa`, the law and figures, MPa:
    /// `min_stress_mpa`, `mean_stress_mpa`, `max_stress_mpa` and `max_is_lower_bound` (true
    /// when beyond-range pixels may hold a higher maximum); for a coating `strain`, µε.
    #[serde(flatten)]
    #[schema(value_type = Object)]
    pub statistics: SpecimenStatistics,
    /// Where `fringe_value_n_per_mm` and `thickness_mm` came from: `given` or `calibration`
    /// (the calibration's values, taken when the request left them out); null when not used.
    #[schema(value_type = Object)]
    pub inputs_from: InputOrigins,
    /// Results support, and do not replace, engineering judgement.
    pub caution: String,
    /// The map's stress files.
    pub links: StressLinks,
}

impl StressResource {
    fn new(
        statistics: &serde_json::Value,
        (specimen, inputs_from): (Specimen, InputOrigins),
        id: OrderMapId,
    ) -> Self {
        let query = specimen_query(&specimen);
        let link = |kind: &str| format!("/api/v1/order-maps/{id}/{kind}?{query}");
        let coating = specimen.kind() == SpecimenKind::Coating;
        StressResource {
            statistics: specimen.statistics(&statistics_from_json(statistics)),
            inputs_from,
            caution: STRESS_CAUTION.to_string(),
            links: StressLinks {
                npy: link("stress-npy"),
                preview: link("stress-preview"),
                csv: link("stress-csv"),
                strain_npy: coating.then(|| link("strain-npy")),
                strain_preview: coating.then(|| link("strain-preview")),
                strain_csv: coating.then(|| link("strain-csv")),
            },
        }
    }
}

/// A stored order map.
#[derive(Debug, Serialize, ToSchema)]
pub struct OrderMapResource {
    /// Order-map id (UUID).
    #[schema(value_type = String, format = Uuid)]
    pub id: OrderMapId,
    /// Width, pixels.
    pub width: u32,
    /// Height, pixels.
    pub height: u32,
    /// Calibration used.
    #[schema(value_type = String, format = Uuid)]
    pub calibration_id: CalibrationId,
    /// Summary figures over the specimen's pixels (NaN figures are null).
    #[schema(value_type = Object)]
    pub statistics: serde_json::Value,
    /// The mask used: `source` (`given`, `found` from the photo, `found_with_light_field` with
    /// a light-field photo, or `whole_photo`) and
    /// `specimen_share`, its share of the photo's pixels (0–1); null for maps stored before it
    /// was recorded. A found mask is worth a look: the `flags` file marks the pixels it left
    /// out (bit 1).
    #[schema(value_type = Option<Object>)]
    pub mask: Option<MaskUsed>,
    /// True when part of the specimen lies beyond the calibration's range: the true maximum may
    /// lie there, so `statistics.max_order` (and any maximum stress) is a lower bound.
    pub max_is_lower_bound: bool,
    /// A caution, when part of the specimen lies past the calibration's range or its orders
    /// come within a fringe of the calibration's last order (possible aliases of higher orders).
    pub caution: Option<String>,
    /// σ1 − σ2 figures, when the request described a specimen (`fringe_value_n_per_mm` and
    /// `thickness_mm`, or a coating's fields) or the calibration knows both f_σ and h.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub stress: Option<StressResource>,
    /// Exposure correction applied.
    #[schema(value_type = Object)]
    pub exposure: ExposureCorrection,
    /// When it was made, RFC 3339.
    pub created_at: String,
    /// When it stops being served, RFC 3339.
    pub expires_at: String,
    /// Files of this map.
    pub links: OrderMapLinks,
}

impl OrderMapResource {
    /// The description of stored map `r`, with σ1 − σ2 figures through `specimen` if given
    /// (with where its inputs came from).
    fn new(r: OrderMapRow, specimen: (Option<Specimen>, InputOrigins)) -> Self {
        let statistics = statistics_from_json(&r.statistics);
        let base = format!("/api/v1/order-maps/{}", r.id);
        let link = |kind: &str| format!("{base}/{kind}");
        OrderMapResource {
            links: OrderMapLinks {
                npy: link("npy"),
                png16: link("png16"),
                preview: link("preview"),
                csv: link("csv"),
                uncertainty: link("uncertainty"),
                flags: link("flags"),
                self_link: base.clone(),
            },
            id: r.id,
            width: r.width,
            height: r.height,
            calibration_id: r.calibration_id,
            max_is_lower_bound: statistics.max_is_lower_bound(),
            caution: statistics.caution(),
            stress: specimen
                .0
                .map(|s| StressResource::new(&r.statistics, (s, specimen.1), r.id)),
            statistics: r.statistics,
            mask: r.mask,
            exposure: r.exposure,
            created_at: rfc3339(r.created_at),
            expires_at: rfc3339(r.expires_at),
        }
    }
}

/// The `mask_source` field of a map request, used when no mask is given.
#[derive(Debug, Clone, Copy, PartialEq)]
enum MaskSourceChoice {
    Find,
    WholePhoto,
}

impl MaskSourceChoice {
    /// `find` (or absent) or `whole_photo`; refused beside a mask, which already says which
    /// pixels are the specimen.
    fn parse(text: Option<&str>, with_mask: bool) -> Result<MaskSourceChoice, ApiError> {
        let choice = match text.map(str::trim) {
            None | Some("find") => MaskSourceChoice::Find,
            Some("whole_photo") => MaskSourceChoice::WholePhoto,
            Some(other) => {
                return Err(ApiError::unprocessable(
                    "invalid_input",
                    format!("invalid mask_source: {other:?}; use \"find\" or \"whole_photo\""),
                ))
            }
        };
        if with_mask && text.is_some() {
            return Err(ApiError::unprocessable(
                "invalid_input",
                "invalid mask_source: give either a mask or mask_source, not both",
            ));
        }
        Ok(choice)
    }
}

fn refuse_expired(row: &OrderMapRow) -> Result<(), ApiError> {
    if row.expires_at <= OffsetDateTime::now_utc() {
        return Err(ApiError::Gone(format!(
            "order map {} expired at {}; map the photo again",
            row.id,
            rfc3339(row.expires_at)
        )));
    }
    Ok(())
}

/// Maps a specimen photo's fringe orders with a stored calibration. With `?format=` the
/// response is that file, named after the photo, and nothing is stored; otherwise the map is
/// stored for the retention time (its files named after the photo) and described as JSON.
#[utoipa::path(post, path = "/api/v1/order-maps", tag = "order-maps", params(CreateQuery, StressQuery),
    request_body(content((MapForm = "multipart/form-data",
        encoding(("options" = (content_type = "application/json")))))),
    responses((status = 201, body = OrderMapResource, links(
                  ("order_map" = (operation_id = "get_order_map", parameters(("id" = "$response.body#/id")))),
                  ("file" = (operation_id = "get_order_map_file", parameters(("id" = "$response.body#/id")))),
                  ("boundary" = (operation_id = "boundary", parameters(("id" = "$response.body#/id")))),
                  ("comparison" = (operation_id = "comparison", parameters(("id" = "$response.body#/id")))))),
              (status = 200, description = "The map as the requested file",
               content((Vec<u8> = "application/octet-stream"), (Vec<u8> = "image/png"), (String = "text/csv"))),
              (status = 400, body = ErrorBody), (status = 404, body = ErrorBody),
              (status = 408, body = ErrorBody), (status = 413, body = ErrorBody),
              (status = 415, body = ErrorBody),
              (status = 422, body = ErrorBody), (status = 503, body = ErrorBody),
              (status = 504, body = ErrorBody)))]
async fn create_order_map(
    State(state): State<AppState>,
    cut: Option<Extension<ConnectionCut>>,
    query: Result<Query<CreateQuery>, QueryRejection>,
    stress: Result<Query<StressQuery>, QueryRejection>,
    multipart: Result<Multipart, MultipartRejection>,
) -> Result<Response, ApiError> {
    let Query(query) = query?;
    let Query(stress) = stress?;
    query.format.as_deref().map(check_file_name).transpose()?;
    // A file answer streams like a download: its place is taken before the upload is read.
    let download = query
        .format
        .as_ref()
        .map(|_| state.downloads.start())
        .transpose()?;
    let mut form = Form::read(
        multipart,
        &[
            "photo",
            "calibration",
            "mask",
            "mask_source",
            "light_field_photo",
            "options",
        ],
    )
    .await?;
    let calibration_id: CalibrationId = form.require_id("calibration")?;
    let options: MapOptions = match form.take("options") {
        Some(bytes) => parse_json("options", &bytes)?,
        None => MapOptions::default(),
    };
    let file_stem = form.file_name("photo").and_then(FileStem::of_photo);
    let photo = form.require("photo")?;
    let mask = form.take("mask");
    let mask_source =
        MaskSourceChoice::parse(form.text("mask_source")?.as_deref(), mask.is_some())?;
    let light_field = form.take("light_field_photo");
    if light_field.is_some() && (mask.is_some() || mask_source == MaskSourceChoice::WholePhoto) {
        return Err(ApiError::unprocessable(
            "invalid_input",
            "invalid light_field_photo: it outlines a specimen to be found; give it without \
             mask and without mask_source=whole_photo",
        ));
    }
    let table = crate::storage::calibrations::table(&state.storage, calibration_id).await?;
    options.validate(&table)?;
    let specimen = stress.specimen(table.stress_defaults())?;
    let format = query
        .format
        .as_deref()
        .map(|name| FileKind::from_name(name, specimen.0))
        .transpose()?;
    let limits = state.config.decode_limits;
    let mut size = form.job_size(&photo, &limits)?;
    if let Some(light) = &light_field {
        size.memory_bytes += pipeline::light_field_memory(light, &limits)? + light.len() as u64;
        size.waiting_bytes += light.len() as u64;
    }
    let admission = state.jobs.admit(size).await?;
    // The job holds its admission until its results are stored.
    let (map, mask_used, bands) = admission
        .run(move || -> CoreResult<(OrderMap, MaskUsed, Vec<Vec<u8>>)> {
            let choice = match (&mask, &light_field, mask_source) {
                (Some(bytes), _, _) => MaskChoice::Given(bytes),
                (None, _, MaskSourceChoice::WholePhoto) => MaskChoice::WholePhoto,
                (None, Some(light), MaskSourceChoice::Find) => {
                    MaskChoice::FindWithLightField(light)
                }
                (None, None, MaskSourceChoice::Find) => MaskChoice::Find,
            };
            let (map, used) = pipeline::map(&photo, choice, &table, &options, &limits)?;
            let bands = compact::encode_map(&map)?;
            Ok((map, used, bands))
        })
        .await??;
    if let (Some(kind), Some(slot)) = (format, download) {
        drop(admission);
        let shape = MapShape {
            width: map.width,
            height: map.height,
            statistics: map.statistics,
        };
        drop(map);
        let bands = Bands::Made(std::sync::Arc::new(bands));
        let stem = file_stem.as_ref().map_or("order-map", FileStem::as_str);
        return state
            .downloads
            .stream(slot, kind, shape, bands, stem, cut.map(|c| c.0));
    }
    let retention = state.config.retention;
    let row = store::insert(
        &state.storage,
        calibration_id,
        (&map, mask_used),
        file_stem.as_ref(),
        &bands,
        retention,
    )
    .await?;
    drop(admission);
    let location = format!("/api/v1/order-maps/{}", row.id);
    Ok((
        StatusCode::CREATED,
        [(header::LOCATION, location)],
        Json(OrderMapResource::new(row, specimen)),
    )
        .into_response())
}

/// A stored order map's description and links.
#[utoipa::path(get, path = "/api/v1/order-maps/{id}", tag = "order-maps",
    params(("id" = String, Path, description = "Order-map id", format = Uuid), StressQuery),
    responses((status = 200, body = OrderMapResource), (status = 400, body = ErrorBody),
              (status = 404, body = ErrorBody),
              (status = 410, body = ErrorBody), (status = 422, body = ErrorBody),
              (status = 503, body = ErrorBody)))]
async fn get_order_map(
    State(state): State<AppState>,
    Path(id): Path<String>,
    stress: Result<Query<StressQuery>, QueryRejection>,
) -> Result<Json<OrderMapResource>, ApiError> {
    let Query(stress) = stress?;
    let row = store::get(&state.storage, path_id(&id)?).await?;
    refuse_expired(&row)?;
    let specimen = stress.specimen(stress_defaults(&state, row.calibration_id).await?)?;
    Ok(Json(OrderMapResource::new(row, specimen)))
}

/// A stored order map as a file: `npy`, `png16`, `preview`, `csv`, `uncertainty` (NPY float32
/// of the order's standard uncertainty, 1 σ in fringes, NaN = no value), `flags` (NPY uint8 of
/// the flag bits: 1 outside mask, 2 beyond range, 4 unreliable), or σ1 − σ2 in MPa as
/// `stress-npy`, `stress-preview`, `stress-csv` (with a specimen's fields), or a coating's
/// ε1 − ε2 in µε as `strain-npy`, `strain-preview`, `strain-csv`.
#[utoipa::path(get, path = "/api/v1/order-maps/{id}/{file}", tag = "order-maps",
    params(FilePath, StressQuery, FileNameQuery),
    responses((status = 200, description = "The file",
               content((Vec<u8> = "application/octet-stream"), (Vec<u8> = "image/png"), (String = "text/csv"))),
              (status = 400, body = ErrorBody), (status = 404, body = ErrorBody), (status = 410, body = ErrorBody),
              (status = 422, body = ErrorBody), (status = 503, body = ErrorBody)))]
async fn get_order_map_file(
    State(state): State<AppState>,
    cut: Option<Extension<ConnectionCut>>,
    Path(FilePath { id, file }): Path<FilePath>,
    stress: Result<Query<StressQuery>, QueryRejection>,
    name: Result<Query<FileNameQuery>, QueryRejection>,
) -> Result<Response, ApiError> {
    let id: OrderMapId = path_id(&id)?;
    let Query(stress) = stress?;
    let asked = name?.0.stem()?;
    check_file_name(&file).map_err(|e| ApiError::NotFound(e.to_string()))?;
    let row = store::get(&state.storage, id).await?;
    refuse_expired(&row)?;
    let (specimen, _) = stress.specimen(stress_defaults(&state, row.calibration_id).await?)?;
    let kind = FileKind::from_name(&file, specimen).map_err(|e| match e {
        CoreError::Invalid {
            field: "format", ..
        } => ApiError::NotFound(e.to_string()),
        other => other.into(),
    })?;
    let slot = state.downloads.start()?;
    let shape = MapShape {
        width: row.width,
        height: row.height,
        statistics: statistics_from_json(&row.statistics),
    };
    let bands = Bands::Stored(state.storage.clone(), id);
    let stem = asked
        .or(row.file_stem)
        .map_or_else(|| format!("order-map-{id}"), |s| s.as_str().to_string());
    state
        .downloads
        .stream(slot, kind, shape, bands, &stem, cut.map(|c| c.0))
}

/// The free-edge stress |σ_t| = N·f_σ/h of a stored map along its mask's outline (or a
/// polyline): the maximum (MPa), where it is (pixel-edge coordinates; also in mm with
/// `mm_per_px`), its order, K_t with a nominal stress, and `beyond_range` /
/// `max_is_lower_bound` when beyond-range pixels touch the edge (the maximum may be higher
/// there); with `include_edge`, every edge point in order along the edge. Orders are sampled 4
/// and 7 px inside the edge and carried to it along the line through both. Nothing is stored.
#[utoipa::path(post, path = "/api/v1/order-maps/{id}/boundary", tag = "order-maps",
    params(("id" = String, Path, description = "Order-map id", format = Uuid)),
    request_body(content = BoundaryRequest, content_type = "application/json"),
    responses((status = 200, description = "Free-edge stress and K_t", body = Object),
              (status = 400, body = ErrorBody), (status = 404, body = ErrorBody),
              (status = 410, body = ErrorBody), (status = 413, body = ErrorBody),
              (status = 422, body = ErrorBody), (status = 503, body = ErrorBody)))]
async fn boundary(
    State(state): State<AppState>,
    Path(id): Path<String>,
    body: Result<Bytes, BytesRejection>,
) -> Result<Json<BoundaryAnswer>, ApiError> {
    let id: OrderMapId = path_id(&id)?;
    let body = body?;
    let request: BoundaryRequest = parse_json("boundary", &body)?;
    let scale = request.mm_per_px.map(Scale::new).transpose()?;
    let path = request
        .polyline
        .map_or(EdgePath::Outline, EdgePath::Polyline);
    let row = stored_map(&state, id).await?;
    let (law, inputs_from) = stress_law(&state, &row, specimen_fields!(request)).await?;
    let (admission, map) = admit_stored_map(&state, &row, 0, body.len() as u64).await?;
    let result = admission
        .run(move || boundary_stress(&map, &law, request.nominal_stress_mpa, &path))
        .await??;
    let result = match scale {
        Some(scale) => result.with_scale(scale),
        None => result,
    };
    let edge = request.include_edge.then(|| result.samples.clone());
    Ok(Json(BoundaryAnswer {
        result,
        inputs_from,
        edge,
    }))
}

/// The stored map `id`'s row; refused when it has expired.
pub(super) async fn stored_map(state: &AppState, id: OrderMapId) -> Result<OrderMapRow, ApiError> {
    let row = store::get(&state.storage, id).await?;
    refuse_expired(&row)?;
    Ok(row)
}

/// The stress-optic law of a request on stored map `row` from its specimen's `fields` (a
/// transmission model's f_σ and h each defaulting to the map's calibration's), and where they
/// came from; 422 naming a missing or misplaced field.
async fn stress_law(
    state: &AppState,
    row: &OrderMapRow,
    fields: SpecimenFields,
) -> Result<(StressOpticLaw, InputOrigins), ApiError> {
    let (specimen, origins) =
        fields.specimen_with(stress_defaults(state, row.calibration_id).await?)?;
    let specimen = specimen.ok_or_else(|| {
        CoreError::invalid(
            "fringe_value_n_per_mm",
            "is required with thickness_mm (the map's calibration does not carry them), or \
             the coating's fields",
        )
    })?;
    Ok((specimen.law(), origins))
}

/// Admits a job on the stored map `row` and loads the map: the job's memory is a map job's
/// for its pixels plus `extra_bytes`, with `waiting_bytes` of the request held while it waits.
pub(super) async fn admit_stored_map(
    state: &AppState,
    row: &OrderMapRow,
    extra_bytes: u64,
    waiting_bytes: u64,
) -> Result<(Admission, OrderMap), ApiError> {
    let id = row.id;
    let pixels = u64::from(row.width) * u64::from(row.height);
    let admission = state
        .jobs
        .admit(JobSize {
            memory_bytes: pixels * pipeline::JOB_BYTES_PER_PIXEL + extra_bytes,
            waiting_bytes,
        })
        .await?;
    let (_, map) = store::load(&state.storage, id).await?;
    Ok((admission, map))
}

/// Compares a stored map's σ1 − σ2 (N·f_σ/h) with a finite-element prediction: the CSV's nodes
/// are triangulated and interpolated linearly, registered to the photo by the point pairs, and
/// every specimen pixel with a value inside the model is compared (measured − predicted).
/// Answers `mean_abs_difference_mpa`, `rms_difference_mpa`, `max_abs_difference_mpa` (with
/// where), `compared_pixels`, the registration used and how much of the specimen the model
/// covers; with `format=npy` the difference map instead. Nothing is stored.
#[utoipa::path(post, path = "/api/v1/order-maps/{id}/comparison", tag = "order-maps",
    params(("id" = String, Path, description = "Order-map id", format = Uuid), ComparisonQuery),
    request_body(content = ComparisonRequest, content_type = "application/json"),
    responses((status = 200, description = "Difference statistics; with format=npy the difference map instead, as NPY \
                (application/octet-stream)", body = Object),
              (status = 400, body = ErrorBody), (status = 404, body = ErrorBody),
              (status = 410, body = ErrorBody), (status = 413, body = ErrorBody),
              (status = 422, body = ErrorBody), (status = 503, body = ErrorBody)))]
async fn comparison(
    State(state): State<AppState>,
    Path(id): Path<String>,
    query: Result<Query<ComparisonQuery>, QueryRejection>,
    body: Result<Bytes, BytesRejection>,
) -> Result<Response, ApiError> {
    let id: OrderMapId = path_id(&id)?;
    let Query(query) = query?;
    let difference_file = asks_for_file(query.format.as_deref(), "npy")?;
    let request: ComparisonRequest = parse_json("comparison", &body?)?;
    let registration = Registration::fit(&request.pairs)?;
    let row = stored_map(&state, id).await?;
    let (law, inputs_from) = stress_law(&state, &row, specimen_fields!(request)).await?;
    let prediction_bytes = request.prediction.len() as u64;
    // Besides the map, the prediction parsed and triangulated: a few dozen bytes a node, and
    // a node takes a dozen bytes or more of CSV.
    let (admission, map) =
        admit_stored_map(&state, &row, 8 * prediction_bytes, prediction_bytes).await?;
    let result = admission
        .run(move || {
            let prediction = Prediction::from_csv(&request.prediction)?;
            compare(&map, &law, &prediction, &registration)
        })
        .await??;
    if difference_file {
        let (rows, cols) = (result.height as usize, result.width as usize);
        let bytes = export::npy_f32(&result.difference, rows, cols);
        return Ok(npy_attachment(bytes, &format!("comparison-{id}.npy")));
    }
    Ok(Json(WithOrigins {
        result: &result,
        inputs_from,
    })
    .into_response())
}
