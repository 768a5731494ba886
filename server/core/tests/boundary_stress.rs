//! Free-edge stress and K_t along a specimen's edge: a hand-built order map with exact answers,
//! and rendered photos against closed forms.

mod common;

use isotint_core::boundary::{boundary_stress, edge_csv, EdgePath};
use isotint_core::exposure::ExposureCorrection;
use isotint_core::order_map::MapStatistics;
use isotint_core::render::{BendingBeamField, HoleField, OrderField};
use isotint_core::stress::{PlateWithHole, StressOpticLaw};
use isotint_core::{
    map_orders, CoreError, MapOptions, OrderMap, PixelFlags, PixelPoint, PixelRect,
};

/// f_σ = 10.5 N/mm per fringe, h = 6 mm: 1.75 MPa per fringe.
fn law() -> StressOpticLaw {
    StressOpticLaw::new(10.5, 6.0).unwrap()
}

/// A 40 × 30 map whose specimen is the rectangle [5, 35) × [5, 25) with orders rising 0.1
/// fringe per pixel downwards from 0 at its top edge: order 0.1·(y − 5) at height y.
fn rectangle_map() -> OrderMap {
    let (w, h) = (40u32, 30u32);
    let mut order = vec![f32::NAN; (w * h) as usize];
    let mut flags = vec![PixelFlags(PixelFlags::OUTSIDE_MASK); (w * h) as usize];
    for y in 5..25 {
        for x in 5..35 {
            let i = (y * w + x) as usize;
            order[i] = 0.1 * (y as f32 + 0.5 - 5.0);
            flags[i] = PixelFlags(0);
        }
    }
    OrderMap {
        width: w,
        height: h,
        residual: vec![0.0; order.len()],
        margin: vec![10.0; order.len()],
        uncertainty: vec![0.0; order.len()],
        order,
        flags,
        exposure: ExposureCorrection::NONE,
        statistics: MapStatistics {
            specimen_pixels: 600,
            valued_pixels: 600,
            beyond_range_share: 0.0,
            unreliable_share: 0.0,
            min_order: 0.05,
            max_order: 1.95,
            mean_order: 1.0,
            mean_residual: 0.0,
            table_max_order: 4.0,
            ambiguous_colour: false,
        },
    }
}

#[test]
fn the_outline_of_a_hand_built_map_carries_a_linear_order_exactly_to_the_edge() {
    let map = rectangle_map();
    let result = boundary_stress(&map, &law(), Some(1.75), &EdgePath::Outline).unwrap();
    // Exact: the order reaches 0.1 · 20 = 2 fringes at the bottom edge y = 25; samples at 4 and
    // 7 px inside read 1.6 and 1.3, and their line reaches 2.0 at the edge. 2 · 1.75 = 3.5 MPa.
    assert!((result.order - 2.0).abs() < 1e-6, "{result:?}");
    assert!((result.max_stress_mpa - 3.5).abs() < 1e-6);
    assert!((result.y - 25.0).abs() < 1e-9 && (5.0..35.0).contains(&result.x));
    // K_t = 3.5 / 1.75 (definition, Peterson's stress concentration factors, from memory).
    assert!((result.kt.unwrap() - 2.0).abs() < 1e-6);
    assert!(!result.beyond_range && !result.max_is_lower_bound);
    // Every edge pixel of the 30 × 20 rectangle is an edge point: 2 · 30 + 2 · 18 = 96.
    assert_eq!(result.edge_points, 96);
    let csv = String::from_utf8(edge_csv(&result)).unwrap();
    assert_eq!(csv.lines().count(), 97);
    assert!(csv.starts_with("x,y,normal_x,normal_y,order,stress_mpa,beyond_range\n"));
}

#[test]
fn beyond_range_pixels_at_the_edge_make_the_maximum_a_lower_bound() {
    let mut map = rectangle_map();
    let i = (23 * 40 + 20) as usize;
    map.order[i] = f32::NAN;
    map.flags[i] = PixelFlags(PixelFlags::BEYOND_RANGE);
    let result = boundary_stress(&map, &law(), None, &EdgePath::Outline).unwrap();
    assert!(result.beyond_range && result.max_is_lower_bound);
    assert_eq!(result.kt, None);
}

#[test]
fn a_polyline_along_the_bottom_edge_samples_upwards_into_the_specimen() {
    let map = rectangle_map();
    let line = EdgePath::Polyline(vec![
        PixelPoint { x: 10.0, y: 25.0 },
        PixelPoint { x: 30.0, y: 25.0 },
    ]);
    let result = boundary_stress(&map, &law(), None, &line).unwrap();
    assert_eq!(result.edge_points, 21);
    assert!(result.samples.iter().all(|s| s.normal_y == -1.0));
    assert!((result.max_stress_mpa - 3.5).abs() < 1e-6, "{result:?}");
}

