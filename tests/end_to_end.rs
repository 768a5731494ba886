//! The whole chain through the real router: a calibration measured on a rendered beam photo,
//! then a rendered disc mapped with it and compared with the closed-form fringe orders.

mod common;

use std::time::Duration;

use axum::http::StatusCode;
use common::{
    beam_photo, disc_light_field_png, disc_photo, disc_photo_at, get, import_id, region_json,
    service, service_with, table, Form, RenderedPhoto, Reply, BEAM_EDGE_ORDER,
};
use isotint::config::ServiceConfig;
use isotint_core::export::read_npy_f32;
use isotint_core::Mask;
use serde_json::json;

/// Creates a calibration from the rendered beam; returns its id.
async fn calibrate(app: &axum::Router) -> String {
    let (beam, region) = beam_photo();
    let spec = json!({
        "name": "Rendered beam",
        "region": region_json(&region),
        "edge_order": BEAM_EDGE_ORDER,
        "material": "cast epoxy",
        "light_source": "daylight",
    });
    let reply = Form::new()
        .file("photo", "beam.png", "image/png", beam.png)
        .json("spec", &spec)
        .post(app, "/api/v1/calibrations")
        .await;
    assert_eq!(
        reply.status,
        StatusCode::CREATED,
        "{}",
        String::from_utf8_lossy(&reply.body)
    );
    let v = reply.json();
    assert_eq!(v["source_kind"], "beam_photo");
    assert!(
        v["report"]["residual_mean_de2000"].as_f64().unwrap() < 5.0,
        "{v}"
    );
    assert!(v["residual_de2000"].is_number());
    v["id"].as_str().unwrap().to_string()
}

/// Mean absolute error and coverage of `orders` against the disc's true orders, scored ≥ 3 px
/// inside the mask where the true order is ≤ 4.
fn score(orders: &[f32], truth: &[f32], mask_png: &[u8]) -> (f64, f64) {
    let mask = Mask::decode(mask_png, &Default::default())
        .unwrap()
        .eroded(3);
    let (mut scored, mut valued, mut sum) = (0usize, 0usize, 0.0f64);
    for (i, t) in truth.iter().enumerate() {
        if !mask.as_slice()[i] || !t.is_finite() || *t > 4.0 {
            continue;
        }
        scored += 1;
        if orders[i].is_finite() {
            valued += 1;
            sum += f64::from((orders[i] - t).abs());
        }
    }
    assert!(scored > 10_000, "too few scored pixels: {scored}");
    (sum / valued.max(1) as f64, valued as f64 / scored as f64)
}

/// The form that maps the rendered `disc`, with its mask, with calibration `id`.
fn disc_form(id: &str, disc: &RenderedPhoto) -> Form {
    Form::new()
        .file("photo", "disc.png", "image/png", disc.png.clone())
        .text("calibration", id)
        .file("mask", "disc-mask.png", "image/png", disc.mask_png.clone())
}

/// The JSON answer of a request that must have created something (201).
fn created(reply: &Reply) -> serde_json::Value {
    assert_eq!(
        reply.status,
        StatusCode::CREATED,
        "{}",
        String::from_utf8_lossy(&reply.body)
    );
    reply.json()
}

fn npy(reply: &Reply) -> (usize, usize, Vec<f32>) {
    assert_eq!(
        reply.status,
        StatusCode::OK,
        "{}",
        String::from_utf8_lossy(&reply.body)
    );
    read_npy_f32(&reply.body).unwrap()
}

/// Maps the rendered disc (with its mask) with a rendered table through a fresh service and
/// stores the map; returns the service and the order map's JSON description.
async fn stored_disc_map() -> (common::TestService, serde_json::Value) {
    let svc = service().await;
    let id = import_id(&svc.app, &table("Rendered strip")).await;
    let reply = disc_form(&id, &disc_photo())
        .post(&svc.app, "/api/v1/order-maps")
        .await;
    let v = created(&reply);
    (svc, v)
}

