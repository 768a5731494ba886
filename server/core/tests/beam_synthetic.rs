//! Beam calibration on a painted four-point-bend beam with exact answers.

mod common;

use common::{paint, spiral};
use isotint_core::beam::{calibrate_beam, BeamSpec, EdgeLoad, EdgeLoadFields};
use isotint_core::colour::delta_e_ab;
use isotint_core::{CalibrationMetadata, PixelRect};

const W: u32 = 260;
const H: u32 = 200;
const TOP: f64 = 40.0;
const BOTTOM: f64 = 160.0;
const EDGE: f64 = 3.0;

/// A beam from x = 20 to 240 between TOP and BOTTOM on a black background; N is linear
/// through the depth, 0 on the mid-line and EDGE at both edges (pixel centres sampled).
fn beam_truth() -> Vec<f64> {
    let mid = 0.5 * (TOP + BOTTOM);
    (0..H)
        .flat_map(|y| {
            (0..W).map(move |x| {
                let yc = f64::from(y) + 0.5;
                if !(20..240).contains(&x) || !(TOP..=BOTTOM).contains(&yc) {
                    f64::NAN
                } else {
                    EDGE * (yc - mid).abs() / (0.5 * (BOTTOM - TOP))
                }
            })
        })
        .collect()
}

fn spec(region: PixelRect, refine_edges: bool) -> BeamSpec {
    BeamSpec {
        region,
        load: EdgeLoad::EdgeOrder(EDGE),
        refine_edges,
        order_step: 0.01,
        metadata: CalibrationMetadata {
            name: "painted beam".into(),
            ..Default::default()
        },
    }
}

#[test]
fn a_painted_beam_gives_back_its_colour_sequence() {
    let photo = paint(W, H, &beam_truth(), 1.0);
    let cal = calibrate_beam(
        &photo,
        &spec(PixelRect::new(60.0, TOP, 200.0, BOTTOM).unwrap(), false),
    )
    .unwrap();
    // Rows centred within 2 px of an edge are skipped: the outermost kept row is centred
    // 2.5 px inside, at N = 3·57.5/60 = 2.875, and the 0.01 grid stops at 2.87.
    assert!(
        (cal.report.max_order - 2.87).abs() < 1e-9,
        "{}",
        cal.report.max_order
    );
    for e in &cal.table.entries {
        let d = delta_e_ab(e.colour(), spiral(e.order));
        // This made-up sequence changes by up to 12 ΔE*ab from one row to the next (far faster
        // than real isochromatics); the smoothed table must stay within a sixth of that.
        assert!(d < 2.0, "order {:.2}: ΔE*ab {d}", e.order);
    }
    assert!(
        cal.report.residual_mean_de2000 < 0.6,
        "{}",
        cal.report.residual_mean_de2000
    );
    assert_eq!(cal.report.outlier_rows, 0);
    assert!(cal.report.edge_shift.is_none());
}

#[test]
fn edges_given_a_pixel_off_are_refined_back_to_the_beam() {
    let photo = paint(W, H, &beam_truth(), 1.0);
    let cal = calibrate_beam(
        &photo,
        &spec(
            PixelRect::new(60.0, TOP - 1.3, 200.0, BOTTOM + 0.8).unwrap(),
            true,
        ),
    )
    .unwrap();
    let shift = cal.report.edge_shift.expect("refinement was asked for");
    assert!((shift.top_px - 1.3).abs() < 0.15, "{shift:?}");
    assert!((shift.bottom_px + 0.8).abs() < 0.15, "{shift:?}");
}

#[test]
fn the_fringe_value_is_reported_when_edge_order_and_load_are_both_known() {
    // source: pure bending, N_edge = 6M/(f_σ·d²) (common practice, no source) — hand-worked:
    // M = 2250 N·mm, d = 10 mm, N = 3 → f_σ = 6·2250/(3·100) = 45 N/mm per fringe.
    let load = EdgeLoad::from_fields(EdgeLoadFields {
        edge_order: Some(3.0),
        moment_n_mm: Some(2250.0),
        depth_mm: Some(10.0),
        ..Default::default()
    })
    .unwrap();
    let photo = paint(W, H, &beam_truth(), 1.0);
    let mut s = spec(PixelRect::new(60.0, TOP, 200.0, BOTTOM).unwrap(), false);
    s.load = load;
    let cal = calibrate_beam(&photo, &s).unwrap();
    assert!((cal.report.fringe_value_n_per_mm.unwrap() - 45.0).abs() < 1e-9);
}

