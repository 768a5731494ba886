//! Shared helpers of the core's integration tests: a made-up colour sequence with exact
//! answers (not physical) and photos painted from true-order fields.
#![allow(dead_code)] // each test file uses a different subset

use isotint_core::calibration::{CalibrationMetadata, TableEntry, TableSource};
use isotint_core::colour::{lab_from_linear, linear_from_lab, srgb8_from_lab, Lab};
use isotint_core::{CalibrationTable, Photo};
use palette::{LinSrgb, Srgb};

/// A made-up colour sequence that repeats its hues every fringe while fading, like
/// isochromatics do (not physical; exact answers only).
pub fn spiral(order: f64) -> Lab {
    let fade = (-0.25 * order).exp();
    let angle = 2.0 * std::f64::consts::PI * order;
    let lightness = 25.0 + 45.0 * (1.0 - (-2.0 * order).exp());
    Lab::new(
        lightness as f32,
        (38.0 * fade * angle.cos()) as f32,
        (38.0 * fade * angle.sin()) as f32,
    )
}

pub fn table(max_order: f64) -> CalibrationTable {
    let step = 0.01;
    let entries = (0..=(max_order / step).round() as usize)
        .map(|i| {
            let order = i as f64 * step;
            let c = spiral(order);
            TableEntry {
                order,
                lab: [c.l, c.a, c.b],
                spread: [0.3; 3],
                samples: 100,
            }
        })
        .collect();
    CalibrationTable::new(
        CalibrationMetadata {
            name: "spiral".into(),
            ..Default::default()
        },
        step,
        TableSource::Rendered {
            light: "synthetic".into(),
            camera: "synthetic".into(),
            plate_design_nm: Some(575.0),
        },
        entries,
    )
    .unwrap()
}

/// Paints a photo from a true-order field (NaN = black background), with a brightness factor
/// on linear light.
pub fn paint(width: u32, height: u32, truth: &[f64], brightness: f32) -> Photo {
    let pixels = truth
        .iter()
        .map(|n| {
            if n.is_nan() {
                return Srgb::new(0, 0, 0);
            }
            let lin = linear_from_lab(spiral(*n));
            srgb8_from_lab(lab_from_linear(LinSrgb::new(
                lin.red * brightness,
                lin.green * brightness,
                lin.blue * brightness,
            )))
        })
        .collect();
    Photo::from_srgb8(width, height, pixels).unwrap()
}

/// A photo of `field` (`width` × `height`) rendered under daylight with light blur and noise,
/// as an 8-bit PNG decoded again, and its mask (pixel centres on the specimen).
pub fn rendered_photo(
    field: &dyn isotint_core::render::OrderField,
    width: u32,
    height: u32,
    seed: u64,
) -> (Photo, isotint_core::Mask) {
    use isotint_core::render::effects::{develop, PhotoEffects, PhotoEncoding};
    use isotint_core::render::{render_scene, RenderSetup, Renderer};
    let renderer = Renderer::new(RenderSetup::default()).unwrap();
    let scene = render_scene(field, &renderer, width, height, 2).unwrap();
    let effects = PhotoEffects {
        blur_sigma_px: 0.6,
        noise_sigma_codes: 1.0,
        seed,
        ..PhotoEffects::default()
    };
    let png = develop(&scene.image, &effects, PhotoEncoding::Png8).unwrap();
    let photo = Photo::decode(&png, &isotint_core::DecodeLimits::default()).unwrap();
    (photo, scene.mask)
}

/// A table rendered under the same light as [`rendered_photo`], up to 4 fringes.
pub fn rendered_daylight_table() -> CalibrationTable {
    use isotint_core::render::{rendered_table, CameraModel, LightSource, QuarterWavePlates};
    rendered_table(
        LightSource::Daylight,
        CameraModel::Colorimetric,
        QuarterWavePlates::Ideal,
        4.0,
        0.01,
        CalibrationMetadata {
            name: "rendered daylight table".into(),
            ..Default::default()
        },
    )
    .unwrap()
}