/// A stored map's orders and uncertainties, both checked to be NPY float32 of its size.
async fn orders_and_uncertainty(app: &axum::Router, v: &serde_json::Value) -> (Vec<f32>, Vec<f32>) {
    let size = (
        v["height"].as_u64().unwrap() as usize,
        v["width"].as_u64().unwrap() as usize,
    );
    let (rows, cols, orders) = npy(&get(app, v["links"]["npy"].as_str().unwrap()).await);
    assert_eq!((rows, cols), size);
    let (rows, cols, uncertainty) =
        npy(&get(app, v["links"]["uncertainty"].as_str().unwrap()).await);
    assert_eq!((rows, cols), size, "the uncertainty has the map's shape");
    (orders, uncertainty)
}

/// A dry run on the rendered beam with `spec` (region and `dry_run` added); the JSON answer.
async fn beam_dry_run(app: &axum::Router, mut spec: serde_json::Value) -> serde_json::Value {
    let (beam, region) = beam_photo();
    spec["region"] = region_json(&region);
    spec["dry_run"] = json!(true);
    let reply = Form::new()
        .file("photo", "beam.png", "image/png", beam.png)
        .json("spec", &spec)
        .post(app, "/api/v1/calibrations")
        .await;
    assert_eq!(
        reply.status,
        StatusCode::OK,
        "{}",
        String::from_utf8_lossy(&reply.body)
    );
    reply.json()
}

#[tokio::test]
async fn a_dry_run_reports_the_residual_and_stores_nothing() {
    let svc = service().await;
    let v = beam_dry_run(
        &svc.app,
        json!({"name": "Trial", "edge_order": BEAM_EDGE_ORDER}),
    )
    .await;
    assert!(v["report"]["residual_mean_de2000"].is_number());
    assert_eq!(v["table"]["format"], "isotint-calibration");
    let list = get(&svc.app, "/api/v1/calibrations").await.json();
    assert!(list["calibrations"].as_array().unwrap().is_empty());
}

#[tokio::test]
async fn an_edge_order_estimated_from_the_colour_sequence_is_reported_with_its_runner_up() {
    let svc = service().await;
    let v = beam_dry_run(
        &svc.app,
        json!({"name": "Estimated", "estimate_edge_order": true}),
    )
    .await;
    let estimate = &v["report"]["edge_order_estimate"];
    let n = estimate["edge_order"].as_f64().unwrap();
    println!("estimated edge order {n:.4} (rendered with {BEAM_EDGE_ORDER})");
    // source: closed-form pure bending (the rendered beam's field); tolerance measured in
    // server/core/tests/edge_estimate.rs (light among the references: 1 %).
    assert!(
        (n - BEAM_EDGE_ORDER).abs() <= 0.01 * BEAM_EDGE_ORDER,
        "{estimate}"
    );
    assert_eq!(v["report"]["edge_order"].as_f64(), Some(n));
    assert_eq!(v["table"]["source"]["edge_order"].as_f64(), Some(n));
    assert!(
        estimate["runner_up"]["edge_order"].is_number(),
        "{estimate}"
    );
    assert!(
        estimate["cost_ratio"].as_f64().unwrap() >= 1.5,
        "{estimate}"
    );
    assert!(
        estimate["statement"]
            .as_str()
            .unwrap()
            .contains("confirm it against a known load"),
        "{estimate}"
    );
    let doc = get(&svc.app, "/api/v1/openapi.json").await.json();
    let field = &doc["components"]["schemas"]["BeamRequest"]["properties"]["estimate_edge_order"];
    assert_eq!(field["type"], "boolean", "{field}");
}

