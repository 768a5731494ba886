//! The order solver on tiny hand-built photos whose exact answer is known: each pixel is
//! painted with the table colour of its true order.

use isotint_core::calibration::{CalibrationMetadata, TableEntry, TableSource};
use isotint_core::colour::{lab_from_linear, linear_from_lab, srgb8_from_lab, Lab};
use isotint_core::{map_orders, CalibrationTable, MapOptions, Mask, OrderHint, PixelFlags, PixelPoint, Photo};
use palette::{LinSrgb, Srgb};

/// A made-up colour sequence that repeats its hues every fringe while fading, like
/// isochromatics do (not physical; exact answers only).
fn spiral(order: f64) -> Lab {
    let fade = (-0.25 * order).exp();
    let angle = 2.0 * std::f64::consts::PI * order;
    let lightness = 25.0 + 45.0 * (1.0 - (-2.0 * order).exp());
    Lab::new(
        lightness as f32,
        (38.0 * fade * angle.cos()) as f32,
        (38.0 * fade * angle.sin()) as f32,
    )
}

fn table(max_order: f64) -> CalibrationTable {
    let step = 0.01;
    let entries = (0..=(max_order / step).round() as usize)
        .map(|i| {
            let order = i as f64 * step;
            let c = spiral(order);
            TableEntry { order, lab: [c.l, c.a, c.b], spread: [0.3; 3], samples: 100 }
        })
        .collect();
    CalibrationTable::new(
        CalibrationMetadata { name: "spiral".into(), ..Default::default() },
        step,
        TableSource::Rendered { light: "synthetic".into(), camera: "synthetic".into(), plate_design_nm: 575.0 },
        entries,
    )
    .unwrap()
}

/// Paints a photo from a true-order field (NaN = black background), with a brightness factor
/// on linear light.
fn paint(width: u32, height: u32, truth: &[f64], brightness: f32) -> Photo {
    let pixels = truth
        .iter()
        .map(|n| {
            if n.is_nan() {
                return Srgb::new(0, 0, 0);
            }
            let lin = linear_from_lab(spiral(*n));
            srgb8_from_lab(lab_from_linear(LinSrgb::new(lin.red * brightness, lin.green * brightness, lin.blue * brightness)))
        })
        .collect();
    Photo::from_srgb8(width, height, pixels).unwrap()
}

fn ramp(width: u32, height: u32, top: f64) -> Vec<f64> {
    (0..height)
        .flat_map(|_| (0..width).map(move |x| top * (f64::from(x) + 0.5) / f64::from(width)))
        .collect()
}

fn errors(map: &isotint_core::OrderMap, truth: &[f64]) -> (f64, usize, usize) {
    let (mut sum, mut n, mut gross) = (0.0, 0, 0);
    for (o, t) in map.order.iter().zip(truth) {
        if t.is_nan() || o.is_nan() {
            continue;
        }
        let e = (f64::from(*o) - t).abs();
        sum += e;
        n += 1;
        if e > 0.5 {
            gross += 1;
        }
    }
    (sum / n.max(1) as f64, n, gross)
}

#[test]
fn a_painted_ramp_is_recovered_to_a_hundredth_of_a_fringe() {
    let truth = ramp(240, 24, 3.6);
    let map = map_orders(&paint(240, 24, &truth, 1.0), &table(4.0), None, &MapOptions::default()).unwrap();
    let (mae, n, gross) = errors(&map, &truth);
    assert!(mae < 0.01, "mean absolute error {mae}");
    assert_eq!(gross, 0);
    assert!(n as f64 > 0.98 * truth.len() as f64, "only {n} pixels valued");
}

#[test]
fn pixels_outside_the_mask_get_no_value_and_the_outside_flag() {
    let (w, h) = (60u32, 20u32);
    let truth = ramp(w, h, 2.0);
    let inside: Vec<bool> = (0..w * h).map(|i| i % w >= 10).collect();
    let mask = Mask::new(w, h, inside).unwrap();
    let map = map_orders(&paint(w, h, &truth, 1.0), &table(3.0), Some(&mask), &MapOptions::default()).unwrap();
    for y in 0..h as usize {
        let p = y * w as usize + 3;
        assert!(map.order[p].is_nan());
        assert!(map.flags[p].has(PixelFlags::OUTSIDE_MASK));
    }
    assert_eq!(map.statistics.specimen_pixels, u64::from((w - 10) * h));
}

#[test]
fn a_photo_fifteen_percent_darker_is_compensated_and_the_gain_reported() {
    let truth = ramp(200, 24, 3.0);
    let dark = paint(200, 24, &truth, 0.85);
    let map = map_orders(&dark, &table(3.5), None, &MapOptions::default()).unwrap();
    let (mae, _, gross) = errors(&map, &truth);
    assert_eq!(gross, 0);
    assert!(mae < 0.02, "mean absolute error {mae}");
    for g in map.exposure.gain {
        assert!((g - 1.0 / 0.85).abs() < 0.05, "gain {g}");
    }
}

#[test]
fn a_hint_is_honoured_where_colour_alone_cannot_decide() {
    // A flat field at order 1.75: every order with the same hue matches almost as well, and
    // the fading makes 1.75 the exact one. With a hint at 1.75 the answer must be 1.75.
    let truth = vec![1.75; 30 * 10];
    let photo = paint(30, 10, &truth, 1.0);
    let options = MapOptions {
        hints: vec![OrderHint { at: PixelPoint { x: 15.5, y: 5.5 }, order: 1.75 }],
        ..MapOptions::default()
    };
    let map = map_orders(&photo, &table(3.0), None, &options).unwrap();
    let centre = map.order[5 * 30 + 15];
    assert!((centre - 1.75).abs() < 0.02, "{centre}");
}
