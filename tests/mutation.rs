//! Deterministic mutation test of the upload endpoints: thousands of damaged photos, masks,
//! map options and beam specifications (fixed seeds) go through the real router, and every one
//! answers 2xx or a JSON 4xx naming the problem: never a panic, never a 5xx.
//!
//! The work is bounded by the case counts below and runs at most four requests at once, which
//! wait for admission well within its wait limit, so that a 503 would mean a fault and not a
//! full service.

mod common;

use std::sync::Arc;

use axum::http::StatusCode;
use common::{import_id, service_with, table, Form, Reply};
use isotint::config::ServiceConfig;
use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};
use serde_json::{json, Value};
use tokio::sync::Semaphore;
use tokio::task::JoinSet;

/// Damaged images sent as the photo (or mask) of an order map.
const IMAGE_CASES: u64 = 2000;
/// Damaged option documents of an order map.
const OPTION_CASES: u64 = 1000;
/// Damaged specifications of a new calibration.
const SPEC_CASES: u64 = 400;
/// Requests in flight at once.
const IN_FLIGHT: usize = 4;

/// A 48 × 40 photo with colours over the whole range, encoded as `format`.
fn base_image(format: image::ImageFormat) -> Vec<u8> {
    let image = image::RgbImage::from_fn(48, 40, |x, y| {
        image::Rgb([(x * 5) as u8, (y * 6) as u8, ((x * y) % 253) as u8])
    });
    let mut out = std::io::Cursor::new(Vec::new());
    image.write_to(&mut out, format).unwrap();
    out.into_inner()
}

/// Applies one to four random byte-level damages to `bytes`: flipped bits, overwritten bytes,
/// extreme 32-bit values (sizes and lengths in headers), cuts, deletions, duplications and
/// insertions.
fn mutate_bytes(rng: &mut StdRng, mut bytes: Vec<u8>) -> Vec<u8> {
    for _ in 0..rng.random_range(1..=4) {
        let len = bytes.len();
        if len == 0 {
            bytes.push(rng.random());
            continue;
        }
        let at = rng.random_range(0..len);
        match rng.random_range(0..7) {
            0 => bytes[at] ^= 1 << rng.random_range(0..8),
            1 => bytes[at] = [0x00, 0xFF, 0x7F, 0x80, rng.random()][rng.random_range(0..5)],
            2 => {
                let value: u32 =
                    [0, 1, 0x7FFF_FFFF, 0xFFFF_FFFF, 0x0001_0000][rng.random_range(0..5)];
                for (k, b) in value.to_be_bytes().into_iter().enumerate() {
                    if let Some(slot) = bytes.get_mut(at + k) {
                        *slot = b;
                    }
                }
            }
            3 => bytes.truncate(at),
            4 => {
                let end = (at + rng.random_range(1..64)).min(len);
                bytes.drain(at..end);
            }
            5 => {
                let end = (at + rng.random_range(1..64)).min(len);
                let copy = bytes[at..end].to_vec();
                bytes.splice(at..at, copy);
            }
            _ => {
                let junk: Vec<u8> = (0..rng.random_range(1..32)).map(|_| rng.random()).collect();
                bytes.splice(at..at, junk);
            }
        }
    }
    bytes
}

/// A number that tests a range: negative, zero, tiny, huge, fractional, or ordinary.
fn edge_number(rng: &mut StdRng) -> Value {
    let choices = [
        json!(-1.0),
        json!(0),
        json!(1e-300),
        json!(1e300),
        json!(-1e300),
        json!(0.5),
        json!(3.999),
        json!(4.0),
        json!(4.001),
        json!(50),
        json!(u64::MAX),
        json!(i64::MIN),
    ];
    if rng.random_bool(0.3) {
        json!(rng.random_range(-10.0..10.0))
    } else {
        choices[rng.random_range(0..choices.len())].clone()
    }
}

/// A value of the wrong kind or range for any field.
fn wild_value(rng: &mut StdRng) -> Value {
    match rng.random_range(0..6) {
        0 => json!(null),
        1 => json!("3.0"),
        2 => json!([]),
        3 => json!({}),
        4 => json!(true),
        _ => edge_number(rng),
    }
}

/// A map options document with random ranges, hint counts and wrong kinds.
fn options_document(rng: &mut StdRng) -> Vec<u8> {
    let hint = |rng: &mut StdRng| {
        json!({"x": rng.random_range(-20.0..70.0), "y": rng.random_range(-20.0..60.0),
               "order": if rng.random_bool(0.8) { json!(rng.random_range(-1.0..6.0)) } else { wild_value(rng) }})
    };
    let hint_count = match rng.random_range(0..10) {
        0 => 1001,
        1..=3 => 0,
        _ => rng.random_range(1..6),
    };
    let hints: Vec<Value> = (0..hint_count).map(|_| hint(rng)).collect();
    let doc = json!({
        "exposure_compensation": rng.random_bool(0.5),
        "max_order": edge_number(rng),
        "max_gradient": if rng.random_bool(0.5) { json!(0.2) } else { edge_number(rng) },
        "hints": hints,
    });
    let fields = [
        "exposure_compensation",
        "max_order",
        "max_gradient",
        "hints",
        "extra",
    ];
    disturbed(rng, doc, &fields)
}

