//! Load series and finite-element comparison on rendered discs in diametral compression,
//! against the closed form of Timoshenko & Goodier (Theory of Elasticity, §41).

mod common;

use isotint_core::comparison::{compare, PointPair, Prediction, Registration};
use isotint_core::render::demo::{disc_prediction_csv, disc_registration_pairs};
use isotint_core::render::DiscField;
use isotint_core::series::{map_series, SeriesSpec};
use isotint_core::stress::{DiscInCompression, StressOpticLaw};
use isotint_core::{map_orders, CoreError, MapOptions, PixelPoint};

/// The disc of these tests: 40 mm across, 6 mm thick, f_σ = 10.5 N/mm per fringe, drawn with
/// a radius of 110 px centred in a 250 × 250 photo.
const DIAMETER_MM: f64 = 40.0;
const THICKNESS_MM: f64 = 6.0;
const FRINGE_VALUE: f64 = 10.5;
const RADIUS_PX: f64 = 110.0;
const CENTRE_PX: f64 = 125.0;
const SIZE_PX: u32 = 250;

/// The load (N) that puts order `n` at the disc's centre: N = 8P/(πDf_σ).
fn load_for_centre_order(n: f64) -> f64 {
    n * std::f64::consts::PI * DIAMETER_MM * FRINGE_VALUE / 8.0
}

fn disc_field(load_n: f64) -> DiscField {
    DiscField::new(
        PixelPoint {
            x: CENTRE_PX,
            y: CENTRE_PX,
        },
        RADIUS_PX,
        DiscInCompression::new(DIAMETER_MM, THICKNESS_MM, load_n).unwrap(),
        FRINGE_VALUE,
    )
    .unwrap()
}

/// Maps a series of the disc photographed at `true_loads` but reported at `given_loads`.
fn series(
    true_loads: &[f64],
    given_loads: &[f64],
) -> isotint_core::CoreResult<isotint_core::series::LoadSeries> {
    let table = common::rendered_daylight_table();
    let spec = SeriesSpec::new(
        true_loads.len(),
        given_loads.to_vec(),
        Some(DIAMETER_MM),
        Some(THICKNESS_MM),
    )?;
    let (_, mask) = common::rendered_photo(&disc_field(true_loads[0]), SIZE_PX, SIZE_PX, 1);
    let photos = true_loads.iter().enumerate().map(|(i, &p)| {
        Ok(common::rendered_photo(&disc_field(p), SIZE_PX, SIZE_PX, 11 + i as u64).0)
    });
    map_series(&spec, photos, &mask, &table, &MapOptions::default())
}

#[test]
fn a_rendered_disc_load_series_gives_the_material_fringe_value_within_two_percent() {
    let loads: Vec<f64> = [0.8, 1.6, 2.4]
        .iter()
        .map(|&n| load_for_centre_order(n))
        .collect();
    let s = series(&loads, &loads).unwrap();
    let f = s.fringe_value.unwrap();
    println!(
        "f_σ {f:.4} N/mm (true {FRINGE_VALUE}), slope {:.4e} fringes/N, linearity rms {:.4}, \
         nonlinear share {:.4}, {} centre pixels",
        s.slope_fringes_per_n.unwrap(),
        s.linearity_rms,
        s.nonlinear_share,
        s.centre_pixels
    );
    // source: Timoshenko & Goodier, Theory of Elasticity §41: σ1 − σ2 = 8P/(πDh) at the centre
    // of a disc in diametral compression, so f_σ = 8P/(πDN).
    assert!((f - FRINGE_VALUE).abs() <= 0.02 * FRINGE_VALUE, "f_σ {f}");
    assert!((s.stress_per_fringe_mpa.unwrap() - f / THICKNESS_MM).abs() < 1e-12);
    // The centroid of the disc's mask is its centre.
    assert!((s.centre_x - CENTRE_PX).abs() < 0.5 && (s.centre_y - CENTRE_PX).abs() < 0.5);
    // Orders scale with the load: few pixels miss the straight line by more than 0.1 fringe
    // (those near the load points, where the colours crowd).
    assert!(s.nonlinear_share < 0.1, "{s:?}");
    assert!(s.fitted_pixels as f64 > 0.8 * s.specimen_pixels as f64);

    // The same photos with the last load given 30 % too high: the orders no longer scale with
    // the loads given, and the fit says so.
    let mut wrong = loads.clone();
    wrong[2] *= 1.3;
    let bad = series(&loads, &wrong).unwrap();
    println!(
        "last load 30 % high: linearity rms {:.4}, nonlinear share {:.4}",
        bad.linearity_rms, bad.nonlinear_share
    );
    assert!(bad.linearity_rms > 2.0 * s.linearity_rms, "{bad:?}");
    assert!(
        bad.nonlinear_share > 3.0 * s.nonlinear_share.max(0.01),
        "{bad:?}"
    );
}

