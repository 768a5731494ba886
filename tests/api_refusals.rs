//! Bad input answers 4xx with a JSON message naming the problem; the service keeps serving
//! and nothing half-written is stored. None of these needs a successful pixel job.

mod common;

use std::time::{Duration, Instant};

use axum::http::StatusCode;
use common::{
    dimension_bomb_png, get, grey_png, import_id, post, region_json, service, service_with, table,
    Form, Reply, TestService,
};
use isotint::config::ServiceConfig;
use isotint::http::jobs::{Admission, JobSize};
use serde_json::json;

/// Asserts status and that the error message mentions `needle`.
fn refused(reply: &Reply, status: StatusCode, needle: &str) {
    assert_eq!(
        reply.status,
        status,
        "{}",
        String::from_utf8_lossy(&reply.body)
    );
    let message = reply.error_message();
    assert!(
        message.to_lowercase().contains(&needle.to_lowercase()),
        "message {message:?} does not name {needle:?}"
    );
}

/// The service still answers and stored nothing.
async fn still_serving_with_no_calibrations(svc: &TestService) {
    assert_eq!(get(&svc.app, "/api/v1/health").await.status, StatusCode::OK);
    let list = get(&svc.app, "/api/v1/calibrations?include_archived=true")
        .await
        .json();
    assert!(
        list["calibrations"].as_array().unwrap().is_empty(),
        "{list}"
    );
}

fn beam_spec() -> serde_json::Value {
    json!({
        "name": "beam",
        "region": {"left": 10.0, "top": 10.0, "right": 90.0, "bottom": 50.0},
        "edge_order": 3.0,
    })
}

#[tokio::test]
async fn a_dimension_bomb_png_is_refused_before_decoding() {
    let svc = service().await;
    let started = Instant::now();
    let form = Form::new()
        .file(
            "photo",
            "bomb.png",
            "image/png",
            dimension_bomb_png(100_000, 100_000),
        )
        .json("spec", &beam_spec());
    let reply = form.post(&svc.app, "/api/v1/calibrations").await;
    refused(&reply, StatusCode::PAYLOAD_TOO_LARGE, "100000×100000");
    assert!(
        started.elapsed() < Duration::from_secs(2),
        "refusal must cost nothing"
    );

    let id = import_id(&svc.app, &table("t")).await;
    let form = Form::new()
        .file("photo", "p.png", "image/png", grey_png(8, 8))
        .text("calibration", &id)
        .file(
            "mask",
            "bomb.png",
            "image/png",
            dimension_bomb_png(100_000, 100_000),
        );
    let reply = form.post(&svc.app, "/api/v1/order-maps").await;
    refused(&reply, StatusCode::PAYLOAD_TOO_LARGE, "mask");
    assert_eq!(get(&svc.app, "/api/v1/health").await.status, StatusCode::OK);
}

#[tokio::test]
async fn an_upload_over_the_limit_answers_413_in_json() {
    let svc = service_with(ServiceConfig {
        upload_limit_bytes: 50_000,
        ..ServiceConfig::default()
    })
    .await;
    let form = Form::new()
        .file("photo", "big.png", "image/png", vec![0u8; 200_000])
        .json("spec", &beam_spec());
    let reply = form.post(&svc.app, "/api/v1/calibrations").await;
    refused(&reply, StatusCode::PAYLOAD_TOO_LARGE, "upload limit");
    let reply = post(
        &svc.app,
        "/api/v1/calibrations/import",
        "application/json",
        vec![b' '; 200_000],
    )
    .await;
    refused(&reply, StatusCode::PAYLOAD_TOO_LARGE, "upload limit");
    still_serving_with_no_calibrations(&svc).await;
}