#[tokio::test]
async fn a_disc_mapped_with_a_beam_calibration_matches_the_closed_form_orders() {
    let svc = service().await;
    let id = calibrate(&svc.app).await;
    let disc = disc_photo();

    // One round trip: the NPY comes back directly.
    let reply = disc_form(&id, &disc)
        .post(&svc.app, "/api/v1/order-maps?format=npy")
        .await;
    let (rows, cols, orders) = npy(&reply);
    assert_eq!((rows, cols), (disc.height as usize, disc.width as usize));
    let (mae, coverage) = score(&orders, &disc.true_order, &disc.mask_png);
    println!(
        "disc via API: MAE {mae:.4} fringe, coverage {:.2} %",
        100.0 * coverage
    );
    assert!(mae <= 0.02, "mean absolute error {mae}");
    assert!(coverage >= 0.97, "coverage {coverage}");

    // Stored: JSON description, then every file by link.
    let reply = disc_form(&id, &disc)
        .json("options", &json!({"exposure_compensation": true}))
        .post(&svc.app, "/api/v1/order-maps")
        .await;
    let v = created(&reply);
    assert_eq!(v["width"], disc.width);
    assert_eq!(v["calibration_id"], id.as_str());
    assert!(v["statistics"]["valued_pixels"].as_u64().unwrap() > 10_000);
    // Next to the load points the disc's orders run past the table: the answer says so.
    let caution = v["caution"].as_str().expect("a range caution");
    assert!(
        caution.contains("beyond this calibration's last order"),
        "{caution}"
    );
    let links = &v["links"];
    let again = get(&svc.app, links["self"].as_str().unwrap()).await;
    assert_eq!(again.status, StatusCode::OK);
    assert_eq!(again.json()["id"], v["id"]);
    assert_eq!(again.json()["caution"], v["caution"]);
    let (_, _, stored) = npy(&get(&svc.app, links["npy"].as_str().unwrap()).await);
    assert_eq!(stored.len(), orders.len());
    let same = stored
        .iter()
        .zip(&orders)
        .all(|(a, b)| a.to_bits() == b.to_bits() || (a.is_nan() && b.is_nan()));
    assert!(same, "the stored map equals the direct one");
    for (kind, content_type) in [
        ("png16", "image/png"),
        ("preview", "image/png"),
        ("csv", "text/csv"),
    ] {
        let reply = get(&svc.app, links[kind].as_str().unwrap()).await;
        assert_eq!(reply.status, StatusCode::OK, "{kind}");
        assert!(
            reply.headers["content-type"]
                .to_str()
                .unwrap()
                .starts_with(content_type),
            "{kind}"
        );
        assert!(reply.body.len() > 1000, "{kind}");
    }
    let flags = get(&svc.app, links["flags"].as_str().unwrap()).await;
    assert_eq!(flags.status, StatusCode::OK);
    assert!(flags.body.starts_with(b"\x93NUMPY"));
    assert!(flags.body.len() >= (disc.width * disc.height) as usize);
}

#[tokio::test]
async fn an_expired_order_map_answers_410_and_is_purged() {
    let svc = service_with(ServiceConfig {
        retention: Duration::ZERO,
        ..ServiceConfig::default()
    })
    .await;
    let id = calibrate(&svc.app).await;
    let disc = disc_photo();
    let reply = Form::new()
        .file("photo", "disc.png", "image/png", disc.png)
        .text("calibration", &id)
        .post(&svc.app, "/api/v1/order-maps")
        .await;
    assert_eq!(
        reply.status,
        StatusCode::CREATED,
        "{}",
        String::from_utf8_lossy(&reply.body)
    );
    let map_id = reply.json()["id"].as_str().unwrap().to_string();
    let gone = get(&svc.app, &format!("/api/v1/order-maps/{map_id}")).await;
    assert_eq!(gone.status, StatusCode::GONE);
    assert!(gone.error_message().contains("expired"));
    let gone = get(&svc.app, &format!("/api/v1/order-maps/{map_id}/npy")).await;
    assert_eq!(gone.status, StatusCode::GONE);
    let later = time::OffsetDateTime::now_utc() + time::Duration::seconds(1);
    let purged = isotint::storage::order_maps::purge_expired(&svc.storage, later)
        .await
        .unwrap();
    assert_eq!(purged, 1);
    assert_eq!(
        get(&svc.app, &format!("/api/v1/order-maps/{map_id}"))
            .await
            .status,
        StatusCode::NOT_FOUND
    );
}

