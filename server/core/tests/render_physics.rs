//! The spectral renderer's physics against outside references.

use approx::assert_relative_eq;
use isotint_core::colour::{ciede2000, lab_from_linear};
use isotint_core::render::polariscope::ideal_dark_field;
use isotint_core::render::{
    retardation_nm, CameraModel, LightSource, QuarterWavePlates, RenderSetup, Renderer,
    REFERENCE_WAVELENGTH_NM,
};
use palette::{FromColor, Lch};

type Lch65 = Lch<palette::white_point::D65, f32>;

fn chromaticity(light: LightSource) -> (f64, f64) {
    let xyz = light.xyz(|_| 1.0);
    let sum = xyz.x + xyz.y + xyz.z;
    (xyz.x / sum, xyz.y / sum)
}

#[test]
fn d65_through_the_cie_1931_observer_lands_on_the_d65_white_point() {
    // source: CIE 15:2004, D65 white point x = 0.3127, y = 0.3290 (2° observer).
    let (x, y) = chromaticity(LightSource::Daylight);
    assert!(
        (x - 0.3127).abs() < 5e-4 && (y - 0.3290).abs() < 5e-4,
        "({x}, {y})"
    );
}

#[test]
fn illuminant_a_lands_on_its_white_point() {
    // source: CIE 15:2004, illuminant A white point x = 0.4476, y = 0.4074 (2° observer).
    let (x, y) = chromaticity(LightSource::Halogen);
    assert!(
        (x - 0.4476).abs() < 1e-3 && (y - 0.4074).abs() < 1e-3,
        "({x}, {y})"
    );
}

#[test]
fn light_names_round_trip_and_unknown_names_are_refused() {
    for light in LightSource::ALL {
        assert_eq!(LightSource::from_name(light.description()).unwrap(), light);
    }
    for camera in CameraModel::ALL {
        assert_eq!(
            CameraModel::from_name(camera.description()).unwrap(),
            camera
        );
    }
    assert_eq!(LightSource::from_name("F11").unwrap(), LightSource::TriBand);
    assert!(LightSource::from_name("sodium")
        .unwrap_err()
        .to_string()
        .contains("sodium"));
}

#[test]
fn one_fringe_order_is_575_nm_of_retardation() {
    // common practice, no source: the tint of passage at N = 1 puts λ_ref near 575 nm.
    assert_eq!(REFERENCE_WAVELENGTH_NM, 575.0);
    assert_relative_eq!(retardation_nm(2.0), 1150.0);
}

#[test]
fn full_transmission_is_neutral_white_for_every_light_and_camera() {
    // common practice, no source: white balance on the light source.
    for light in LightSource::ALL {
        for camera in CameraModel::ALL {
            let c = camera.balanced_response(light, |_| 1.0);
            for v in [c.red, c.green, c.blue] {
                assert_relative_eq!(v, 1.0, max_relative = 1e-12);
            }
        }
    }
}

#[test]
fn zero_order_renders_black() {
    // source: dark-field circular polariscope, I ∝ sin²(πR/λ) = 0 at R = 0 (Dally & Riley, from memory).
    for light in LightSource::ALL {
        for camera in CameraModel::ALL {
            for plates in [
                QuarterWavePlates::Ideal,
                QuarterWavePlates::designed(540.0).unwrap(),
            ] {
                let r = Renderer::new(RenderSetup {
                    light,
                    camera,
                    plates,
                    dispersion: 0.0,
                    exposure: 1.0,
                })
                .unwrap();
                for theta in [0.0, 0.4, 1.2] {
                    let c = r.srgb8(0.0, theta);
                    assert_eq!(
                        (c.red, c.green, c.blue),
                        (0, 0, 0),
                        "{light:?} {camera:?} {plates:?}"
                    );
                }
            }
        }
    }
}

#[test]
fn ideal_plates_and_jones_calculus_agree_when_the_design_wavelength_is_the_wavelength() {
    // source: circular polariscope theory (Dally & Riley, from memory): with exact quarter-wave
    // plates the dark field transmits sin²(δ/2), δ = 2πR/λ, whatever the isoclinic angle.
    for lambda in [410.0, 550.0, 575.0, 690.0] {
        let plates = QuarterWavePlates::designed(lambda).unwrap();
        for r in [0.0, 137.0, 575.0, 1234.5, 4000.0] {
            for theta in [0.0, 0.3, 1.1, 2.5] {
                let jones = plates.transmission(lambda, r, theta);
                assert!(
                    (jones - ideal_dark_field(lambda, r)).abs() < 1e-12,
                    "λ {lambda} R {r} θ {theta}"
                );
            }
        }
    }
}

#[test]
fn with_ideal_plates_the_light_field_transmits_cos_squared_of_half_the_retardance() {
    // source: circular polariscope theory (Dally & Riley, from memory): with the analyser
    // parallel to the polariser and exact quarter-wave plates the light field transmits
    // cos²(δ/2), δ = 2πR/λ, whatever the isoclinic angle.
    for light in LightSource::ALL {
        for camera in CameraModel::ALL {
            let r = Renderer::new(RenderSetup {
                light,
                camera,
                exposure: 0.8,
                ..Default::default()
            })
            .unwrap();
            for order in [0.0, 0.3, 0.5, 1.0, 1.7, 3.2] {
                let retardation = retardation_nm(order);
                let expected = camera.balanced_response(light, |lambda| {
                    (std::f64::consts::PI * retardation / lambda).cos().powi(2)
                });
                for theta in [0.0, 0.7] {
                    let got = r.linear_light_field(order, theta);
                    for (g, e) in [
                        (got.red, expected.red),
                        (got.green, expected.green),
                        (got.blue, expected.blue),
                    ] {
                        // The table is linear between 2 nm steps: a few thousandths.
                        assert!(
                            (f64::from(g) - 0.8 * e).abs() < 3e-3,
                            "{light:?} {camera:?} N {order}: {g} against {}",
                            0.8 * e
                        );
                    }
                }
            }
        }
    }
}