#[tokio::test]
async fn missing_unknown_and_repeated_multipart_fields_are_named() {
    let svc = service().await;
    let reply = Form::new()
        .json("spec", &beam_spec())
        .post(&svc.app, "/api/v1/calibrations")
        .await;
    refused(&reply, StatusCode::BAD_REQUEST, "\"photo\"");
    let reply = Form::new()
        .file("photo", "p.png", "image/png", grey_png(100, 60))
        .post(&svc.app, "/api/v1/calibrations")
        .await;
    refused(&reply, StatusCode::BAD_REQUEST, "\"spec\"");
    let reply = Form::new()
        .text("colour", "red")
        .post(&svc.app, "/api/v1/order-maps")
        .await;
    refused(&reply, StatusCode::BAD_REQUEST, "colour");
    let reply = Form::new()
        .json("spec", &beam_spec())
        .json("spec", &beam_spec())
        .post(&svc.app, "/api/v1/calibrations")
        .await;
    refused(&reply, StatusCode::BAD_REQUEST, "more than once");
    let reply = Form::new()
        .file("photo", "p.png", "image/png", grey_png(8, 8))
        .post(&svc.app, "/api/v1/order-maps")
        .await;
    refused(&reply, StatusCode::BAD_REQUEST, "\"calibration\"");
    still_serving_with_no_calibrations(&svc).await;
}

#[tokio::test]
async fn a_wrong_content_type_is_refused_with_415() {
    let svc = service().await;
    let reply = post(
        &svc.app,
        "/api/v1/calibrations",
        "application/json",
        b"{}".to_vec(),
    )
    .await;
    refused(
        &reply,
        StatusCode::UNSUPPORTED_MEDIA_TYPE,
        "multipart/form-data",
    );
    let reply = post(
        &svc.app,
        "/api/v1/order-maps",
        "text/plain",
        b"hello".to_vec(),
    )
    .await;
    refused(
        &reply,
        StatusCode::UNSUPPORTED_MEDIA_TYPE,
        "multipart/form-data",
    );
    let reply = post(
        &svc.app,
        "/api/v1/calibrations/import",
        "text/plain",
        table("t").to_json().into_bytes(),
    )
    .await;
    refused(
        &reply,
        StatusCode::UNSUPPORTED_MEDIA_TYPE,
        "application/json",
    );
    still_serving_with_no_calibrations(&svc).await;
}

#[tokio::test]
async fn malformed_json_and_non_numbers_are_refused_naming_the_part() {
    let svc = service().await;
    let photo = grey_png(100, 60);
    let post_spec = |raw: &'static str| {
        Form::new()
            .file("photo", "p.png", "image/png", photo.clone())
            .file(
                "spec",
                "spec.json",
                "application/json",
                raw.as_bytes().to_vec(),
            )
    };
    let reply = post_spec("{\"name\": ")
        .post(&svc.app, "/api/v1/calibrations")
        .await;
    refused(&reply, StatusCode::BAD_REQUEST, "spec");
    let reply = post_spec(
        r#"{"name":"b","region":{"left":0,"top":0,"right":9,"bottom":9},"edge_order":NaN}"#,
    )
    .post(&svc.app, "/api/v1/calibrations")
    .await;
    refused(&reply, StatusCode::BAD_REQUEST, "spec");
    let reply = post_spec(
        r#"{"name":"b","region":{"left":0,"top":0,"right":9,"bottom":9},"edge_order":"three"}"#,
    )
    .post(&svc.app, "/api/v1/calibrations")
    .await;
    refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, "edge_order");
    let reply = post_spec(r#"{"name":"b","region":{"left":0,"top":0,"right":9,"bottom":9},"edge_order":2,"colour":1}"#)
        .post(&svc.app, "/api/v1/calibrations")
        .await;
    refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, "colour");

    let reply = post(
        &svc.app,
        "/api/v1/calibrations/import",
        "application/json",
        b"{not json".to_vec(),
    )
    .await;
    refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, "calibration");
    still_serving_with_no_calibrations(&svc).await;
}

