//! Stress module against hand-worked numbers and textbook closed forms.

use std::f64::consts::PI;

use approx::assert_relative_eq;
use isotint_core::order_map::MapStatistics;
use isotint_core::stress::{
    pure_bending_edge_order, stress_concentration_factor, Coating, DiscInCompression, EdgeSign,
    PlateWithHole, SpecimenFields, SpecimenKind, StressOpticLaw,
};
use isotint_core::CoreError;

#[test]
fn pure_bending_edge_order_matches_a_hand_worked_beam() {
    // source: beam theory σ_edge = 6M/(b·d²) with the stress-optic law N = σ·b/f_σ.
    // Hand-worked: M = 4536 N·mm, d = 24 mm, f_σ = 10.5 N/mm → 6·4536 / (10.5·576) = 27216/6048 = 4.5.
    assert_relative_eq!(
        pure_bending_edge_order(4536.0, 24.0, 10.5),
        4.5,
        max_relative = 1e-12
    );
}

#[test]
fn the_stress_optic_law_turns_orders_into_megapascals() {
    // source: stress-optic law σ1 − σ2 = N·f_σ/h (Dally & Riley, from memory).
    // Hand-worked: N = 2, f_σ = 10.5 N/mm, h = 6 mm → 3.5 MPa.
    let law = StressOpticLaw::new(10.5, 6.0).unwrap();
    assert_relative_eq!(law.stress_difference_mpa(2.0), 3.5, max_relative = 1e-12);
    assert_relative_eq!(law.order(3.5), 2.0, max_relative = 1e-12);
    // At a free edge one principal stress is zero: σ_t = ±N·f_σ/h.
    assert_relative_eq!(
        law.free_edge_stress_mpa(2.0, EdgeSign::Compression),
        -3.5,
        max_relative = 1e-12
    );
    assert_relative_eq!(
        law.free_edge_stress_mpa(2.0, EdgeSign::Tension),
        3.5,
        max_relative = 1e-12
    );
}

#[test]
fn coating_strain_counts_the_double_pass() {
    // source: reflection photoelasticity ε1 − ε2 = N·f_ε/(2·t_c) (from memory).
    // Hand-worked: N = 1.5, f_ε = 4 µm, t_c = 2 mm → 1.5·0.004/(2·2) = 0.0015 = 1500 µε.
    let coating = Coating::new(4.0, 2.0).unwrap();
    assert_relative_eq!(coating.strain_difference(1.5), 1.5e-3, max_relative = 1e-12);
}

#[test]
fn stress_concentration_factor_is_peak_over_nominal() {
    // source: definition K_t = σ_max/σ_nom (Peterson's stress concentration factors, from memory).
    assert_relative_eq!(stress_concentration_factor(7.5, 2.5).unwrap(), 3.0);
    assert!(stress_concentration_factor(7.5, 0.0).is_err());
}

#[test]
fn disc_centre_stress_difference_matches_timoshenko() {
    // source: Timoshenko & Goodier, Theory of Elasticity, disc in diametral compression:
    // at the centre σx = 2P/(πDh), σy = −6P/(πDh), so σ1 − σ2 = 8P/(πDh).
    // Hand-worked: P = 600 N, D = 50 mm, h = 6 mm → 8·600/(π·300) = 5.0930 MPa.
    let disc = DiscInCompression::new(50.0, 6.0, 600.0).unwrap();
    let centre = disc.stress_at(0.0, 0.0);
    let unit = 600.0 / (PI * 50.0 * 6.0);
    assert_relative_eq!(centre.sx, 2.0 * unit, max_relative = 1e-9);
    assert_relative_eq!(centre.sy, -6.0 * unit, max_relative = 1e-9);
    assert!(centre.txy.abs() < 1e-12);
    assert_relative_eq!(centre.principal_difference(), 5.0930, max_relative = 1e-4);
    assert_relative_eq!(
        disc.centre_stress_difference_mpa(),
        centre.principal_difference(),
        max_relative = 1e-9
    );
}