#[test]
fn tabulated_terms_reproduce_the_jones_product_for_mismatched_plates() {
    // Consistency of our own decomposition (no outside source): six terms per wavelength give
    // the same intensity as multiplying the Jones matrices.
    let plates = QuarterWavePlates::designed(560.0).unwrap();
    for lambda in [400.0, 480.0, 620.0, 760.0] {
        let terms = plates.terms(lambda);
        for r in [0.0, 200.0, 575.0, 1300.0] {
            for theta in [0.0, 0.25, 0.9, 1.7, 2.9] {
                let delta = 2.0 * std::f64::consts::PI * r / lambda;
                let direct = plates.transmission(lambda, r, theta);
                assert!((terms.transmission(delta, theta) - direct).abs() < 1e-12);
            }
        }
    }
}

#[test]
fn mismatched_plates_make_colour_depend_on_the_isoclinic_and_ideal_plates_do_not() {
    let ideal = Renderer::new(RenderSetup::default()).unwrap();
    let real = Renderer::new(RenderSetup {
        plates: QuarterWavePlates::designed(560.0).unwrap(),
        ..Default::default()
    })
    .unwrap();
    let de = |r: &Renderer| {
        ciede2000(
            lab_from_linear(r.linear(0.35, 0.0)),
            lab_from_linear(r.linear(0.35, 0.785)),
        )
    };
    assert!(de(&ideal) < 1e-3);
    assert!(de(&real) > 1.0, "{}", de(&real));
}

fn lch(r: &Renderer, retardation: f64) -> Lch65 {
    Lch::from_color(lab_from_linear(
        r.linear(retardation / REFERENCE_WAVELENGTH_NM, 0.0),
    ))
}

fn hue_within(c: &Lch65, from: f32, to: f32) -> bool {
    let h = c.hue.into_positive_degrees();
    if from <= to {
        (from..=to).contains(&h)
    } else {
        h >= from || h <= to
    }
}

#[test]
fn isochromatic_colours_follow_the_handbook_sequence() {
    // source: isochromatic fringe colour table of Dally & Riley, Experimental Stress Analysis
    // (from memory): 345 nm pale yellow, 520 dull red, 575 red/blue tint of passage,
    // 700 blue-green, 800 yellow, 1050 rose red, 1150 red/green transition, 1350 green.
    // Hue bands are CIELCh(ab) hue angles, generous because handbook names are coarse.
    for camera in CameraModel::ALL {
        let r = Renderer::new(RenderSetup {
            camera,
            ..Default::default()
        })
        .unwrap();
        let checks: [(f64, f32, f32, &str); 8] = [
            (345.0, 70.0, 110.0, "pale yellow"),
            (520.0, 310.0, 20.0, "dull red"),
            (575.0, 280.0, 320.0, "tint of passage, red-violet to blue"),
            (700.0, 180.0, 250.0, "blue-green"),
            (800.0, 85.0, 140.0, "yellow (greenish)"),
            (1050.0, 310.0, 20.0, "rose red"),
            (1150.0, 260.0, 310.0, "red/green transition, violet-blue"),
            (1350.0, 110.0, 160.0, "green"),
        ];
        for (retardation, from, to, name) in checks {
            let c = lch(&r, retardation);
            assert!(
                hue_within(&c, from, to),
                "{camera:?} {retardation} nm should be {name}: {c:?}"
            );
        }
        // Pale: light and not very saturated. Dull: dark.
        let pale = lch(&r, 345.0);
        assert!(pale.l > 85.0 && pale.chroma < 50.0, "{pale:?}");
        assert!(lch(&r, 520.0).l < 45.0);
        // The first-order tint of passage is the darkest colour between first-order yellow
        // and second-order blue-green.
        let darkest = (345..=700)
            .map(|nm| (nm, lch(&r, f64::from(nm)).l))
            .min_by(|a, b| a.1.total_cmp(&b.1))
            .unwrap();
        assert!((520..=600).contains(&darkest.0), "darkest at {darkest:?}");
    }
}

#[test]
fn the_sensor_camera_is_roughly_colorimetric_on_fringe_colours() {
    // common practice, no source: a fitted 3×3 matrix brings a sensor within a few ΔE00.
    let exact = Renderer::new(RenderSetup::default()).unwrap();
    let sensor = Renderer::new(RenderSetup {
        camera: CameraModel::Sensor,
        ..Default::default()
    })
    .unwrap();
    let des: Vec<f32> = (1..=300)
        .map(|i| {
            let n = f64::from(i) * 0.01;
            ciede2000(
                lab_from_linear(exact.linear(n, 0.0)),
                lab_from_linear(sensor.linear(n, 0.0)),
            )
        })
        .collect();
    let mean = des.iter().sum::<f32>() / des.len() as f32;
    assert!(mean < 4.0, "mean ΔE00 {mean}");
}

#[test]
fn high_orders_wash_out_towards_grey() {
    // common practice, no source: past about five orders white-light fringes fade to pale pink/white.
    let r = Renderer::new(RenderSetup::default()).unwrap();
    let far: Lch65 = Lch::from_color(lab_from_linear(r.linear(40.0, 0.0)));
    assert!(far.chroma < 3.0, "{far:?}");
    let low: Lch65 = Lch::from_color(lab_from_linear(r.linear(1.6, 0.0)));
    assert!(low.chroma > 40.0);
}