#[tokio::test]
async fn the_uncertainty_of_a_stored_map_is_an_npy_of_its_size_with_nan_wherever_the_order_is_nan()
{
    let (svc, v) = stored_disc_map().await;
    let link = v["links"]["uncertainty"]
        .as_str()
        .expect("an uncertainty link");
    assert_eq!(
        link,
        format!(
            "/api/v1/order-maps/{}/uncertainty",
            v["id"].as_str().unwrap()
        )
    );
    let reply = get(&svc.app, link).await;
    assert_eq!(reply.headers["content-type"], "application/octet-stream");
    let disposition = reply.headers["content-disposition"].to_str().unwrap();
    assert!(disposition.ends_with("-uncertainty.npy\""), "{disposition}");

    let (orders, uncertainty) = orders_and_uncertainty(&svc.app, &v).await;
    let no_value = orders.iter().filter(|o| o.is_nan()).count();
    assert!(
        no_value > 1000,
        "the disc map has pixels without a value: {no_value}"
    );
    common::assert_no_uncertainty_without_an_order(&orders, &uncertainty);

    let doc = get(&svc.app, "/api/v1/openapi.json").await.json();
    let described = &doc["components"]["schemas"]["OrderMapLinks"]["properties"]["uncertainty"];
    assert!(
        described["description"]
            .as_str()
            .unwrap_or_default()
            .contains("1 σ"),
        "{described}"
    );
}

#[tokio::test]
async fn a_one_shot_uncertainty_request_answers_the_npy_a_stored_map_serves() {
    let (svc, v) = stored_disc_map().await;
    let (_, stored) = orders_and_uncertainty(&svc.app, &v).await;
    let disc = disc_photo();
    let reply = disc_form(v["calibration_id"].as_str().unwrap(), &disc)
        .post(&svc.app, "/api/v1/order-maps?format=uncertainty")
        .await;
    let (rows, cols, direct) = npy(&reply);
    assert_eq!((rows, cols), (disc.height as usize, disc.width as usize));
    let same = stored
        .iter()
        .zip(&direct)
        .all(|(a, b)| a.to_bits() == b.to_bits() || (a.is_nan() && b.is_nan()));
    assert!(same, "the one-shot uncertainty equals the stored one");
}

/// Fails while the core leaves the uncertainty all NaN: every pixel with an order must carry
/// a finite standard uncertainty.
#[tokio::test]
async fn every_valued_pixel_of_a_stored_map_has_a_finite_uncertainty() {
    let (svc, v) = stored_disc_map().await;
    let (orders, uncertainty) = orders_and_uncertainty(&svc.app, &v).await;
    let valued = orders.iter().filter(|o| o.is_finite()).count();
    assert!(valued > 10_000, "too few valued pixels: {valued}");
    let without = orders
        .iter()
        .zip(&uncertainty)
        .filter(|(o, u)| o.is_finite() && !(u.is_finite() && **u >= 0.0))
        .count();
    assert_eq!(
        without, 0,
        "{without} of {valued} valued pixels have no finite σ ≥ 0"
    );
}

#[tokio::test]
async fn without_a_mask_the_service_maps_the_specimen_found_from_the_photo_and_says_so() {
    let svc = service().await;
    let id = import_id(&svc.app, &table("Rendered strip")).await;
    let disc = disc_photo();
    let bare = || {
        Form::new()
            .file("photo", "disc.png", "image/png", disc.png.clone())
            .text("calibration", &id)
    };
    let found = created(&bare().post(&svc.app, "/api/v1/order-maps").await);
    assert_eq!(found["mask"]["source"], "found", "{found}");
    // source: the renderer's own mask of the disc (its true specimen).
    let truth = Mask::decode(&disc.mask_png, &Default::default()).unwrap();
    let inside = truth.as_slice().iter().filter(|v| **v).count();
    let true_share = inside as f64 / truth.as_slice().len() as f64;
    let share = found["mask"]["specimen_share"].as_f64().unwrap();
    // A disc in compression is stress-free along its rim (zero order, the background's colour):
    // the found share may fall short of the disc's by that rim, never exceed it by much.
    assert!(
        share <= true_share * 1.02 && share >= true_share * 0.9,
        "found {share}, the disc covers {true_share}"
    );
    // The figures count the specimen only, and the flags file marks what was left out.
    let pixels = found["statistics"]["specimen_pixels"].as_f64().unwrap();
    let all = f64::from(disc.width * disc.height);
    assert!((pixels / all - share).abs() < 1e-9, "{found}");
    let flags = get(&svc.app, found["links"]["flags"].as_str().unwrap()).await;
    assert_eq!(flags.status, StatusCode::OK);
    let corner = flags.body[flags.body.len() - (disc.width * disc.height) as usize];
    assert_eq!(
        corner & 1,
        1,
        "the photo's corner is not flagged outside the mask"
    );
    let stored = get(&svc.app, found["links"]["self"].as_str().unwrap()).await;
    assert_eq!(
        stored.json()["mask"],
        found["mask"],
        "the stored map forgets its mask"
    );

    let whole = created(
        &bare()
            .text("mask_source", "whole_photo")
            .post(&svc.app, "/api/v1/order-maps")
            .await,
    );
    assert_eq!(
        whole["mask"],
        json!({"source": "whole_photo", "specimen_share": 1.0})
    );
    let given = created(
        &disc_form(&id, &disc)
            .post(&svc.app, "/api/v1/order-maps")
            .await,
    );
    assert_eq!(given["mask"]["source"], "given");
    assert!((given["mask"]["specimen_share"].as_f64().unwrap() - true_share).abs() < 1e-9);

    for form in [
        bare().text("mask_source", "everything"),
        disc_form(&id, &disc).text("mask_source", "find"),
    ] {
        let refused = form.post(&svc.app, "/api/v1/order-maps").await;
        assert_eq!(refused.status, StatusCode::UNPROCESSABLE_ENTITY);
        assert!(
            refused.error_message().contains("mask_source"),
            "{}",
            refused.error_message()
        );
    }
}