#[tokio::test]
async fn negative_or_inconsistent_numbers_are_refused_naming_the_field() {
    let svc = service().await;
    let photo = grey_png(100, 60);
    let cases = [
        (json!({"edge_order": -2.0}), "edge_order"),
        (json!({"edge_order": 0.0}), "edge_order"),
        (
            json!({"edge_order": null, "moment_n_mm": 5.0}),
            "edge_order",
        ),
        (
            json!({"edge_order": null, "moment_n_mm": -1.0, "depth_mm": 20.0, "fringe_value_n_per_mm": 10.0}),
            "moment_n_mm",
        ),
        (json!({"estimate_edge_order": true}), "estimate_edge_order"),
        (json!({"estimate_edge_order": "yes"}), "estimate_edge_order"),
        (
            json!({"edge_order": null, "estimate_edge_order": true}),
            "estimate_edge_order",
        ),
        (json!({"thickness_mm": -6.0}), "thickness_mm"),
        (json!({"order_step": 0.5}), "order_step"),
        (
            json!({"region": {"left": 50.0, "top": 10.0, "right": 20.0, "bottom": 50.0}}),
            "region",
        ),
        (
            json!({"region": {"left": 0.0, "top": 0.0, "right": 101.0, "bottom": 50.0}}),
            "outside",
        ),
        (json!({"name": "   "}), "name"),
        (json!({"name": "n".repeat(300)}), "name"),
        (json!({"name": "tab\tname"}), "name"),
        (json!({"notes": "x".repeat(5000)}), "notes"),
        (json!({"supersedes": "not-an-id"}), "calibration id"),
        (
            json!({"supersedes": "6f1c2f52-1b7e-4a5e-9d55-0f7c8b1a2e3d"}),
            "no calibration",
        ),
    ];
    for (patch, field) in cases {
        let mut spec = beam_spec();
        for (k, v) in patch.as_object().unwrap() {
            spec[k] = v.clone();
        }
        let reply = Form::new()
            .file("photo", "p.png", "image/png", photo.clone())
            .json("spec", &spec)
            .post(&svc.app, "/api/v1/calibrations")
            .await;
        assert!(reply.status.is_client_error(), "{spec}: {}", reply.status);
        let message = reply.error_message();
        assert!(
            message.contains(field),
            "{spec}: {message:?} does not name {field}"
        );
    }
    still_serving_with_no_calibrations(&svc).await;
}

#[tokio::test]
async fn bad_map_options_and_unknown_ids_are_refused() {
    let svc = service().await;
    let id = import_id(&svc.app, &table("t")).await;
    let photo = grey_png(40, 30);
    let map = |calibration: &str, options: Option<serde_json::Value>| {
        let mut form = Form::new()
            .file("photo", "p.png", "image/png", photo.clone())
            .text("calibration", calibration);
        if let Some(o) = options {
            form = form.json("options", &o);
        }
        form
    };
    let reply = map(&id, Some(json!({"max_gradient": -1.0})))
        .post(&svc.app, "/api/v1/order-maps")
        .await;
    refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, "max_gradient");
    let reply = map(
        &id,
        Some(json!({"hints": [{"x": 500.0, "y": 5.0, "order": 1.0}]})),
    )
    .post(&svc.app, "/api/v1/order-maps")
    .await;
    refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, "outside");
    let reply = map(&id, Some(json!({"max_order": -3})))
        .post(&svc.app, "/api/v1/order-maps")
        .await;
    refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, "max_order");
    let reply = map(&id, Some(json!({"speed": 3})))
        .post(&svc.app, "/api/v1/order-maps")
        .await;
    refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, "speed");
    let reply = map("12345", None)
        .post(&svc.app, "/api/v1/order-maps")
        .await;
    refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, "calibration id");
    let reply = map("6f1c2f52-1b7e-4a5e-9d55-0f7c8b1a2e3d", None)
        .post(&svc.app, "/api/v1/order-maps")
        .await;
    refused(&reply, StatusCode::NOT_FOUND, "no calibration");
    let reply = map(&id, None)
        .post(&svc.app, "/api/v1/order-maps?format=tiff")
        .await;
    refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, "format");
    let reply = Form::new()
        .file("photo", "p.png", "image/png", b"GIF89a not really".to_vec())
        .text("calibration", &id)
        .post(&svc.app, "/api/v1/order-maps")
        .await;
    refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, "photo");
    let reply = Form::new()
        .file("photo", "p.png", "image/png", photo.clone())
        .text("calibration", &id)
        .file("mask", "m.png", "image/png", grey_png(10, 10))
        .post(&svc.app, "/api/v1/order-maps")
        .await;
    refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, "mask");

    for uri in [
        "/api/v1/calibrations/6f1c2f52-1b7e-4a5e-9d55-0f7c8b1a2e3d",
        "/api/v1/calibrations/nonsense",
        "/api/v1/calibrations/nonsense/export",
        "/api/v1/order-maps/6f1c2f52-1b7e-4a5e-9d55-0f7c8b1a2e3d",
        "/api/v1/order-maps/6f1c2f52-1b7e-4a5e-9d55-0f7c8b1a2e3d/npy",
        "/api/v1/order-maps/nonsense/csv",
        "/api/v1/no-such-thing",
    ] {
        let reply = get(&svc.app, uri).await;
        assert_eq!(reply.status, StatusCode::NOT_FOUND, "{uri}");
        reply.error_message();
    }
    let reply = get(
        &svc.app,
        "/api/v1/order-maps/6f1c2f52-1b7e-4a5e-9d55-0f7c8b1a2e3d/tiff",
    )
    .await;
    refused(&reply, StatusCode::NOT_FOUND, "format");
    let reply = post(
        &svc.app,
        "/api/v1/calibrations/nonsense/archive",
        "application/json",
        vec![],
    )
    .await;
    refused(&reply, StatusCode::NOT_FOUND, "calibration");
    let reply = post(&svc.app, "/api/v1/health", "application/json", vec![]).await;
    refused(&reply, StatusCode::METHOD_NOT_ALLOWED, "POST");
    assert_eq!(get(&svc.app, "/api/v1/health").await.status, StatusCode::OK);
}