#[test]
fn an_edge_order_can_be_derived_from_the_load() {
    let load = EdgeLoad::from_fields(EdgeLoadFields {
        edge_order: None,
        moment_n_mm: Some(2250.0),
        depth_mm: Some(10.0),
        fringe_value_n_per_mm: Some(45.0),
        ..Default::default()
    })
    .unwrap();
    assert!((load.edge_order().unwrap() - 3.0).abs() < 1e-12);
}

#[test]
fn missing_or_negative_load_data_is_refused_with_the_field_named() {
    let none = EdgeLoad::from_fields(EdgeLoadFields::default())
        .unwrap_err()
        .to_string();
    assert!(none.contains("edge_order"), "{none}");
    let negative = EdgeLoad::from_fields(EdgeLoadFields {
        edge_order: Some(-1.0),
        ..Default::default()
    })
    .unwrap_err()
    .to_string();
    assert!(
        negative.contains("edge_order") && negative.contains("positive"),
        "{negative}"
    );
    let nan = EdgeLoad::from_fields(EdgeLoadFields {
        moment_n_mm: Some(f64::NAN),
        depth_mm: Some(10.0),
        fringe_value_n_per_mm: Some(4.0),
        ..Default::default()
    })
    .unwrap_err()
    .to_string();
    assert!(nan.contains("moment_n_mm"), "{nan}");
}

#[test]
fn a_region_outside_the_photo_is_refused() {
    let photo = paint(W, H, &beam_truth(), 1.0);
    let err = calibrate_beam(
        &photo,
        &spec(PixelRect::new(60.0, TOP, 300.0, BOTTOM).unwrap(), false),
    )
    .unwrap_err();
    assert!(err.to_string().contains("outside"), "{err}");
}

#[test]
fn a_beam_table_carries_the_fringe_value_its_load_implies_as_the_stress_default() {
    // source: pure bending, σ_edge = 6M/d² and N_edge = σ_edge·h/f_σ per unit thickness, so
    // f_σ = 6M/(N_edge·d²) (beam theory; common practice, no source). Hand-worked: M = 2250
    // N·mm, d = 10 mm, N_edge = 3 → f_σ = 13500/300 = 45 N/mm per fringe.
    let photo = paint(W, H, &beam_truth(), 1.0);
    let mut s = spec(PixelRect::new(60.0, TOP, 200.0, BOTTOM).unwrap(), false);
    s.load = EdgeLoad::EdgeOrderAndLoad {
        edge_order: EDGE,
        moment_n_mm: 2250.0,
        depth_mm: 10.0,
    };
    s.metadata.thickness_mm = Some(6.0);
    let defaults = calibrate_beam(&photo, &s).unwrap().table.stress_defaults();
    assert!((defaults.fringe_value_n_per_mm.unwrap() - 45.0).abs() < 1e-9);
    assert_eq!(defaults.thickness_mm, Some(6.0));
}

#[test]
fn a_fringe_value_given_beside_the_edge_order_is_stored_with_the_table() {
    let load = EdgeLoad::from_fields(EdgeLoadFields {
        edge_order: Some(EDGE),
        fringe_value_n_per_mm: Some(10.5),
        ..Default::default()
    })
    .unwrap();
    assert_eq!(load.edge_order(), Some(EDGE));
    let photo = paint(W, H, &beam_truth(), 1.0);
    let mut s = spec(PixelRect::new(60.0, TOP, 200.0, BOTTOM).unwrap(), false);
    s.load = load;
    let cal = calibrate_beam(&photo, &s).unwrap();
    assert_eq!(
        cal.table.stress_defaults().fringe_value_n_per_mm,
        Some(10.5)
    );
    assert_eq!(cal.table.stress_defaults().thickness_mm, None);
    // The value was given, not implied by a load: the report's implied value stays empty.
    assert_eq!(cal.report.fringe_value_n_per_mm, None);
}
