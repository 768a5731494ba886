//! Rendered scenes, photo effects, encodings, rendered tables and the demo, on tiny images with
//! exact answers where possible.

use std::f64::consts::PI;

use approx::assert_relative_eq;
use isotint_core::calibration::{CalibrationMetadata, CalibrationTable, TableSource};
use isotint_core::colour::{DecodeLimits, Photo};
use isotint_core::geometry::{Mask, PixelPoint, PixelRect};
use isotint_core::render::demo::DemoScenario;
use isotint_core::render::effects::{apply_optics, encode_mask_png};
use isotint_core::render::{
    check_order_limit, develop, develop_srgb8, load_preview, render_light_field, render_scene,
    rendered_table, BendingBeamField, CameraModel, DiscField, HoleField, LightSource, LinearImage,
    OrderField, PhotoEffects, PhotoEncoding, QuarterWavePlates, RenderSetup, Renderer,
    UniformField, LIGHT_FIELD_RIM_PX, LIGHT_FIELD_RIM_TRANSMISSION,
};
use isotint_core::stress::{DiscInCompression, PlateWithHole, StressOpticLaw};
use palette::LinSrgb;

fn small_beam() -> BendingBeamField {
    // Beam 16 px long, 8 px deep (edges at y = 1 and 9, mid-line y = 5); loads at x = 6 and 14.
    BendingBeamField::new(
        PixelRect::new(2.0, 1.0, 18.0, 9.0).unwrap(),
        (2.0, 18.0),
        (6.0, 14.0),
        2.0,
    )
    .unwrap()
}

#[test]
fn beam_order_is_linear_through_the_depth_and_zero_on_the_mid_line() {
    let beam = small_beam();
    let renderer = Renderer::new(RenderSetup::default()).unwrap();
    let scene = render_scene(&beam, &renderer, 20, 10, 1).unwrap();
    for y in 1..9u32 {
        let expected = 2.0 * ((f64::from(y) + 0.5 - 5.0) / 4.0).abs();
        for x in 6..14u32 {
            let got = scene.true_order[(y * 20 + x) as usize];
            assert_relative_eq!(f64::from(got), expected, epsilon = 1e-6);
        }
    }
    let mid = beam.sample(10.0, 5.0).unwrap();
    assert_eq!(mid.order, 0.0);
    let edge = beam.sample(10.0, 1.0).unwrap();
    assert_relative_eq!(edge.order, 2.0);
    // Inside the zone σ1 runs along the beam on the tension (lower) side: θ = 0.
    assert_eq!(beam.sample(10.0, 8.0).unwrap().isoclinic_rad, 0.0);
    assert_eq!(
        beam.constant_moment_zone(),
        PixelRect::new(6.0, 1.0, 14.0, 9.0).unwrap()
    );
}

#[test]
fn the_background_is_black_outside_the_mask_and_not_zero_order() {
    let beam = small_beam();
    let renderer = Renderer::new(RenderSetup::default()).unwrap();
    let scene = render_scene(&beam, &renderer, 20, 10, 3).unwrap();
    for (x, y) in [(0u32, 0u32), (19, 9), (1, 5), (10, 9)] {
        let i = (y * 20 + x) as usize;
        assert_eq!(scene.image.pixels[i], LinSrgb::new(0.0, 0.0, 0.0));
        assert!(scene.true_order[i].is_nan());
        assert!(!scene.mask.contains(x, y));
    }
    assert!(scene.mask.contains(2, 1) && scene.mask.contains(17, 8));
    let specimen = scene.mask.as_slice().iter().filter(|m| **m).count();
    assert_eq!(specimen, 16 * 8);
}