/// Takes the one job slot of `svc` (a service with `max_jobs: 1`) until the result is dropped.
async fn take_the_only_slot(svc: &TestService) -> Admission {
    svc.state
        .jobs
        .admit(JobSize {
            memory_bytes: 1,
            waiting_bytes: 0,
        })
        .await
        .unwrap()
}

#[tokio::test]
async fn a_request_that_would_wait_past_the_wait_limit_answers_503_with_retry_after() {
    let svc = service_with(ServiceConfig {
        max_jobs: 1,
        job_wait_limit: Duration::from_millis(50),
        ..ServiceConfig::default()
    })
    .await;
    let held = take_the_only_slot(&svc).await;
    let reply = Form::new()
        .file("photo", "p.png", "image/png", grey_png(100, 60))
        .json("spec", &beam_spec())
        .post(&svc.app, "/api/v1/calibrations")
        .await;
    refused(&reply, StatusCode::SERVICE_UNAVAILABLE, "wait limit");
    assert_eq!(reply.headers["retry-after"], "2");
    drop(held);
    let reply = Form::new()
        .file("photo", "p.png", "image/png", grey_png(100, 60))
        .json("spec", &json!({"name": "b", "region": region_json(&isotint_core::PixelRect::new(0.0, 0.0, 500.0, 50.0).unwrap()), "edge_order": 2.0}))
        .post(&svc.app, "/api/v1/calibrations")
        .await;
    refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, "outside");
    still_serving_with_no_calibrations(&svc).await;
}

#[tokio::test]
async fn a_request_whose_upload_would_pass_the_queues_memory_limit_answers_503_at_once() {
    let svc = service_with(ServiceConfig {
        max_jobs: 1,
        queue_memory_bytes: 16,
        ..ServiceConfig::default()
    })
    .await;
    let id = import_id(&svc.app, &table("Strip for the queue's memory")).await;
    let held = take_the_only_slot(&svc).await;
    let photo = grey_png(100, 60);
    assert!(photo.len() > 16, "{} bytes", photo.len());
    let started = Instant::now();
    let reply = Form::new()
        .file("photo", "p.png", "image/png", photo)
        .text("calibration", &id)
        .post(&svc.app, "/api/v1/order-maps")
        .await;
    refused(
        &reply,
        StatusCode::SERVICE_UNAVAILABLE,
        "limit of the queue",
    );
    assert_eq!(reply.headers["retry-after"], "2");
    assert!(
        started.elapsed() < ServiceConfig::default().job_wait_limit,
        "refused without waiting"
    );
    drop(held);
}