#[tokio::test]
async fn a_light_field_photo_brings_back_the_discs_stress_free_rim_and_the_map_says_so() {
    let svc = service().await;
    let id = import_id(&svc.app, &table("Rendered strip")).await;
    let disc = disc_photo();
    let light = disc_light_field_png();
    let form = || {
        Form::new()
            .file("photo", "disc.png", "image/png", disc.png.clone())
            .text("calibration", &id)
    };
    // source: the renderer's own mask of the disc (its true specimen).
    let truth = Mask::decode(&disc.mask_png, &Default::default()).unwrap();
    let inside = truth.as_slice().iter().filter(|v| **v).count();
    let true_share = inside as f64 / truth.as_slice().len() as f64;
    let alone = created(&form().post(&svc.app, "/api/v1/order-maps").await);
    let helped = created(
        &form()
            .file(
                "light_field_photo",
                "disc-light.png",
                "image/png",
                light.clone(),
            )
            .post(&svc.app, "/api/v1/order-maps")
            .await,
    );
    assert_eq!(
        helped["mask"]["source"], "found_with_light_field",
        "{helped}"
    );
    let (before, after) = (
        alone["mask"]["specimen_share"].as_f64().unwrap(),
        helped["mask"]["specimen_share"].as_f64().unwrap(),
    );
    // The disc's rim is zero order (stress-free): the photo alone loses it, the outline in
    // light field keeps it; within a pixel's ring of the true disc (2π·160 px ≈ 1000 px).
    assert!(before < after, "{before} then {after}");
    assert!(
        (after - true_share).abs() * f64::from(disc.width * disc.height) < 1100.0,
        "found {after}, the disc covers {true_share}"
    );
    let stored = get(&svc.app, helped["links"]["self"].as_str().unwrap()).await;
    assert_eq!(stored.json()["mask"], helped["mask"]);
    // The description lists the part: an optional file beside the photo.
    let doc = get(&svc.app, "/api/v1/openapi.json").await.json();
    let schema = &doc["components"]["schemas"]["MapForm"];
    let part = &schema["properties"]["light_field_photo"];
    assert_eq!(part["format"], "binary", "{part}");
    assert!(
        !schema["required"]
            .as_array()
            .unwrap()
            .contains(&json!("light_field_photo")),
        "{schema}"
    );

    // Beside a mask or the whole photo it is refused, naming it; so is another size.
    let other_size = disc_photo_at(700.0, 340).png;
    for refused_form in [
        disc_form(&id, &disc).file("light_field_photo", "l.png", "image/png", light.clone()),
        form().text("mask_source", "whole_photo").file(
            "light_field_photo",
            "l.png",
            "image/png",
            light.clone(),
        ),
        form().file("light_field_photo", "l.png", "image/png", other_size),
    ] {
        let refused = refused_form.post(&svc.app, "/api/v1/order-maps").await;
        assert_eq!(refused.status, StatusCode::UNPROCESSABLE_ENTITY);
        assert!(
            refused.error_message().contains("light_field_photo"),
            "{}",
            refused.error_message()
        );
    }
}