#[test]
fn bad_edges_are_refused_naming_their_field() {
    let map = rectangle_map();
    let field = |path: &EdgePath, nominal: Option<f64>, map: &OrderMap| match boundary_stress(
        map,
        &law(),
        nominal,
        path,
    ) {
        Err(CoreError::Invalid { field, .. }) => field,
        other => panic!("{other:?}"),
    };
    let outside = EdgePath::Polyline(vec![
        PixelPoint { x: 10.0, y: 25.0 },
        PixelPoint { x: 50.0, y: 25.0 },
    ]);
    assert_eq!(field(&outside, None, &map), "polyline");
    let inside = EdgePath::Polyline(vec![
        PixelPoint { x: 10.0, y: 15.0 },
        PixelPoint { x: 30.0, y: 15.0 },
    ]);
    assert_eq!(field(&inside, None, &map), "polyline");
    assert_eq!(
        field(&EdgePath::Outline, Some(0.0), &map),
        "nominal_stress_mpa"
    );
    let mut empty = rectangle_map();
    empty.order.iter_mut().for_each(|o| *o = f32::NAN);
    assert_eq!(field(&EdgePath::Outline, None, &empty), "mask");
}

/// Maps the photo of `field` (`width` × `height`, rendered with blur and noise, 8-bit PNG) with
/// a rendered table up to 4 fringes under the same light.
fn rendered_map(field: &dyn OrderField, width: u32, height: u32) -> OrderMap {
    let (photo, mask) = common::rendered_photo(field, width, height, 5);
    let table = common::rendered_daylight_table();
    map_orders(&photo, &table, Some(&mask), &MapOptions::default()).unwrap()
}

#[test]
fn a_rendered_plate_with_a_hole_gives_kirschs_stress_concentration_of_three() {
    // Remote order 1 (1.75 MPa) along y; hole of 150 px radius.
    let law = law();
    let remote_mpa = law.stress_difference_mpa(1.0);
    let field = HoleField::new(
        PixelPoint { x: 250.0, y: 200.0 },
        150.0,
        PlateWithHole::new(15.0, remote_mpa).unwrap(),
        law,
    )
    .unwrap();
    let map = rendered_map(&field, 500, 400);
    let result = boundary_stress(&map, &law, Some(remote_mpa), &EdgePath::Outline).unwrap();
    let kt = result.kt.unwrap();
    println!("K_t {kt:.4} at ({:.1}, {:.1})", result.x, result.y);

    // source: Kirsch (1898), σ_θ = 3S beside a hole in a wide plate under remote tension S.
    assert!((kt - 3.0).abs() <= 0.03 * 3.0, "K_t {kt}");
    // Beside the hole: on the horizontal through its centre, about 150 px from it.
    assert!((result.y - 200.0).abs() < 15.0, "{result:?}");
    assert!(((result.x - 250.0).abs() - 150.0).abs() < 2.0, "{result:?}");
    // The solver flags some pixels above and below the hole (orders near 0.75) beyond range;
    // they touch the edge, so the maximum is reported as a lower bound.
    assert_eq!(
        result.beyond_range,
        result.samples.iter().any(|s| s.beyond_range)
    );
}

#[test]
fn a_rendered_beam_in_pure_bending_gives_the_edge_stress_of_beam_theory() {
    // Beam 16 mm deep (160 px at 0.1 mm/px), 6 mm thick, edge order 3 in the constant-moment
    // zone: M = N·f_σ·d²/6 = 3 · 10.5 · 256 / 6 = 1344 N·mm.
    let beam = BendingBeamField::new(
        PixelRect::new(10.0, 40.0, 590.0, 200.0).unwrap(),
        (30.0, 570.0),
        (170.0, 430.0),
        3.0,
    )
    .unwrap();
    let map = rendered_map(&beam, 600, 240);
    let (moment_n_mm, depth_mm, thickness_mm) = (1344.0, 16.0, 6.0);
    // source: beam theory, σ = 6M/(t·d²) at the edges (Timoshenko & Goodier).
    let expected = 6.0 * moment_n_mm / (thickness_mm * depth_mm * depth_mm);
    let bottom = EdgePath::Polyline(vec![
        PixelPoint { x: 200.0, y: 200.0 },
        PixelPoint { x: 400.0, y: 200.0 },
    ]);
    let result = boundary_stress(&map, &law(), None, &bottom).unwrap();
    println!(
        "edge stress {:.4} MPa, beam theory {expected:.4}",
        result.max_stress_mpa
    );
    assert!(
        (result.max_stress_mpa - expected).abs() <= 0.03 * expected,
        "{result:?}"
    );
    let outline = boundary_stress(&map, &law(), None, &EdgePath::Outline).unwrap();
    assert!(
        (outline.max_stress_mpa - expected).abs() <= 0.03 * expected,
        "{outline:?}"
    );
}
