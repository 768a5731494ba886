//! `GET /api/v1/openapi.json`: the OpenAPI 3.1 description generated from the handlers, and
//! the schemas of the inputs whose constraints the derived ones cannot state (text patterns,
//! ranges, ids, the JSON parts of multipart forms). Each states what the server checks, so a
//! request valid by the description is refused only for what no schema can say (an unknown id,
//! a photo's contents, one field against another).

use axum::routing::get;
use axum::{Json, Router};
use isotint_core::calibration::{MAX_NOTES_CHARS, ORDER_STEP_RANGE};
use isotint_core::export::FileKind;
use isotint_core::order_map::MAX_HINTS;
use isotint_core::report::MAX_TITLE_CHARS;
use isotint_core::series::MAX_SERIES_PHOTOS;
use isotint_core::stress::SpecimenKind;
use serde_json::json;
use utoipa::openapi::schema::Schema;
use utoipa::OpenApi;

use super::error::{ErrorBody, ErrorDetail};
use super::AppState;
use crate::domain::FileStem;

/// Top-level OpenAPI document; paths are added by each module's `router()`.
#[derive(OpenApi)]
#[openapi(
    info(
        title = "isotint",
        description = "Fringe-order maps from white-light photoelastic photos. Pixel coordinates \
                       are pixel-edge coordinates: x right, y down; pixel (x, y) covers \
                       [x, x+1) × [y, y+1). Errors answer {\"error\": {\"code\", \"message\"}}; \
                       a 503 answer carries Retry-After (seconds)."
    ),
    components(schemas(ErrorBody, ErrorDetail)),
    tags(
        (name = "service", description = "Health and description of the service"),
        (name = "calibrations", description = "Calibration tables: fringe order → colour"),
        (name = "order-maps", description = "Fringe-order maps of specimen photos"),
        (name = "audit", description = "Who changed the library, and when")
    )
)]
pub struct ApiDoc;

/// Route serving `doc` as JSON ([`document_json`]).
pub fn router(doc: utoipa::openapi::OpenApi) -> Router<AppState> {
    let doc = std::sync::Arc::new(document_json(&doc));
    Router::new().route(
        "/api/v1/openapi.json",
        get(move || {
            let doc = doc.clone();
            async move { Json(doc.as_ref().clone()) }
        }),
    )
}

/// `doc` as JSON, each response link's fields spelled as OpenAPI spells them: utoipa 5.5
/// writes a `Link` in snake case (`operation_id`), which readers of the document ignore.
pub fn document_json(doc: &utoipa::openapi::OpenApi) -> serde_json::Value {
    let mut json = serde_json::to_value(doc).expect("the OpenAPI document is JSON");
    let operations = json["paths"]
        .as_object_mut()
        .into_iter()
        .flat_map(|paths| paths.values_mut())
        .filter_map(|item| item.as_object_mut())
        .flat_map(|item| item.values_mut());
    let responses = operations
        .filter_map(|operation| operation.get_mut("responses")?.as_object_mut())
        .flat_map(|responses| responses.values_mut());
    let links = responses
        .filter_map(|response| response.get_mut("links")?.as_object_mut())
        .flat_map(|links| links.values_mut())
        .filter_map(|link| link.as_object_mut());
    for link in links {
        for (snake, camel) in [
            ("operation_id", "operationId"),
            ("operation_ref", "operationRef"),
            ("request_body", "requestBody"),
        ] {
            if let Some(value) = link.remove(snake) {
                link.insert(camel.into(), value);
            }
        }
    }
    json
}

/// A schema written in JSON Schema (2020-12, as OpenAPI 3.1 uses it).
fn schema(json: serde_json::Value) -> Schema {
    serde_json::from_value(json).expect("a JSON Schema the schema type reads")
}

/// Characters of a one-line text field: none of the control characters (Unicode Cc) that
/// `domain::check_text` refuses.
const ONE_LINE: &str = r"^[^\u0000-\u001F\u007F-\u009F]*$";

/// Text of at most 200 characters on one line (`domain::check_text`).
pub fn short_text() -> Schema {
    schema(json!({"type": "string", "maxLength": 200, "pattern": ONE_LINE}))
}

/// The free-text query of a list: like [`short_text`], absent when not given.
pub fn query_text() -> Schema {
    short_text()
}

/// A calibration's name: 1–200 characters on one line, not all white space
/// (`domain::check_metadata`; white space as Rust's `str::trim` reads it).
pub fn name_text() -> Schema {
    let space = r"\u0000-\u0020\u007F-\u00A0\u1680\u2000-\u200A\u2028\u2029\u202F\u205F\u3000";
    let line = r"[^\u0000-\u001F\u007F-\u009F]*";
    schema(json!({
        "type": "string",
        "minLength": 1,
        "maxLength": 200,
        "pattern": format!("^{line}[^{space}]{line}$"),
    }))
}