/// `doc` with up to three of `fields` removed or given a wild value, as text, damaged as bytes
/// one time in four.
fn disturbed(rng: &mut StdRng, mut doc: Value, fields: &[&str]) -> Vec<u8> {
    for _ in 0..rng.random_range(0..4) {
        let field = fields[rng.random_range(0..fields.len())];
        if rng.random_bool(0.3) {
            doc.as_object_mut().unwrap().remove(field);
        } else {
            doc[field] = wild_value(rng);
        }
    }
    let text = doc.to_string().into_bytes();
    if rng.random_bool(0.25) {
        mutate_bytes(rng, text)
    } else {
        text
    }
}

/// A beam specification with random ranges and wrong kinds.
fn spec_document(rng: &mut StdRng) -> Vec<u8> {
    let doc = json!({
        "name": "mutated beam",
        "region": {"left": edge_number(rng), "top": edge_number(rng),
                   "right": edge_number(rng), "bottom": edge_number(rng)},
        "edge_order": edge_number(rng),
    });
    let fields = [
        "edge_order",
        "moment_n_mm",
        "depth_mm",
        "fringe_value_n_per_mm",
        "order_step",
        "thickness_mm",
        "refine_edges",
        "estimate_edge_order",
        "dry_run",
        "region",
    ];
    disturbed(rng, doc, &fields)
}

/// One request of the run, rebuilt from its seed.
fn case(seed: u64, calibration: &str, bases: &[Vec<u8>]) -> (&'static str, Form) {
    let mut rng = StdRng::seed_from_u64(seed);
    let photo = |rng: &mut StdRng| bases[rng.random_range(0..bases.len())].clone();
    if seed < IMAGE_CASES {
        let original = photo(&mut rng);
        let damaged = mutate_bytes(&mut rng, original);
        let form = if rng.random_bool(0.8) {
            Form::new().file("photo", "p", "application/octet-stream", damaged)
        } else {
            let mask = damaged;
            Form::new()
                .file("photo", "p", "application/octet-stream", photo(&mut rng))
                .file("mask", "m", "application/octet-stream", mask)
        };
        return ("/api/v1/order-maps", form.text("calibration", calibration));
    }
    if seed < IMAGE_CASES + OPTION_CASES {
        let form = Form::new()
            .file("photo", "p", "application/octet-stream", photo(&mut rng))
            .text("calibration", calibration)
            .file(
                "options",
                "o.json",
                "application/json",
                options_document(&mut rng),
            );
        let uri = ["/api/v1/order-maps", "/api/v1/order-maps?format=npy"][rng.random_range(0..2)];
        return (uri, form);
    }
    let form = Form::new()
        .file("photo", "p", "application/octet-stream", photo(&mut rng))
        .file(
            "spec",
            "s.json",
            "application/json",
            spec_document(&mut rng),
        );
    ("/api/v1/calibrations", form)
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn thousands_of_damaged_uploads_answer_2xx_or_a_json_4xx_and_never_a_5xx() {
    let svc = service_with(ServiceConfig {
        max_jobs: 2,
        ..ServiceConfig::default()
    })
    .await;
    let calibration: Arc<str> = import_id(&svc.app, &table("mutation target")).await.into();
    let bases: Arc<Vec<Vec<u8>>> = Arc::new(
        [
            image::ImageFormat::Png,
            image::ImageFormat::Jpeg,
            image::ImageFormat::Tiff,
        ]
        .into_iter()
        .map(base_image)
        .collect(),
    );
    let slots = Arc::new(Semaphore::new(IN_FLIGHT));
    let mut running = JoinSet::new();
    for seed in 0..IMAGE_CASES + OPTION_CASES + SPEC_CASES {
        let permit = slots.clone().acquire_owned().await.unwrap();
        let (app, calibration, bases) = (svc.app.clone(), calibration.clone(), bases.clone());
        running.spawn(async move {
            let (uri, form) = case(seed, &calibration, &bases);
            let reply: Reply = form.post(&app, uri).await;
            drop(permit);
            (seed, reply)
        });
    }
    let (mut succeeded, mut refused, mut faults) = (0, 0, Vec::new());
    while let Some(joined) = running.join_next().await {
        let (seed, reply) = joined.expect("no request task panicked");
        if reply.status.is_success() {
            succeeded += 1;
        } else if reply.status.is_client_error() {
            reply.error_message();
            refused += 1;
        } else {
            faults.push(format!(
                "seed {seed}: {} {}",
                reply.status,
                String::from_utf8_lossy(&reply.body)
            ));
        }
    }
    eprintln!(
        "{succeeded} answered 2xx, {refused} 4xx, {} 5xx",
        faults.len()
    );
    assert!(
        faults.is_empty(),
        "{} faults: {:#?}",
        faults.len(),
        &faults[..faults.len().min(10)]
    );
    // Both outcomes occur, so the damage neither always breaks nor never touches the input.
    assert!(
        succeeded > 0 && refused > 0,
        "{succeeded} succeeded, {refused} refused"
    );
    assert_eq!(
        common::get(&svc.app, "/api/v1/health").await.status,
        StatusCode::OK
    );
}