#[test]
fn in_light_field_the_background_is_white_and_the_outline_a_dark_rim_around_an_unloaded_end() {
    // Beam 40 px long and 16 deep (x 5–45, y 7–23) in a 50 × 30 photo; supports at x = 15 and
    // 35, so its ends x < 15 carry no moment: zero order.
    let beam = BendingBeamField::new(
        PixelRect::new(5.0, 7.0, 45.0, 23.0).unwrap(),
        (15.0, 35.0),
        (20.0, 30.0),
        2.0,
    )
    .unwrap();
    let renderer = Renderer::new(RenderSetup {
        exposure: 0.9,
        ..Default::default()
    })
    .unwrap();
    let dark = render_scene(&beam, &renderer, 50, 30, 1).unwrap();
    let light = render_light_field(&beam, &renderer, 50, 30, 1).unwrap();
    let at = |x: u32, y: u32| light.pixels[(y * 50 + x) as usize];
    let white = LinSrgb::new(0.9f32, 0.9, 0.9);
    // common practice, no source: with no specimen nothing is retarded, and the light field
    // passes everything the polariser passes.
    assert_eq!(at(0, 0), white);
    assert_eq!(at(49, 29), white);
    // The unloaded end, more than the rim (LIGHT_FIELD_RIM_PX = 3) inside the edge: zero
    // order, as white as the background, and black in dark field.
    assert_eq!(at(10, 15), white);
    assert_eq!(dark.image.pixels[15 * 50 + 10], LinSrgb::new(0.0, 0.0, 0.0));
    // The rim: specimen pixels within LIGHT_FIELD_RIM_PX of the edge pass the set share of
    // their light-field colour; the first pixel past it does not.
    for (x, y) in [(5u32, 15u32), (7, 15), (10, 7), (10, 9), (25, 22)] {
        let s = beam.sample(f64::from(x) + 0.5, f64::from(y) + 0.5).unwrap();
        let own = renderer.linear_light_field(s.order, s.fast_axis_rad());
        assert_relative_eq!(at(x, y).red, LIGHT_FIELD_RIM_TRANSMISSION * own.red);
        assert_relative_eq!(at(x, y).blue, LIGHT_FIELD_RIM_TRANSMISSION * own.blue);
    }
    assert_eq!(at(5 + LIGHT_FIELD_RIM_PX as u32, 15), white);
    assert_eq!(at(10, 7 + LIGHT_FIELD_RIM_PX as u32), white);
}

#[test]
fn a_specimen_filling_the_light_field_photo_has_no_rim_along_the_photo_border() {
    let field = UniformField {
        area: PixelRect::new(0.0, 0.0, 12.0, 9.0).unwrap(),
        order: 0.8,
        isoclinic_rad: 0.4,
    };
    let renderer = Renderer::new(RenderSetup::default()).unwrap();
    let light = render_light_field(&field, &renderer, 12, 9, 2).unwrap();
    let own = renderer.linear_light_field(0.8, 0.4);
    // Its light-field colour is the complement of its dark-field one (common practice, no
    // source), and no pixel is darkened.
    let dark = renderer.linear(0.8, 0.4);
    assert_relative_eq!(own.green + dark.green, 1.0, epsilon = 1e-6);
    for p in &light.pixels {
        assert_relative_eq!(p.red, own.red, epsilon = 1e-6);
        assert_relative_eq!(p.green, own.green, epsilon = 1e-6);
    }
}

#[test]
fn supersampling_averages_the_samples_inside_each_pixel() {
    // The beam's top edge at y = 1.5 cuts pixel row 1 in half: with 2×2 samples, the two lower
    // samples are on the beam and the two upper ones are black.
    let beam = BendingBeamField::new(
        PixelRect::new(0.0, 1.5, 8.0, 5.5).unwrap(),
        (0.0, 8.0),
        (2.0, 6.0),
        3.0,
    )
    .unwrap();
    let renderer = Renderer::new(RenderSetup::default()).unwrap();
    let scene = render_scene(&beam, &renderer, 8, 6, 2).unwrap();
    let (x, y) = (4u32, 1u32);
    let mut expected = LinSrgb::new(0.0f32, 0.0, 0.0);
    for (sx, sy) in [(4.25, 1.75), (4.75, 1.75)] {
        let s = beam.sample(sx, sy).unwrap();
        expected += renderer.linear(s.order, s.fast_axis_rad());
    }
    expected *= 0.25;
    let got = scene.image.pixels[(y * 8 + x) as usize];
    assert_relative_eq!(got.red, expected.red, epsilon = 1e-6);
    assert_relative_eq!(got.green, expected.green, epsilon = 1e-6);
    assert_relative_eq!(got.blue, expected.blue, epsilon = 1e-6);
    // The pixel centre (4.5, 1.5) lies on the edge, so it belongs to the specimen.
    assert!(scene.mask.contains(x, y));
}