/// Free text of at most [`MAX_NOTES_CHARS`] characters: no control characters but tab, line
/// feed and carriage return.
pub fn notes_text() -> Schema {
    schema(json!({
        "type": "string",
        "maxLength": MAX_NOTES_CHARS,
        "pattern": r"^[^\u0000-\u0008\u000B\u000C\u000E-\u001F\u007F-\u009F]*$",
    }))
}

/// An id: a UUID in its hyphenated form, as every id is written.
pub fn uuid() -> Schema {
    schema(json!({"type": "string", "format": "uuid"}))
}

/// An id or null.
pub fn optional_uuid() -> Schema {
    schema(json!({"type": ["string", "null"], "format": "uuid"}))
}

/// A positive number (exclusive minimum 0).
fn positive() -> serde_json::Value {
    json!({"type": "number", "exclusiveMinimum": 0})
}

/// A positive number or null.
pub fn optional_positive() -> Schema {
    schema(json!({"type": ["number", "null"], "exclusiveMinimum": 0}))
}

/// A rectangle `{left, top, right, bottom}` in pixel-edge coordinates (pixels; right > left
/// and bottom > top, which JSON Schema cannot compare).
pub fn region() -> Schema {
    let edge = json!({"type": "number"});
    schema(json!({
        "type": "object",
        "required": ["left", "top", "right", "bottom"],
        "properties": {"left": edge, "top": edge, "right": edge, "bottom": edge},
    }))
}

/// A point `{x, y}` in pixel-edge coordinates.
fn point() -> serde_json::Value {
    json!({
        "type": "object",
        "required": ["x", "y"],
        "properties": {"x": {"type": "number"}, "y": {"type": "number"}},
    })
}

/// The `options` part of a map: `hints` [{x, y, order}] (at most [`MAX_HINTS`], each order ≥ 0
/// and at most the table's last), `exposure_compensation`, `max_order` (> 0),
/// `max_gradient` (fringes per pixel, in (0, 1]); no other field.
pub fn map_options() -> Schema {
    let mut hint = point();
    hint["required"] = json!(["x", "y", "order"]);
    hint["properties"]["order"] = json!({"type": "number", "minimum": 0});
    schema(json!({
        "type": "object",
        "additionalProperties": false,
        "properties": {
            "exposure_compensation": {"type": "boolean", "default": true},
            "max_order": {"type": ["number", "null"], "exclusiveMinimum": 0},
            "max_gradient": {"type": "number", "exclusiveMinimum": 0, "maximum": 1, "default": 0.2},
            "hints": {"type": "array", "maxItems": MAX_HINTS, "items": hint},
        },
    }))
}

/// A polyline [{x, y}, …] of at least two points in pixel-edge coordinates, or null.
pub fn optional_polyline() -> Schema {
    schema(json!({"type": ["array", "null"], "minItems": 2, "items": point()}))
}

/// Point pairs [{x_px, y_px, x_mm, y_mm}], at least two.
pub fn point_pairs() -> Schema {
    let number = json!({"type": "number"});
    schema(json!({
        "type": "array",
        "minItems": 2,
        "items": {
            "type": "object",
            "required": ["x_px", "y_px", "x_mm", "y_mm"],
            "additionalProperties": false,
            "properties": {"x_px": number, "y_px": number, "x_mm": number, "y_mm": number},
        },
    }))
}

/// A table's grid spacing, fringes, within [`ORDER_STEP_RANGE`], or null for the default.
pub fn optional_order_step() -> Schema {
    let (lo, hi) = ORDER_STEP_RANGE;
    schema(json!({"type": ["number", "null"], "minimum": lo, "maximum": hi}))
}

/// The name of a map's file ([`FileKind::NAMES`]).
pub fn map_file_kind() -> Schema {
    schema(json!({"type": "string", "enum": FileKind::NAMES}))
}

/// A specimen kind's name (`isotint_core::stress::SpecimenKind`).
pub fn specimen_kind() -> Schema {
    let names: Vec<&str> = SpecimenKind::ALL.iter().map(|k| k.name()).collect();
    schema(json!({"type": "string", "enum": names}))
}

/// A specimen kind's name or null.
pub fn optional_specimen_kind() -> Schema {
    let mut names: Vec<serde_json::Value> =
        SpecimenKind::ALL.iter().map(|k| json!(k.name())).collect();
    names.push(serde_json::Value::Null);
    schema(json!({"type": ["string", "null"], "enum": names}))
}

