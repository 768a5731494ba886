//! Accuracy of the whole chain — beam photo → calibration table → order map of another part —
//! on photos rendered from closed-form fields, over light sources, cameras, noise, JPEG,
//! exposure drift, vignetting and quarter-wave plate mismatch.
//!
//! Scored where the true order is ≤ 4 and the pixel lies ≥ 3 px inside the specimen mask.
//! Targets: mean absolute error ≤ 0.02 fringe, share of pixels off by more than 0.5 fringe
//! ≤ 0.1 %, coverage (valued / scored) ≥ 99 %.
//! Ground truth: disc in diametral compression (Timoshenko & Goodier closed form) and plate
//! with a circular hole under tension (Kirsch solution), via `render::fields`.

use isotint_core::beam::{calibrate_beam, BeamSpec, EdgeLoad};
use isotint_core::render::camera::CameraModel;
use isotint_core::render::effects::{develop, PhotoEffects, PhotoEncoding};
use isotint_core::render::fields::{BendingBeamField, DiscField, HoleField, OrderField};
use isotint_core::render::light::LightSource;
use isotint_core::render::polariscope::QuarterWavePlates;
use isotint_core::render::scene::render_scene;
use isotint_core::render::{RenderSetup, Renderer};
use isotint_core::stress::{DiscInCompression, PlateWithHole, StressOpticLaw};
use isotint_core::{
    map_orders, CalibrationMetadata, DecodeLimits, MapOptions, Photo, PixelPoint, PixelRect,
};

const FRINGE_VALUE: f64 = 11.0; // N/mm per fringe (invented material)
const THICKNESS: f64 = 6.0; // mm

#[derive(Clone, Copy)]
struct Conditions {
    light: LightSource,
    camera: CameraModel,
    plates_design_nm: Option<f64>,
    noise: f32,
    encoding: PhotoEncoding,
    /// Exposure of the specimen photo relative to the beam photo.
    specimen_exposure: f32,
    /// Corner brightness of the specimen photo (vignetting).
    corner_brightness: f32,
}

const BASE: Conditions = Conditions {
    light: LightSource::Daylight,
    camera: CameraModel::Colorimetric,
    plates_design_nm: None,
    noise: 0.0,
    encoding: PhotoEncoding::Png8,
    specimen_exposure: 1.0,
    corner_brightness: 1.0,
};

struct Score {
    mae: f64,
    gross_share: f64,
    coverage: f64,
    scored: usize,
}

fn photo(
    field: &dyn OrderField,
    renderer: &Renderer,
    size: (u32, u32),
    fx: &PhotoEffects,
    encoding: PhotoEncoding,
) -> (Photo, Vec<f32>, isotint_core::Mask) {
    let scene = render_scene(field, renderer, size.0, size.1, 3).unwrap();
    let bytes = develop(&scene.image, fx, encoding).unwrap();
    (
        Photo::decode(&bytes, &DecodeLimits::default()).unwrap(),
        scene.true_order,
        scene.mask,
    )
}

fn run(c: Conditions, specimen: &dyn OrderField, size: (u32, u32)) -> Score {
    let plates = match c.plates_design_nm {
        None => QuarterWavePlates::Ideal,
        Some(nm) => QuarterWavePlates::designed(nm).unwrap(),
    };
    let renderer = Renderer::new(RenderSetup {
        light: c.light,
        camera: c.camera,
        plates,
        exposure: 0.9,
    })
    .unwrap();
    let beam_fx = PhotoEffects {
        blur_sigma_px: 0.6,
        noise_sigma_codes: c.noise,
        seed: 1,
        ..PhotoEffects::default()
    };
    let beam = BendingBeamField::new(
        PixelRect::new(20.0, 80.0, 980.0, 320.0).unwrap(),
        (50.0, 950.0),
        (280.0, 720.0),
        4.5,
    )
    .unwrap();
    let (beam_photo, _, _) = photo(&beam, &renderer, (1000, 400), &beam_fx, c.encoding);
    let zone = beam.constant_moment_zone();
    let spec = BeamSpec {
        region: PixelRect::new(zone.left + 20.0, zone.top, zone.right - 20.0, zone.bottom).unwrap(),
        load: EdgeLoad::EdgeOrder(4.5),
        refine_edges: false,
        order_step: 0.01,
        metadata: CalibrationMetadata {
            name: "accuracy beam".into(),
            ..Default::default()
        },
    };
    let table = calibrate_beam(&beam_photo, &spec).unwrap().table;

    let fx = PhotoEffects {
        blur_sigma_px: 0.6,
        noise_sigma_codes: c.noise,
        exposure: c.specimen_exposure,
        corner_brightness: c.corner_brightness,
        seed: 2,
    };
    let (specimen_photo, truth, mask) = photo(specimen, &renderer, size, &fx, c.encoding);
    let map = map_orders(&specimen_photo, &table, Some(&mask), &MapOptions::default()).unwrap();
    let scored_mask = mask.eroded(3);
    let (mut scored, mut valued, mut sum, mut gross) = (0usize, 0usize, 0.0, 0usize);
    for (i, t) in truth.iter().enumerate() {
        if !scored_mask.as_slice()[i] || !t.is_finite() || *t > 4.0 {
            continue;
        }
        scored += 1;
        let o = map.order[i];
        if o.is_finite() {
            valued += 1;
            let e = f64::from((o - t).abs());
            sum += e;
            if e > 0.5 {
                gross += 1;
            }
        }
    }
    Score {
        mae: sum / valued.max(1) as f64,
        gross_share: gross as f64 / scored.max(1) as f64,
        coverage: valued as f64 / scored.max(1) as f64,
        scored,
    }
}

