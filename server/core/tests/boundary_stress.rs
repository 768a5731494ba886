//! Free-edge stress and K_t along a specimen's edge: a hand-built order map with exact answers,
//! and rendered photos against closed forms.

mod common;

use isotint_core::boundary::{boundary_stress, edge_csv, EdgePath, EdgeSample};
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

/// Every step from an edge point to the next is short: a pixel along a side, a corner's
/// diagonal.
fn assert_steps_short(samples: &[EdgeSample]) {
    for pair in samples.windows(2) {
        let step = (pair[1].x - pair[0].x).hypot(pair[1].y - pair[0].y);
        assert!(
            step <= 1.5,
            "a jump of {step} px from {:?} to {:?}",
            pair[0],
            pair[1]
        );
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
    assert!(
        csv.starts_with("x,y,normal_x,normal_y,order,stress_mpa,beyond_range,contour,along_px\n")
    );
}

#[test]
fn the_outline_is_walked_in_order_so_its_points_follow_one_another_around_the_edge() {
    let map = rectangle_map();
    let result = boundary_stress(&map, &law(), None, &EdgePath::Outline).unwrap();
    let s = &result.samples;
    // One closed outline: every step to the next point is short (a pixel along a side, a
    // corner's diagonal) and the walk ends next to where it began.
    assert!(s.iter().all(|p| p.contour == 0));
    assert_steps_short(s);
    let (first, last) = (s[0], s[s.len() - 1]);
    assert!((last.x - first.x).hypot(last.y - first.y) <= 1.5);
    assert_eq!(s[0].along_px, 0.0);
    assert!(s.windows(2).all(|p| p[1].along_px > p[0].along_px));
    // The points lie half a pixel outside the outline pixels' centres: along a side they are
    // a pixel apart, at a corner pixel the normal is diagonal. Hand-worked: the 30 × 20
    // rectangle's 96 edge pixels, walked round, give about its perimeter 2 · (29 + 19) = 96 px.
    let total = last.along_px;
    assert!((90.0..100.0).contains(&total), "{total}");
}

#[test]
fn a_hole_is_a_second_contour_and_a_scale_gives_positions_in_millimetres() {
    let mut map = rectangle_map();
    // A 4 × 4 hole in the middle of the rectangle.
    for y in 13..17 {
        for x in 18..22 {
            let i = (y * 40 + x) as usize;
            map.order[i] = f32::NAN;
            map.flags[i] = PixelFlags(PixelFlags::OUTSIDE_MASK);
        }
    }
    let result = boundary_stress(&map, &law(), None, &EdgePath::Outline).unwrap();
    let contours: std::collections::BTreeSet<usize> =
        result.samples.iter().map(|s| s.contour).collect();
    assert_eq!(contours.into_iter().collect::<Vec<_>>(), vec![0, 1]);
    // Within a contour the distance along grows; the second goes on where the first ended.
    for pair in result.samples.windows(2) {
        assert!(pair[1].along_px >= pair[0].along_px);
    }
    let scaled = result
        .clone()
        .with_scale(isotint_core::Scale::new(0.25).unwrap());
    assert_eq!(scaled.mm_per_px, Some(0.25));
    assert_eq!(scaled.x_mm, Some(result.x * 0.25));
    assert_eq!(scaled.y_mm, Some(result.y * 0.25));
    let csv = String::from_utf8(edge_csv(&scaled)).unwrap();
    assert!(csv.starts_with(
        "x,y,normal_x,normal_y,order,stress_mpa,beyond_range,contour,along_px,x_mm,y_mm,along_mm\n"
    ));
    for bad in [0.0, -1.0, f64::NAN, f64::INFINITY] {
        match isotint_core::Scale::new(bad) {
            Err(CoreError::Invalid { field, .. }) => assert_eq!(field, "mm_per_px"),
            other => panic!("{bad}: {other:?}"),
        }
    }
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

#[test]
fn a_specimen_cut_by_the_photo_border_is_one_open_stretch_walked_from_the_border() {
    let mut map = rectangle_map();
    // Extend the rectangle to the photo's left border: [0, 35) × [5, 25).
    for y in 5..25 {
        for x in 0..5 {
            let i = (y * 40 + x) as usize;
            map.order[i] = 0.1 * (y as f32 + 0.5 - 5.0);
            map.flags[i] = PixelFlags(0);
        }
    }
    let result = boundary_stress(&map, &law(), None, &EdgePath::Outline).unwrap();
    let s = &result.samples;
    assert!(s.iter().all(|p| p.contour == 0), "one stretch");
    assert_steps_short(s);
    // No edge where the specimen meets the border; the walk starts and ends there: along the top
    // from x = 0, round the right end, back along the bottom to x = 0. Hand-worked: 35 + 18 + 35
    // edge pixels.
    assert_eq!(result.edge_points, 88);
    assert!(s[0].x < 1.0 && (s[0].y - 5.0).abs() < 1e-9, "{:?}", s[0]);
    let last = s[s.len() - 1];
    assert!(last.x < 1.0 && (last.y - 25.0).abs() < 1e-9, "{last:?}");
}