/// Poisson's ratio ν in [0, 0.5), or null.
pub fn optional_poisson_ratio() -> Schema {
    schema(json!({"type": ["number", "null"], "minimum": 0, "exclusiveMaximum": 0.5}))
}

/// A report's title (at most [`MAX_TITLE_CHARS`] characters), or null.
pub fn optional_title() -> Schema {
    schema(json!({"type": ["string", "null"], "maxLength": MAX_TITLE_CHARS}))
}

/// The stem of a downloaded file's name (`domain::FileStem`): 1–100 ASCII letters, digits, `.`,
/// `_` or `-`, not starting with `.`.
pub fn file_stem() -> Schema {
    schema(json!({
        "type": "string",
        "pattern": format!("^[A-Za-z0-9_-][A-Za-z0-9._-]{{0,{}}}$", FileStem::MAX_CHARS - 1),
    }))
}

/// Which pixels a map without a mask covers: `find` (the default) or `whole_photo`.
pub fn mask_source() -> Schema {
    schema(json!({"type": "string", "enum": ["find", "whole_photo"]}))
}

/// The hex text of a list's cursor, as its `next` link gives it.
pub fn cursor() -> Schema {
    schema(json!({"type": "string", "pattern": "^([0-9a-fA-F]{2})+$"}))
}

/// The photos of a series: two to [`MAX_SERIES_PHOTOS`] files.
pub fn series_photos() -> Schema {
    schema(json!({
        "type": "array",
        "minItems": 2,
        "maxItems": MAX_SERIES_PHOTOS,
        "items": {"type": "string", "format": "binary"},
    }))
}

/// The `format` of a series: `slope` only.
pub fn series_format() -> Schema {
    schema(json!({"type": "string", "enum": ["slope"]}))
}

/// One load per photo, N, each positive; two to [`MAX_SERIES_PHOTOS`].
pub fn loads() -> Schema {
    schema(json!({
        "type": "array",
        "minItems": 2,
        "maxItems": MAX_SERIES_PHOTOS,
        "items": positive(),
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The served document.
    fn served() -> serde_json::Value {
        let (_, doc) = super::super::api();
        document_json(&doc)
    }

    #[test]
    fn every_link_names_an_operation_of_the_document_by_its_operation_id() {
        let doc = served();
        let mut ids = Vec::new();
        let mut named = Vec::new();
        for item in doc["paths"].as_object().unwrap().values() {
            for operation in item.as_object().unwrap().values() {
                ids.extend(operation["operationId"].as_str());
                for response in operation["responses"].as_object().unwrap().values() {
                    for link in response["links"]
                        .as_object()
                        .into_iter()
                        .flat_map(|l| l.values())
                    {
                        assert!(link.get("operation_id").is_none(), "{link}");
                        named.push(link["operationId"].as_str().unwrap().to_string());
                    }
                }
            }
        }
        assert!(named.len() >= 8, "{named:?}");
        for id in &named {
            assert!(ids.contains(&id.as_str()), "{id} is no operation");
        }
        let created = &doc["paths"]["/api/v1/calibrations"]["post"]["responses"]["201"];
        assert_eq!(
            created["links"]["calibration"]["parameters"]["id"],
            "$response.body#/id"
        );
    }

    #[test]
    fn a_region_needs_its_four_edges_and_a_map_file_is_one_of_the_named_kinds() {
        let doc = served();
        let beam = &doc["components"]["schemas"]["BeamRequest"]["properties"];
        assert_eq!(
            beam["region"]["required"],
            json!(["left", "top", "right", "bottom"])
        );
        let params = doc["paths"]["/api/v1/order-maps"]["post"]["parameters"]
            .as_array()
            .unwrap();
        let format = params.iter().find(|p| p["name"] == "format").unwrap();
        assert_eq!(format["schema"]["enum"], json!(FileKind::NAMES));
        // A coating takes every format (orders, stresses and strains).
        use isotint_core::stress::{CoatedPart, Coating, PartElasticity, Specimen};
        let coating = Specimen::Coating(CoatedPart {
            coating: Coating::new(4.0, 2.0).unwrap(),
            part: PartElasticity::new(200_000.0, 0.3).unwrap(),
        });
        for name in FileKind::NAMES {
            assert!(FileKind::from_name(name, Some(coating)).is_ok(), "{name}");
        }
        let form = &doc["components"]["schemas"]["MapForm"];
        assert_eq!(form["additionalProperties"], false, "{form}");
    }
}