#[tokio::test]
async fn a_photo_too_large_for_the_whole_memory_budget_is_refused_413_naming_the_budget() {
    let svc = service_with(ServiceConfig {
        memory_budget_bytes: 16 << 20,
        ..ServiceConfig::default()
    })
    .await;
    let id = import_id(&svc.app, &table("Strip for the budget")).await;
    // 1000 × 1000 pixels at 32 bytes each is about 31 MiB, over a 16 MiB budget: refused from
    // the header, before any decoding and without waiting.
    let reply = Form::new()
        .file("photo", "p.png", "image/png", grey_png(1000, 1000))
        .text("calibration", &id)
        .post(&svc.app, "/api/v1/order-maps")
        .await;
    refused(
        &reply,
        StatusCode::PAYLOAD_TOO_LARGE,
        "memory budget of 16 MiB",
    );
    assert_eq!(reply.error_code(), "too_large");
    // A photo that fits is mapped.
    let reply = Form::new()
        .file("photo", "p.png", "image/png", grey_png(100, 60))
        .text("calibration", &id)
        .post(&svc.app, "/api/v1/order-maps")
        .await;
    assert_eq!(reply.status, StatusCode::CREATED);
}

#[tokio::test]
async fn a_request_over_the_time_limit_answers_504_in_json() {
    let svc = service_with(ServiceConfig {
        request_timeout: Duration::from_millis(1),
        ..ServiceConfig::default()
    })
    .await;
    let reply = Form::new()
        .file("photo", "p.png", "image/png", grey_png(1500, 1500))
        .json("spec", &json!({"name": "slow", "region": {"left": 0, "top": 500, "right": 1500, "bottom": 1000}, "edge_order": 3.0}))
        .post(&svc.app, "/api/v1/calibrations")
        .await;
    refused(&reply, StatusCode::GATEWAY_TIMEOUT, "time limit");
}

#[tokio::test]
async fn empty_truncated_and_forged_photos_are_refused_as_undecodable() {
    let svc = service().await;
    let good = grey_png(64, 64);
    let cases: [(&str, Vec<u8>, &str); 3] = [
        ("empty.png", Vec::new(), "empty"),
        ("truncated.png", good[..good.len() / 2].to_vec(), "photo"),
        (
            "forged.png",
            b"<html>not a picture</html>".to_vec(),
            "not a png",
        ),
    ];
    for (name, bytes, needle) in cases {
        let reply = Form::new()
            .file("photo", name, "image/png", bytes)
            .json("spec", &beam_spec())
            .post(&svc.app, "/api/v1/calibrations")
            .await;
        refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, needle);
    }
    still_serving_with_no_calibrations(&svc).await;
}

#[tokio::test]
async fn a_jpeg_cut_after_its_first_20_kb_is_refused_naming_the_photo_not_padded() {
    let svc = service().await;
    let id = import_id(&svc.app, &table("t")).await;
    let disc = image::load_from_memory(&common::disc_photo().png).unwrap();
    let mut jpeg = std::io::Cursor::new(Vec::new());
    image::codecs::jpeg::JpegEncoder::new_with_quality(&mut jpeg, 100)
        .encode_image(&disc)
        .unwrap();
    let jpeg = jpeg.into_inner();
    assert!(jpeg.len() > 30_000, "the photo is {} bytes", jpeg.len());
    let map = |bytes: &[u8]| {
        Form::new()
            .file("photo", "disc.jpg", "image/jpeg", bytes.to_vec())
            .text("calibration", &id)
    };
    let whole = map(&jpeg)
        .post(&svc.app, "/api/v1/order-maps?format=npy")
        .await;
    assert_eq!(whole.status, StatusCode::OK);
    let reply = map(&jpeg[..20_000])
        .post(&svc.app, "/api/v1/order-maps?format=npy")
        .await;
    refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, "photo");
    refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, "truncated");
}

#[tokio::test]
async fn a_hint_above_the_calibrations_last_order_is_refused_naming_hints() {
    let svc = service().await;
    let id = import_id(&svc.app, &table("t")).await;
    for options in [
        json!({"hints": [{"x": 5.5, "y": 5.5, "order": 9.0}]}),
        json!({"max_order": 2.0, "hints": [{"x": 5.5, "y": 5.5, "order": 3.0}]}),
        json!({"hints": vec![json!({"x": 5.5, "y": 5.5, "order": 1.0}); 1001]}),
    ] {
        let reply = Form::new()
            .file("photo", "p.png", "image/png", grey_png(40, 30))
            .text("calibration", &id)
            .json("options", &options)
            .post(&svc.app, "/api/v1/order-maps")
            .await;
        refused(&reply, StatusCode::UNPROCESSABLE_ENTITY, "hints");
    }
}