fn disc() -> DiscField {
    DiscField::new(
        PixelPoint { x: 180.0, y: 180.0 },
        160.0,
        DiscInCompression::new(40.0, THICKNESS, 700.0).unwrap(),
        FRINGE_VALUE,
    )
    .unwrap()
}

fn plate() -> HoleField {
    let law = StressOpticLaw::new(FRINGE_VALUE, THICKNESS).unwrap();
    HoleField::new(
        PixelPoint { x: 200.0, y: 150.0 },
        45.0,
        PlateWithHole::new(6.0, law.stress_difference_mpa(1.2)).unwrap(),
        law,
    )
    .unwrap()
}

fn check(name: &str, c: Conditions) {
    for (what, score) in [
        ("disc", run(c, &disc(), (360, 360))),
        ("plate", run(c, &plate(), (400, 300))),
    ] {
        println!(
            "{name:<28} {what:<5} scored {:>6}  MAE {:.4}  >0.5 {:.4}%  coverage {:.2}%",
            score.scored,
            score.mae,
            100.0 * score.gross_share,
            100.0 * score.coverage
        );
        assert!(
            score.scored > 10_000,
            "{name} {what}: too few scored pixels"
        );
        assert!(score.mae <= 0.02, "{name} {what}: MAE {}", score.mae);
        assert!(
            score.gross_share <= 0.001,
            "{name} {what}: gross share {}",
            score.gross_share
        );
        assert!(
            score.coverage >= 0.99,
            "{name} {what}: coverage {}",
            score.coverage
        );
    }
}

#[test]
fn daylight_colorimetric_camera_clean_png_meets_the_accuracy_targets() {
    check("daylight clean", BASE);
}

#[test]
fn halogen_light_with_sensor_noise_meets_the_accuracy_targets() {
    check(
        "halogen noisy",
        Conditions {
            light: LightSource::Halogen,
            camera: CameraModel::Sensor,
            noise: 2.0,
            ..BASE
        },
    );
}

#[test]
fn fluorescent_tube_light_meets_the_accuracy_targets() {
    check(
        "tri-band fluorescent",
        Conditions {
            light: LightSource::TriBand,
            noise: 1.0,
            ..BASE
        },
    );
}

#[test]
fn jpeg_quality_85_with_chroma_subsampling_meets_the_accuracy_targets() {
    check(
        "jpeg 85",
        Conditions {
            camera: CameraModel::Sensor,
            noise: 1.0,
            encoding: PhotoEncoding::Jpeg { quality: 85 },
            ..BASE
        },
    );
}

#[test]
fn a_specimen_photo_twenty_percent_darker_meets_the_accuracy_targets() {
    check(
        "20% darker",
        Conditions {
            specimen_exposure: 0.8,
            noise: 1.0,
            ..BASE
        },
    );
}

#[test]
fn vignetting_to_eighty_percent_in_the_corners_meets_the_accuracy_targets() {
    check(
        "vignetting",
        Conditions {
            corner_brightness: 0.8,
            noise: 1.0,
            ..BASE
        },
    );
}

#[test]
fn quarter_wave_plates_exact_only_at_520_nm_meet_the_accuracy_targets() {
    check(
        "plates 520 nm",
        Conditions {
            plates_design_nm: Some(520.0),
            noise: 1.0,
            ..BASE
        },
    );
}
