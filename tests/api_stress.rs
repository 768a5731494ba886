//! Engineering results through the real router on a fresh temporary database: σ1 − σ2 maps
//! and figures of stored and one-shot order maps, and their refusals.

mod common;

use axum::http::StatusCode;
use common::{disc_photo, get, import_id, service, table, Form, Reply, TestService};
use isotint_core::export::read_npy_f32;

/// The law of these tests: f_σ = 10.5 N/mm per fringe, h = 6 mm, so 1.75 MPa per fringe.
const LAW: &str = "fringe_value_n_per_mm=10.5&thickness_mm=6";
const MPA_PER_FRINGE: f32 = 10.5 / 6.0;

/// Order maps stored in the service's database.
async fn stored_maps(svc: &TestService) -> i64 {
    sqlx::query_scalar("SELECT COUNT(*) FROM order_maps")
        .fetch_one(svc.storage.pool())
        .await
        .unwrap()
}

/// The multipart form mapping the rendered disc with calibration `id`.
fn disc_form(id: &str) -> Form {
    let disc = disc_photo();
    Form::new()
        .file("photo", "disc.png", "image/png", disc.png)
        .text("calibration", id)
        .file("mask", "disc-mask.png", "image/png", disc.mask_png)
}

fn answered(reply: &Reply, status: StatusCode) {
    assert_eq!(
        reply.status,
        status,
        "{}",
        String::from_utf8_lossy(&reply.body)
    );
}

/// Asserts a 422 whose message names `field`.
fn refused_naming(reply: &Reply, field: &str) {
    answered(reply, StatusCode::UNPROCESSABLE_ENTITY);
    let message = reply.error_message();
    assert!(message.contains(field), "{message:?} does not name {field}");
}

#[tokio::test]
async fn a_stored_map_serves_its_stress_map_and_figures_as_orders_times_fringe_value_over_thickness(
) {
    let svc = service().await;
    let id = import_id(&svc.app, &table("Rendered strip")).await;
    let reply = disc_form(&id)
        .post(&svc.app, &format!("/api/v1/order-maps?{LAW}"))
        .await;
    answered(&reply, StatusCode::CREATED);
    let v = reply.json();
    // source: stress-optic law σ1 − σ2 = N·f_σ/h; 10.5/6 = 1.75 MPa per fringe (hand-worked).
    let max_order = v["statistics"]["max_order"].as_f64().unwrap();
    let stress = &v["stress"];
    assert!(
        (stress["max_stress_mpa"].as_f64().unwrap() - 1.75 * max_order).abs() < 1e-9,
        "{v}"
    );
    assert_eq!(
        stress["max_is_lower_bound"].as_bool(),
        v["max_is_lower_bound"].as_bool()
    );
    assert!(
        stress["caution"]
            .as_str()
            .unwrap()
            .contains("do not replace, engineering judgement"),
        "{stress}"
    );
    let (_, _, orders) = read_npy_f32(
        &get(&svc.app, v["links"]["npy"].as_str().unwrap())
            .await
            .body,
    )
    .unwrap();
    let reply = get(&svc.app, stress["links"]["npy"].as_str().unwrap()).await;
    answered(&reply, StatusCode::OK);
    let (rows, cols, mpa) = read_npy_f32(&reply.body).unwrap();
    assert_eq!((rows, cols), (360, 360));
    for (o, s) in orders.iter().zip(&mpa) {
        assert!(o.is_nan() == s.is_nan() && (o.is_nan() || (o * MPA_PER_FRINGE - s).abs() < 1e-5));
    }
    let preview = get(&svc.app, stress["links"]["preview"].as_str().unwrap()).await;
    answered(&preview, StatusCode::OK);
    assert!(preview.body.starts_with(b"\x89PNG"));
    let csv = get(&svc.app, stress["links"]["csv"].as_str().unwrap()).await;
    assert!(csv.body.starts_with(b"x,y,stress_mpa,flags\n"));
    // The same figures on a later GET with the law in the query; none without it.
    let id = v["id"].as_str().unwrap();
    let again = get(&svc.app, &format!("/api/v1/order-maps/{id}?{LAW}"))
        .await
        .json();
    assert_eq!(again["stress"], v["stress"]);
    let plain = get(&svc.app, &format!("/api/v1/order-maps/{id}"))
        .await
        .json();
    assert!(plain.get("stress").is_none(), "{plain}");

    // One shot: the stress NPY straight back, nothing more stored.
    let reply = disc_form(&id_of_calibration(&v))
        .post(
            &svc.app,
            &format!("/api/v1/order-maps?format=stress-npy&{LAW}"),
        )
        .await;
    answered(&reply, StatusCode::OK);
    let (_, _, one_shot) = read_npy_f32(&reply.body).unwrap();
    assert_eq!(
        one_shot.iter().filter(|s| s.is_finite()).count(),
        mpa.iter().filter(|s| s.is_finite()).count()
    );
    assert_eq!(stored_maps(&svc).await, 1);
}

fn id_of_calibration(v: &serde_json::Value) -> String {
    v["calibration_id"].as_str().unwrap().to_string()
}