#[test]
fn disc_stresses_along_the_horizontal_diameter_match_the_textbook_profile() {
    // source: Timoshenko & Goodier / Frocht (from memory): on the horizontal diameter
    // σx = (2P/πDh)·((D² − 4x²)/(D² + 4x²))², σy = −(2P/πDh)·(4D⁴/(D² + 4x²)² − 1).
    let (d, h, p) = (50.0, 6.0, 600.0);
    let disc = DiscInCompression::new(d, h, p).unwrap();
    let unit = 2.0 * p / (PI * d * h);
    for x in [0.0, 5.0, 12.5, 20.0, 24.0] {
        let s = disc.stress_at(x, 0.0);
        let q = d * d + 4.0 * x * x;
        assert_relative_eq!(
            s.sx,
            unit * ((d * d - 4.0 * x * x) / q).powi(2),
            epsilon = 1e-9
        );
        assert_relative_eq!(
            s.sy,
            -unit * (4.0 * d.powi(4) / (q * q) - 1.0),
            epsilon = 1e-9
        );
        assert!(
            s.txy.abs() < 1e-9,
            "shear on the diameter at x = {x}: {}",
            s.txy
        );
    }
}

#[test]
fn disc_rim_is_free_of_traction_away_from_the_loads() {
    // source: boundary condition of the Timoshenko & Goodier solution: the rim is unloaded.
    let disc = DiscInCompression::new(40.0, 5.0, 800.0).unwrap();
    for angle in [0.1f64, 0.7, 1.3, 2.0, 2.9, 4.0, 5.5] {
        let (nx, ny) = (angle.cos(), angle.sin());
        let s = disc.stress_at(20.0 * nx, 20.0 * ny);
        let (tx, ty) = (s.sx * nx + s.txy * ny, s.txy * nx + s.sy * ny);
        assert!(
            tx.abs() < 1e-9 && ty.abs() < 1e-9,
            "traction ({tx}, {ty}) at {angle}"
        );
    }
}

#[test]
fn kirsch_gives_three_times_the_remote_stress_beside_the_hole_and_minus_s_above_it() {
    // source: Kirsch (1898) solution for a circular hole in an infinite plate under uniaxial
    // tension S: σ_θ at the hole edge ranges from −S (on the load axis) to 3S (across it), K_t = 3.
    let s = 12.0;
    let plate = PlateWithHole::new(5.0, s).unwrap();
    let beside = plate.stress_at(5.0, 0.0);
    assert_relative_eq!(beside.sy, 3.0 * s, max_relative = 1e-12);
    assert!(beside.sx.abs() < 1e-12);
    let above = plate.stress_at(0.0, -5.0);
    assert_relative_eq!(above.sx, -s, max_relative = 1e-12);
    assert!(above.sy.abs() < 1e-12);
    assert_relative_eq!(
        stress_concentration_factor(beside.sy, s).unwrap(),
        3.0,
        max_relative = 1e-12
    );
    // The hole edge carries only hoop stress: σ1 − σ2 = |σ_θ| everywhere along it.
    for angle in [0.2f64, 0.9, 1.4, 2.6, 3.3, 5.0] {
        let (nx, ny) = (angle.cos(), angle.sin());
        let e = plate.stress_at(5.0 * nx, 5.0 * ny);
        let (tx, ty) = (e.sx * nx + e.txy * ny, e.txy * nx + e.sy * ny);
        assert!(
            tx.abs() < 1e-9 && ty.abs() < 1e-9,
            "traction ({tx}, {ty}) at {angle}"
        );
        // Angle φ from x in the pixel frame: σ_θ = S(1 + 2 cos 2φ).
        let hoop = s * (1.0 + 2.0 * (2.0 * angle).cos());
        assert_relative_eq!(e.principal_difference(), hoop.abs(), epsilon = 1e-9);
    }
}