#[test]
fn a_series_of_photos_of_different_sizes_is_refused_naming_the_photo() {
    let table = common::rendered_daylight_table();
    let spec = SeriesSpec::new(2, vec![100.0, 200.0], None, None).unwrap();
    let (first, mask) = common::rendered_photo(&disc_field(100.0), SIZE_PX, SIZE_PX, 1);
    let (other, _) = common::rendered_photo(&disc_field(200.0), SIZE_PX, SIZE_PX - 10, 2);
    match map_series(
        &spec,
        [Ok(first), Ok(other)],
        &mask,
        &table,
        &MapOptions::default(),
    ) {
        Err(CoreError::Invalid { field, message }) => {
            assert_eq!(field, "photo");
            assert!(message.contains("photo 2"), "{message}");
        }
        other => panic!("{other:?}"),
    }
}

#[test]
fn a_deliberately_shifted_registration_gives_a_clearly_larger_difference() {
    let load = load_for_centre_order(1.5);
    let (photo, mask) = common::rendered_photo(&disc_field(load), SIZE_PX, SIZE_PX, 3);
    let map = map_orders(
        &photo,
        &common::rendered_daylight_table(),
        Some(&mask),
        &MapOptions::default(),
    )
    .unwrap();
    let law = StressOpticLaw::new(FRINGE_VALUE, THICKNESS_MM).unwrap();
    let field = disc_field(load);
    let prediction = Prediction::from_csv(&disc_prediction_csv(&field.disc)).unwrap();
    // Three pairs: centre, right-hand and top points of the disc; the model's y is up.
    let pairs = |shift_mm: f64| {
        disc_registration_pairs(&field).map(|p| PointPair {
            x_mm: p.x_mm + shift_mm,
            ..p
        })
    };
    let right = Registration::fit(&pairs(0.0)).unwrap();
    assert!(right.mirrored);
    let good = compare(&map, &law, &prediction, &right).unwrap();
    let shifted = compare(
        &map,
        &law,
        &prediction,
        &Registration::fit(&pairs(3.0)).unwrap(),
    )
    .unwrap();
    let centre_mpa = law.stress_difference_mpa(1.5);
    println!(
        "registered: mean |Δ| {:.4} MPa, rms {:.4}, {} px; shifted 3 mm: mean |Δ| {:.4} MPa, \
         rms {:.4}; centre σ1−σ2 {centre_mpa:.3} MPa",
        good.mean_abs_difference_mpa,
        good.rms_difference_mpa,
        good.compared_pixels,
        shifted.mean_abs_difference_mpa,
        shifted.rms_difference_mpa
    );
    // source: Timoshenko & Goodier §41 closed form as the prediction; the photo reads it within
    // a few per cent of the centre stress where both are known.
    assert!(good.mean_abs_difference_mpa < 0.05 * centre_mpa, "{good:?}");
    assert!(good.compared_pixels > 10_000 && good.model_coverage > 0.95);
    assert!(
        shifted.mean_abs_difference_mpa > 2.0 * good.mean_abs_difference_mpa,
        "{shifted:?}"
    );
    let npx = good.difference.iter().filter(|d| d.is_finite()).count();
    assert_eq!(npx, good.compared_pixels);
    // The largest difference is also placed in the model: the pairs put the disc's centre at
    // the model's origin with its y axis up, radius_mm / radius_px mm per pixel.
    let mm_per_px = 0.5 * field.disc.diameter_mm / field.radius_px;
    let expected = (
        (good.max_x - field.centre.x) * mm_per_px,
        (field.centre.y - good.max_y) * mm_per_px,
    );
    assert!(
        (good.max_x_mm - expected.0).abs() < 1e-6 && (good.max_y_mm - expected.1).abs() < 1e-6,
        "{:?} against {expected:?}",
        (good.max_x_mm, good.max_y_mm)
    );

    // A registration that puts the model far from the specimen is refused naming the pairs.
    match compare(
        &map,
        &law,
        &prediction,
        &Registration::fit(&pairs(500.0)).unwrap(),
    ) {
        Err(CoreError::Invalid { field, .. }) => assert_eq!(field, "pairs"),
        other => panic!("{other:?}"),
    }
}