#[test]
fn disc_field_centre_order_matches_timoshenko() {
    // source: Timoshenko & Goodier — σ1 − σ2 = 8P/(πDh) at the centre, so N = 8P/(πD·f_σ).
    // Hand-worked: P = 600 N, D = 50 mm, f_σ = 10.5 N/mm → 4800/(π·525) = 2.9104.
    let disc = DiscField::new(
        PixelPoint { x: 10.5, y: 10.5 },
        10.0,
        DiscInCompression::new(50.0, 6.0, 600.0).unwrap(),
        10.5,
    )
    .unwrap();
    let renderer = Renderer::new(RenderSetup::default()).unwrap();
    let scene = render_scene(&disc, &renderer, 21, 21, 3).unwrap();
    assert_relative_eq!(
        f64::from(scene.true_order[10 * 21 + 10]),
        2.9104,
        max_relative = 1e-4
    );
    // Disc interior only: corners are off the specimen.
    assert!(!scene.mask.contains(0, 0) && scene.mask.contains(10, 10));
    // At the centre σ1 is horizontal (σx tension, σy compression).
    assert_relative_eq!(
        disc.sample(10.5, 10.5).unwrap().isoclinic_rad,
        0.0,
        epsilon = 1e-12
    );
}

fn hole_field() -> HoleField {
    let law = StressOpticLaw::new(10.5, 6.0).unwrap();
    HoleField::new(
        PixelPoint { x: 150.0, y: 120.0 },
        100.0,
        PlateWithHole::new(7.0, law.stress_difference_mpa(1.0)).unwrap(),
        law,
    )
    .unwrap()
}

#[test]
fn plate_hole_is_black_and_the_order_check_finds_three_times_remote_beside_it() {
    // source: Kirsch, K_t = 3 beside the hole (remote order 1 → order 3 at the hole edge).
    let field = hole_field();
    let renderer = Renderer::new(RenderSetup::default()).unwrap();
    let scene = render_scene(&field, &renderer, 300, 240, 1).unwrap();
    let centre = 120 * 300 + 150;
    assert_eq!(scene.image.pixels[centre], LinSrgb::new(0.0, 0.0, 0.0));
    assert!(scene.true_order[centre].is_nan());
    assert!(scene.mask.contains(0, 0));

    // The pixel centres nearest the hole edge lie about half a pixel (r/a ≈ 1.005) outside it.
    let check = check_order_limit(&field, 300, 240, 2.5).unwrap();
    assert!(!check.within_limit);
    assert!(
        check.max_order > 2.95 && check.max_order <= 3.0,
        "{check:?}"
    );
    let at = check.max_at.unwrap();
    let (dx, dy) = (at.x - 150.0, at.y - 120.0);
    assert!(
        dx.abs() > 95.0 && (dx.hypot(dy) - 100.0).abs() < 1.0,
        "{at:?}"
    );
    assert!(
        check_order_limit(&field, 300, 240, 3.0)
            .unwrap()
            .within_limit
    );
}

#[test]
fn a_rendered_table_is_valid_starts_black_and_names_its_setup() {
    let table = rendered_table(
        LightSource::TriBand,
        CameraModel::Sensor,
        QuarterWavePlates::designed(560.0).unwrap(),
        3.0,
        0.01,
        CalibrationMetadata {
            name: "tri-band theory".into(),
            ..Default::default()
        },
    )
    .unwrap();
    assert_eq!(table.entries.len(), 301);
    assert_relative_eq!(table.max_order(), 3.0, epsilon = 1e-9);
    assert!(table.entries[0].lab[0].abs() < 1e-3);
    assert_eq!(
        table.source,
        TableSource::Rendered {
            light: "narrow tri-band fluorescent tube (CIE F11)".into(),
            camera: "typical colour sensor (Gaussian RGB channels)".into(),
            plate_design_nm: Some(560.0)
        }
    );
    // Mismatched plates: the colour depends on the isoclinic, which shows as spread.
    assert!(table.entries[60].spread.iter().any(|s| *s > 0.1));
    let back = CalibrationTable::from_json(table.to_json().as_bytes()).unwrap();
    for (a, b) in back.entries.iter().zip(&table.entries) {
        assert!((a.order - b.order).abs() < 1e-12);
        assert!(a.lab.iter().zip(&b.lab).all(|(x, y)| (x - y).abs() < 1e-4));
    }
    assert_eq!(back.source, table.source);
    assert!(rendered_table(
        LightSource::Daylight,
        CameraModel::Colorimetric,
        QuarterWavePlates::Ideal,
        20.0,
        0.01,
        CalibrationMetadata {
            name: "x".into(),
            ..Default::default()
        },
    )
    .is_err());
}