#[test]
fn a_coating_gives_the_parts_stress_through_hookes_law_for_plane_stress() {
    // source: ε1 − ε2 = N·f_ε/(2·t_c) for a coating read in reflection (double pass; common
    // practice, no source), σ1 − σ2 = E/(1 + ν)·(ε1 − ε2) from Hooke's law in plane stress
    // (Timoshenko & Goodier, from memory).
    // Hand-worked: N = 1.5, f_ε = 4 µm, t_c = 2 mm → 1500 µε; steel E = 200 000 MPa, ν = 0.3 →
    // 200 000 / 1.3 · 1.5e-3 = 230.769 MPa.
    let specimen = SpecimenFields {
        strain_fringe_value_um: Some(4.0),
        coating_thickness_mm: Some(2.0),
        youngs_modulus_mpa: Some(200_000.0),
        poisson_ratio: Some(0.3),
        ..SpecimenFields::default()
    }
    .specimen()
    .unwrap()
    .unwrap();
    assert_eq!(specimen.kind(), SpecimenKind::Coating);
    assert_relative_eq!(
        specimen.microstrain_per_fringe().unwrap(),
        1000.0,
        max_relative = 1e-12
    );
    let law = specimen.law();
    assert_relative_eq!(
        law.stress_difference_mpa(1.5),
        230.769_230_769,
        max_relative = 1e-9
    );
    let figures = specimen.statistics(&map_statistics(1.5));
    assert_relative_eq!(
        figures.stress.max_stress_mpa,
        230.769_230_769,
        max_relative = 1e-9
    );
    let strain = figures.strain.unwrap();
    assert_relative_eq!(strain.max_strain_microstrain, 1500.0, max_relative = 1e-12);
    assert!(!strain.max_is_lower_bound);
}

#[test]
fn a_frozen_stress_slice_reads_like_a_thin_model_at_the_critical_temperature() {
    // source: stress-optic law σ1 − σ2 = N·f_σ/h applied to a slice with the fringe value at the
    // critical temperature (common practice, no source). Hand-worked: N = 3, f_σ = 0.35 N/mm,
    // slice 2.5 mm → 3 · 0.35 / 2.5 = 0.42 MPa.
    let specimen = SpecimenFields {
        specimen: Some(SpecimenKind::Slice),
        fringe_value_n_per_mm: Some(0.35),
        thickness_mm: Some(2.5),
        ..SpecimenFields::default()
    }
    .specimen()
    .unwrap()
    .unwrap();
    assert_eq!(specimen.kind(), SpecimenKind::Slice);
    assert_relative_eq!(
        specimen.law().stress_difference_mpa(3.0),
        0.42,
        max_relative = 1e-12
    );
    assert_eq!(specimen.microstrain_per_fringe(), None);
    assert_eq!(specimen.statistics(&map_statistics(3.0)).strain, None);
}

#[test]
fn specimen_fields_that_are_missing_misplaced_or_out_of_range_are_refused_by_name() {
    let field = |fields: SpecimenFields| match fields.specimen() {
        Err(CoreError::Invalid { field, .. }) => field,
        other => panic!("{other:?}"),
    };
    let coating = SpecimenFields {
        strain_fringe_value_um: Some(4.0),
        coating_thickness_mm: Some(2.0),
        youngs_modulus_mpa: Some(200_000.0),
        poisson_ratio: Some(0.3),
        ..SpecimenFields::default()
    };
    assert_eq!(
        field(SpecimenFields {
            youngs_modulus_mpa: None,
            ..coating
        }),
        "youngs_modulus_mpa"
    );
    assert_eq!(
        field(SpecimenFields {
            poisson_ratio: Some(0.5),
            ..coating
        }),
        "poisson_ratio"
    );
    assert_eq!(
        field(SpecimenFields {
            coating_thickness_mm: Some(0.0),
            ..coating
        }),
        "coating_thickness_mm"
    );
    assert_eq!(
        field(SpecimenFields {
            thickness_mm: Some(6.0),
            ..coating
        }),
        "thickness_mm"
    );
    assert_eq!(
        field(SpecimenFields {
            specimen: Some(SpecimenKind::Transmission),
            ..coating
        }),
        "strain_fringe_value_um"
    );
    assert_eq!(
        field(SpecimenFields {
            specimen: Some(SpecimenKind::Slice),
            ..SpecimenFields::default()
        }),
        "fringe_value_n_per_mm"
    );
    assert_eq!(SpecimenFields::default().specimen().unwrap(), None);
    assert!(matches!(
        SpecimenKind::from_name("mirror"),
        Err(CoreError::Invalid {
            field: "specimen",
            ..
        })
    ));
}