#[tokio::test]
async fn a_maps_residuals_are_ciede2000_in_its_figures_and_its_csv() {
    let (svc, v) = stored_disc_map().await;
    let mean = v["statistics"]["mean_residual"].as_f64().unwrap();
    let csv = get(&svc.app, v["links"]["csv"].as_str().unwrap()).await;
    let text = String::from_utf8(csv.body.to_vec()).unwrap();
    let mut lines = text.lines();
    assert_eq!(lines.next(), Some("x,y,order,residual_de2000,flags"));
    // The CSV's residuals (two decimals) average to the figure the answer gives.
    let residuals: Vec<f64> = lines
        .filter_map(|l| l.split(',').nth(3).and_then(|r| r.parse().ok()))
        .collect();
    let csv_mean = residuals.iter().sum::<f64>() / residuals.len() as f64;
    assert!(
        (csv_mean - mean).abs() < 0.01,
        "CSV mean {csv_mean}, answer {mean}"
    );
    // A photo rendered under the table's own light and camera matches it within a few
    // just-noticeable differences (about 1 ΔE00 each: common practice, no source).
    assert!(mean > 0.0 && mean < 2.0, "mean residual {mean}");
}

/// The file name a download's Content-Disposition gives.
fn saved_as(reply: &Reply) -> String {
    assert_eq!(reply.status, StatusCode::OK);
    reply.headers["content-disposition"]
        .to_str()
        .unwrap()
        .to_string()
}

#[tokio::test]
async fn downloads_that_ask_for_no_name_are_named_after_the_photo_stored_or_answered_at_once() {
    let (svc, v) = stored_disc_map().await;
    // disc_form uploads the photo as disc.png.
    let stored = get(&svc.app, v["links"]["npy"].as_str().unwrap()).await;
    assert_eq!(
        saved_as(&stored),
        "attachment; filename=\"disc-orders.npy\""
    );
    let stored = get(&svc.app, v["links"]["uncertainty"].as_str().unwrap()).await;
    assert_eq!(
        saved_as(&stored),
        "attachment; filename=\"disc-orders-uncertainty.npy\""
    );
    // Answered at once: a photo whose name holds folders and characters unsafe in a header.
    let disc = disc_photo();
    let direct = Form::new()
        .file("photo", "bay 4/Bracket #2.png", "image/png", disc.png)
        .text("calibration", v["calibration_id"].as_str().unwrap())
        .file("mask", "disc-mask.png", "image/png", disc.mask_png)
        .post(&svc.app, "/api/v1/order-maps?format=uncertainty")
        .await;
    assert_eq!(
        saved_as(&direct),
        "attachment; filename=\"Bracket_2-orders-uncertainty.npy\""
    );
}

#[tokio::test]
async fn a_stored_maps_file_is_saved_under_the_name_asked_for_and_an_unsafe_name_is_refused() {
    let (svc, v) = stored_disc_map().await;
    let npy = v["links"]["npy"].as_str().unwrap();
    let named = get(&svc.app, &format!("{npy}?name=disc-03-orders")).await;
    assert_eq!(named.status, StatusCode::OK);
    assert_eq!(
        named.headers["content-disposition"].to_str().unwrap(),
        "attachment; filename=\"disc-03-orders.npy\""
    );
    let uncertainty = v["links"]["uncertainty"].as_str().unwrap();
    let named = get(&svc.app, &format!("{uncertainty}?name=disc-03-orders")).await;
    assert_eq!(
        named.headers["content-disposition"].to_str().unwrap(),
        "attachment; filename=\"disc-03-orders-uncertainty.npy\""
    );
    for bad in ["..%2Fetc", "a%22b", "", ".hidden", &"x".repeat(101)] {
        let refused = get(&svc.app, &format!("{npy}?name={bad}")).await;
        assert_eq!(refused.status, StatusCode::UNPROCESSABLE_ENTITY, "{bad}");
        assert!(refused.error_message().contains("name"), "{bad}");
    }
}