#[test]
fn a_load_preview_shows_the_renderer_colours_from_black_upwards() {
    let renderer = Renderer::new(RenderSetup::default()).unwrap();
    let swatches = load_preview(&renderer, 0.0, 2.0, 5).unwrap();
    assert_eq!(swatches.len(), 5);
    assert_eq!(swatches[2].order, 1.0);
    assert_eq!(swatches[0].srgb, palette::Srgb::new(0u8, 0, 0));
    assert_eq!(swatches[3].srgb, renderer.srgb8(1.5, 0.0));
    assert!(load_preview(&renderer, 0.0, 2.0, 1).is_err());
}

fn flat(width: u32, height: u32, v: f32) -> LinearImage {
    LinearImage {
        width,
        height,
        pixels: vec![LinSrgb::new(v, v, v); (width * height) as usize],
    }
}

#[test]
fn vignetting_darkens_the_corners_to_the_given_brightness() {
    let fx = PhotoEffects {
        corner_brightness: 0.8,
        ..Default::default()
    };
    let out = apply_optics(&flat(201, 101, 1.0), &fx).unwrap();
    let centre = out.pixels[50 * 201 + 100].red;
    let corner = out.pixels[0].red;
    assert_relative_eq!(centre, 1.0, epsilon = 1e-4);
    // The corner pixel's centre sits just inside ρ = 1.
    assert!((corner - 0.8).abs() < 0.005, "{corner}");
}

#[test]
fn blur_and_exposure_keep_a_flat_field_flat() {
    let fx = PhotoEffects {
        blur_sigma_px: 1.5,
        exposure: 0.5,
        ..Default::default()
    };
    let out = apply_optics(&flat(30, 20, 0.6), &fx).unwrap();
    for p in &out.pixels {
        assert!(
            (p.red - 0.3).abs() < 1e-4 && (p.blue - 0.3).abs() < 1e-4,
            "{p:?}"
        );
    }
}

#[test]
fn sensor_noise_is_reproducible_from_its_seed() {
    let image = flat(40, 30, 0.2);
    let fx = PhotoEffects {
        noise_sigma_codes: 2.0,
        seed: 11,
        ..Default::default()
    };
    let a = develop_srgb8(&image, &fx).unwrap();
    let b = develop_srgb8(&image, &fx).unwrap();
    let c = develop_srgb8(&image, &PhotoEffects { seed: 12, ..fx }).unwrap();
    assert_eq!(a, b);
    assert_ne!(a, c);
    // Mean stays at the noiseless code value; spread is about σ = 2 codes.
    let clean =
        f64::from(palette::Srgb::<f32>::from_linear(LinSrgb::new(0.2f32, 0.2, 0.2)).green) * 255.0;
    let values: Vec<f64> = a.iter().map(|p| f64::from(p.green)).collect();
    let mean = values.iter().sum::<f64>() / values.len() as f64;
    let sd = (values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / values.len() as f64).sqrt();
    assert!((mean - clean).abs() < 0.3, "{mean} vs {clean}");
    assert!((sd - 2.0).abs() < 0.3, "{sd}");
}

#[test]
fn jpeg_output_uses_four_two_zero_chroma_subsampling() {
    // source: ITU-T T.81 (JPEG) — the SOF0 segment lists per component H·16+V sampling factors;
    // 4:2:0 is Y = 0x22 with Cb = Cr = 0x11.
    let bytes = develop(
        &flat(32, 16, 0.4),
        &PhotoEffects::default(),
        PhotoEncoding::Jpeg { quality: 90 },
    )
    .unwrap();
    let sof = bytes
        .windows(2)
        .position(|w| w == [0xFF, 0xC0])
        .expect("baseline SOF0 marker");
    let components = bytes[sof + 9];
    assert_eq!(components, 3);
    let factors: Vec<u8> = (0..3).map(|c| bytes[sof + 11 + 3 * c]).collect();
    assert_eq!(factors, vec![0x22, 0x11, 0x11]);
    let photo = Photo::decode(&bytes, &DecodeLimits::default()).unwrap();
    assert_eq!((photo.width(), photo.height()), (32, 16));
}