/// Map figures with orders from 0.5 to `max_order` (mean 1), all in range.
fn map_statistics(max_order: f64) -> MapStatistics {
    MapStatistics {
        specimen_pixels: 100,
        valued_pixels: 100,
        beyond_range_share: 0.0,
        unreliable_share: 0.0,
        min_order: 0.5,
        max_order,
        mean_order: 1.0,
        mean_residual: 1.0,
        table_max_order: 4.4,
        ambiguous_colour: false,
    }
}

#[test]
fn missing_transmission_inputs_take_the_calibrations_values_and_say_so() {
    use isotint_core::stress::{InputOrigin, StressDefaults};
    // source: stress-optic law σ1 − σ2 = N·f_σ/h (common practice, no source). Hand-worked:
    // N = 2, f_σ = 10.5 N/mm from the calibration, h = 6 mm given → 3.5 MPa.
    let stored = StressDefaults {
        fringe_value_n_per_mm: Some(10.5),
        thickness_mm: Some(5.0),
    };
    let (fields, origins) = SpecimenFields {
        thickness_mm: Some(6.0),
        ..SpecimenFields::default()
    }
    .with_defaults(stored);
    let law = fields.specimen().unwrap().unwrap().law();
    assert_relative_eq!(law.stress_difference_mpa(2.0), 3.5, max_relative = 1e-12);
    assert_eq!(
        origins.fringe_value_n_per_mm,
        Some(InputOrigin::Calibration)
    );
    assert_eq!(origins.thickness_mm, Some(InputOrigin::Given));
    assert_eq!(origins.lines().len(), 1);

    // Nothing given: both stored values, 2 · 10.5 / 5 = 4.2 MPa.
    let (fields, origins) = SpecimenFields::default().with_defaults(stored);
    let law = fields.specimen().unwrap().unwrap().law();
    assert_relative_eq!(law.stress_difference_mpa(2.0), 4.2, max_relative = 1e-12);
    assert!(origins.any_from_calibration());
}

#[test]
fn a_calibration_that_knows_only_its_fringe_value_asks_for_no_stresses_by_itself() {
    use isotint_core::stress::StressDefaults;
    let stored = StressDefaults {
        fringe_value_n_per_mm: Some(10.5),
        thickness_mm: None,
    };
    let (fields, origins) = SpecimenFields::default().with_defaults(stored);
    assert_eq!(fields.specimen().unwrap(), None);
    assert!(!origins.any_from_calibration());
}

#[test]
fn a_slice_or_a_coating_never_takes_the_calibrations_room_temperature_values() {
    use isotint_core::stress::StressDefaults;
    let stored = StressDefaults {
        fringe_value_n_per_mm: Some(10.5),
        thickness_mm: Some(6.0),
    };
    let (slice, origins) = SpecimenFields {
        specimen: Some(SpecimenKind::Slice),
        thickness_mm: Some(2.5),
        ..SpecimenFields::default()
    }
    .with_defaults(stored);
    assert_eq!(slice.fringe_value_n_per_mm, None);
    assert!(!origins.any_from_calibration());
    let (coating, _) = SpecimenFields {
        strain_fringe_value_um: Some(4.0),
        ..SpecimenFields::default()
    }
    .with_defaults(stored);
    assert_eq!(coating.fringe_value_n_per_mm, None);
    assert_eq!(coating.thickness_mm, None);
}