#[tokio::test]
async fn stress_requests_without_a_positive_fringe_value_or_thickness_are_refused_naming_the_field_and_store_nothing(
) {
    let svc = service().await;
    let id = import_id(&svc.app, &table("Rendered strip")).await;
    for (query, field) in [
        ("format=stress-npy", "fringe_value_n_per_mm"),
        ("format=stress-csv&thickness_mm=6", "fringe_value_n_per_mm"),
        ("fringe_value_n_per_mm=10.5", "thickness_mm"),
        (
            "format=stress-npy&fringe_value_n_per_mm=0&thickness_mm=6",
            "fringe_value_n_per_mm",
        ),
        ("fringe_value_n_per_mm=10.5&thickness_mm=-6", "thickness_mm"),
    ] {
        let reply = disc_form(&id)
            .post(&svc.app, &format!("/api/v1/order-maps?{query}"))
            .await;
        refused_naming(&reply, field);
    }
    assert_eq!(stored_maps(&svc).await, 0);
    let reply = disc_form(&id).post(&svc.app, "/api/v1/order-maps").await;
    answered(&reply, StatusCode::CREATED);
    let map = reply.json()["id"].as_str().unwrap().to_string();
    refused_naming(
        &get(&svc.app, &format!("/api/v1/order-maps/{map}/stress-npy")).await,
        "fringe_value_n_per_mm",
    );
    refused_naming(
        &get(
            &svc.app,
            &format!("/api/v1/order-maps/{map}?thickness_mm=0&fringe_value_n_per_mm=1"),
        )
        .await,
        "thickness_mm",
    );
    answered(
        &get(
            &svc.app,
            &format!("/api/v1/order-maps/{map}/stress-png16?{LAW}"),
        )
        .await,
        StatusCode::NOT_FOUND,
    );
}

/// POSTs `body` as JSON to `uri`.
async fn post_json(svc: &TestService, uri: &str, body: serde_json::Value) -> Reply {
    common::post(
        &svc.app,
        uri,
        "application/json",
        body.to_string().into_bytes(),
    )
    .await
}

#[tokio::test]
async fn the_boundary_of_a_stored_map_answers_its_peak_edge_stress_and_refuses_bad_input_naming_the_field(
) {
    let svc = service().await;
    let id = import_id(&svc.app, &table("Rendered strip")).await;
    let reply = disc_form(&id).post(&svc.app, "/api/v1/order-maps").await;
    answered(&reply, StatusCode::CREATED);
    let map = reply.json()["id"].as_str().unwrap().to_string();
    let uri = format!("/api/v1/order-maps/{map}/boundary");
    let reply = post_json(
        &svc,
        &uri,
        serde_json::json!({"fringe_value": 10.5, "thickness": 6, "nominal_stress": 1.75}),
    )
    .await;
    answered(&reply, StatusCode::OK);
    let v = reply.json();
    // source: definition K_t = σ_max/σ_nom and |σ_t| = N·f_σ/h (hand-worked: 1.75 MPa per
    // fringe, so K_t equals the order at the peak).
    let (max, order) = (
        v["max_stress_mpa"].as_f64().unwrap(),
        v["order"].as_f64().unwrap(),
    );
    assert!((max - 1.75 * order).abs() < 1e-9, "{v}");
    assert!((v["kt"].as_f64().unwrap() - order).abs() < 1e-9, "{v}");
    assert!(
        v["x"].is_number() && v["y"].is_number() && v["beyond_range"].is_boolean(),
        "{v}"
    );
    // The disc's edge lies 160 px from its centre (180, 180).
    let r = (v["x"].as_f64().unwrap() - 180.0).hypot(v["y"].as_f64().unwrap() - 180.0);
    assert!((r - 160.0).abs() < 2.0, "{v}");

    for (body, status, field) in [
        (
            serde_json::json!({"thickness_mm": 6}),
            StatusCode::UNPROCESSABLE_ENTITY,
            "fringe_value_n_per_mm",
        ),
        (
            serde_json::json!({"fringe_value_n_per_mm": 10.5, "thickness_mm": 0}),
            StatusCode::UNPROCESSABLE_ENTITY,
            "thickness_mm",
        ),
        (
            serde_json::json!({"fringe_value_n_per_mm": 10.5, "thickness_mm": 6, "nominal_stress_mpa": -1}),
            StatusCode::UNPROCESSABLE_ENTITY,
            "nominal_stress_mpa",
        ),
        (
            serde_json::json!({"fringe_value_n_per_mm": 10.5, "thickness_mm": 6, "polyline": [{"x": 10, "y": 10}, {"x": 900, "y": 10}]}),
            StatusCode::UNPROCESSABLE_ENTITY,
            "polyline",
        ),
        (
            serde_json::json!({"fringe_value_n_per_mm": 10.5, "thickness_mm": 6, "polyline": [{"x": 150, "y": 180}, {"x": 210, "y": 180}]}),
            StatusCode::UNPROCESSABLE_ENTITY,
            "polyline",
        ),
    ] {
        let reply = post_json(&svc, &uri, body.clone()).await;
        answered(&reply, status);
        let message = reply.error_message();
        assert!(message.contains(field), "{body}: {message:?}");
    }
    let unknown = post_json(
        &svc,
        "/api/v1/order-maps/00000000-0000-4000-8000-000000000000/boundary",
        serde_json::json!({"fringe_value": 10.5, "thickness": 6}),
    )
    .await;
    answered(&unknown, StatusCode::NOT_FOUND);
    assert_eq!(stored_maps(&svc).await, 1, "the boundary stores nothing");
    let doc = get(&svc.app, "/api/v1/openapi.json").await.json();
    assert!(doc["paths"]["/api/v1/order-maps/{id}/boundary"]["post"].is_object());
}