#[test]
fn png_output_keeps_eight_or_sixteen_bits_and_masks_decode_back() {
    let image = flat(9, 7, 0.5);
    let eight = develop(&image, &PhotoEffects::default(), PhotoEncoding::Png8).unwrap();
    let sixteen = develop(&image, &PhotoEffects::default(), PhotoEncoding::Png16).unwrap();
    let limits = DecodeLimits::default();
    assert_eq!(Photo::decode(&eight, &limits).unwrap().bit_depth(), 8);
    let p16 = Photo::decode(&sixteen, &limits).unwrap();
    assert_eq!(p16.bit_depth(), 16);
    assert_relative_eq!(p16.linear(0).green, 0.5, epsilon = 1e-4);
    let mask = Mask::new(3, 2, vec![true, false, true, false, false, true]).unwrap();
    assert_eq!(
        Mask::decode(&encode_mask_png(&mask).unwrap(), &limits).unwrap(),
        mask
    );
}

#[test]
fn a_1000_by_400_beam_renders_with_supersampling_in_reasonable_time() {
    // The budget is "well under a second" in release builds; tests run less optimised, and on
    // a shared machine, so this only guards against a gross regression.
    let renderer = Renderer::new(RenderSetup {
        plates: QuarterWavePlates::designed(560.0).unwrap(),
        ..Default::default()
    })
    .unwrap();
    let beam = BendingBeamField::new(
        PixelRect::new(40.0, 80.0, 960.0, 320.0).unwrap(),
        (70.0, 930.0),
        (280.0, 720.0),
        4.5,
    )
    .unwrap();
    let start = std::time::Instant::now();
    let scene = render_scene(&beam, &renderer, 1000, 400, 3).unwrap();
    assert!(
        start.elapsed().as_secs_f64() < 10.0,
        "{:?}",
        start.elapsed()
    );
    assert_eq!(scene.image.pixels.len(), 400_000);
}

#[test]
fn the_demo_scenario_ships_photos_masks_true_orders_and_a_description() {
    let demo = DemoScenario::birchfield().unwrap();
    let names: Vec<&str> = demo.files.iter().map(|f| f.name.as_str()).collect();
    for expected in [
        "beam.png",
        "beam.jpg",
        "beam-mask.png",
        "beam-true-order.npy",
        "disc.png",
        "disc-mask.png",
        "disc-prediction.csv",
        "disc-light-field.png",
        "plate-hole.png",
        "plate-hole-mask.png",
        "scenario.json",
    ] {
        assert!(
            names.contains(&expected),
            "{expected} missing from {names:?}"
        );
    }
    let limits = DecodeLimits::default();
    let file = |name: &str| &demo.files.iter().find(|f| f.name == name).unwrap().bytes;
    let beam = Photo::decode(file("beam.png"), &limits).unwrap();
    assert_eq!((beam.width(), beam.height()), (1000, 400));
    assert_eq!(
        Photo::decode(file("disc.png"), &limits)
            .unwrap()
            .bit_depth(),
        16
    );
    // The light-field photo is taken from the same place: the disc photo's size.
    let light = Photo::decode(file("disc-light-field.png"), &limits).unwrap();
    assert_eq!((light.width(), light.height()), (600, 600));
    let zone = demo.description.beam.constant_moment_zone;
    assert_eq!((zone.width(), zone.height()), (440.0, 240.0));
    assert_eq!(demo.description.beam.field.edge_order, 4.5);
    // source: pure bending, M = N·f_σ·d²/6 = 4.5·10.5·24²/6 = 4536 N·mm (hand-worked).
    assert_relative_eq!(
        demo.description.beam.moment_n_mm,
        4536.0,
        max_relative = 1e-9
    );
    // Beam mask: exactly the beam rectangle 920 × 240 px.
    let mask = Mask::decode(file("beam-mask.png"), &limits).unwrap();
    assert_eq!(mask.as_slice().iter().filter(|m| **m).count(), 920 * 240);
    let json: serde_json::Value = serde_json::from_slice(file("scenario.json")).unwrap();
    assert_eq!(json["beam"]["field"]["edge_order"], 4.5);
    // The scenario file names its light and camera in words, which read back as what drew it.
    assert_eq!(json["setup"]["light"], LightSource::Halogen.description());
    assert_eq!(json["setup"]["camera"], CameraModel::Sensor.description());
    let centre = demo.description.disc.centre_order;
    assert_relative_eq!(
        centre,
        8.0 * 600.0 / (PI * 50.0 * 10.5),
        max_relative = 1e-9
    );
}
