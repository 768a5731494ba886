//! The order solver on tiny hand-built photos whose exact answer is known: each pixel is
//! painted with the table colour of its true order.

mod common;

use common::{paint, table};
use isotint_core::{map_orders, MapOptions, Mask, OrderHint, PixelFlags, PixelPoint};

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
    let map = map_orders(
        &paint(240, 24, &truth, 1.0),
        &table(4.0),
        None,
        &MapOptions::default(),
    )
    .unwrap();
    let (mae, n, gross) = errors(&map, &truth);
    assert!(mae < 0.01, "mean absolute error {mae}");
    assert_eq!(gross, 0);
    assert!(
        n as f64 > 0.98 * truth.len() as f64,
        "only {n} pixels valued"
    );
}

#[test]
fn pixels_outside_the_mask_get_no_value_and_the_outside_flag() {
    let (w, h) = (60u32, 20u32);
    let truth = ramp(w, h, 2.0);
    let inside: Vec<bool> = (0..w * h).map(|i| i % w >= 10).collect();
    let mask = Mask::new(w, h, inside).unwrap();
    let map = map_orders(
        &paint(w, h, &truth, 1.0),
        &table(3.0),
        Some(&mask),
        &MapOptions::default(),
    )
    .unwrap();
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
        hints: vec![OrderHint {
            at: PixelPoint { x: 15.5, y: 5.5 },
            order: 1.75,
        }],
        ..MapOptions::default()
    };
    let map = map_orders(&photo, &table(3.0), None, &options).unwrap();
    let centre = map.order[5 * 30 + 15];
    assert!((centre - 1.75).abs() < 0.02, "{centre}");
}
