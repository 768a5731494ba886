//! Accuracy of the whole chain — beam photo → calibration table → order map of another part —
//! on photos rendered from closed-form fields, over light sources, cameras, noise, JPEG,
//! exposure drift, vignetting and quarter-wave plate mismatch.
//!
//! Scored where the true order is ≤ 4 and the pixel lies ≥ 3 px inside the specimen mask.
//! Targets: mean absolute error ≤ 0.02 fringe, share of pixels off by more than 0.5 fringe
//! ≤ 0.1 %, coverage (valued / scored) ≥ 99 %, all three asserted over all scored pixels.
//! Beside them the gross share and coverage where the true field is no steeper than the
//! solver's maximum gradient (0.2 fringe per pixel, fringes 5 px apart) are printed. Next to
//! the disc's load points the field reaches several fringes per pixel and colours wash out to
//! pale mixtures: there the solver is meant to flag what it cannot fit, and the window fit
//! (fringes down to about 3 px apart) gives the rest a value.
//! Ground truth: disc in diametral compression (Timoshenko & Goodier closed form) and plate
//! with a circular hole under tension (Kirsch solution), via `render::fields`.

use isotint_core::render::camera::CameraModel;
use isotint_core::render::effects::{develop, PhotoEffects, PhotoEncoding};
use isotint_core::render::fields::{BendingBeamField, DiscField, HoleField, OrderField};
use isotint_core::render::light::LightSource;
use isotint_core::render::photographed_beam_table;
use isotint_core::render::polariscope::QuarterWavePlates;
use isotint_core::render::scene::render_scene;
use isotint_core::render::{RenderSetup, Renderer};
use isotint_core::stress::{DiscInCompression, PlateWithHole, StressOpticLaw};
use isotint_core::{
    map_orders, CalibrationMetadata, DecodeLimits, MapOptions, Photo, PixelPoint, PixelRect,
};

const FRINGE_VALUE: f64 = 11.0; // N/mm per fringe (invented material)
const THICKNESS: f64 = 6.0; // mm
/// The solver's default maximum gradient, fringes per pixel.
const MAX_GRADIENT: f32 = 0.2;

#[derive(Clone, Copy)]
struct Conditions {
    light: LightSource,
    camera: CameraModel,
    plates_design_nm: Option<f64>,
    noise: f32,
    encoding: PhotoEncoding,
    /// Exposure of the specimen photo relative to the beam photo.
    specimen_exposure: f32,
    /// Corner brightness of the specimen photo (vignetting).
    corner_brightness: f32,
    /// Lens blur of the specimen photo, Gaussian σ in pixels.
    blur: f32,
    /// Lens blur of the calibration beam's photo, Gaussian σ in pixels.
    beam_blur: f32,
    /// Added to the noise seeds of both photos.
    seed: u64,
}

const BASE: Conditions = Conditions {
    light: LightSource::Daylight,
    camera: CameraModel::Colorimetric,
    plates_design_nm: None,
    noise: 0.0,
    encoding: PhotoEncoding::Png8,
    specimen_exposure: 1.0,
    corner_brightness: 1.0,
    blur: 0.6,
    beam_blur: 0.6,
    seed: 0,
};

struct Score {
    mae: f64,
    /// Share of scored pixels no steeper than the maximum gradient that are off by > 0.5.
    gross_share: f64,
    /// Share of all scored pixels off by more than 0.5 fringe.
    gross_share_all: f64,
    /// Valued share of the scored pixels no steeper than the maximum gradient.
    coverage: f64,
    /// Valued share of all scored pixels.
    coverage_all: f64,
    scored: usize,
}

fn photo(
    field: &dyn OrderField,
    renderer: &Renderer,
    size: (u32, u32),
    fx: &PhotoEffects,
    encoding: PhotoEncoding,
) -> (Photo, Vec<f32>, isotint_core::Mask) {
    let scene = render_scene(field, renderer, size.0, size.1, 3).unwrap();
    let bytes = develop(&scene.image, fx, encoding).unwrap();
    (
        Photo::decode(&bytes, &DecodeLimits::default()).unwrap(),
        scene.true_order,
        scene.mask,
    )
}

fn run(c: Conditions, specimen: &dyn OrderField, size: (u32, u32)) -> Score {
    let plates = match c.plates_design_nm {
        None => QuarterWavePlates::Ideal,
        Some(nm) => QuarterWavePlates::designed(nm).unwrap(),
    };
    let renderer = Renderer::new(RenderSetup {
        light: c.light,
        camera: c.camera,
        plates,
        dispersion: 0.0,
        exposure: 0.9,
    })
    .unwrap();
    let beam_fx = PhotoEffects {
        blur_sigma_px: c.beam_blur,
        noise_sigma_codes: c.noise,
        seed: 1 + c.seed,
        ..PhotoEffects::default()
    };
    let table = photographed_beam_table(
        &renderer,
        &beam_fx,
        c.encoding,
        CalibrationMetadata {
            name: "accuracy beam".into(),
            ..Default::default()
        },
    )
    .unwrap();

    let fx = PhotoEffects {
        blur_sigma_px: c.blur,
        noise_sigma_codes: c.noise,
        exposure: c.specimen_exposure,
        corner_brightness: c.corner_brightness,
        seed: 2 + c.seed,
    };
    let (specimen_photo, truth, mask) = photo(specimen, &renderer, size, &fx, c.encoding);
    let map = map_orders(&specimen_photo, &table, Some(&mask), &MapOptions::default()).unwrap();
    let scored_mask = mask.eroded(3);
    let w = size.0 as usize;
    let (mut scored, mut valued, mut sum, mut gross) = (0usize, 0usize, 0.0, 0usize);
    let (mut gentle, mut gentle_valued, mut gentle_gross) = (0usize, 0usize, 0usize);
    for (i, t) in truth.iter().enumerate() {
        if !scored_mask.as_slice()[i] || !t.is_finite() || *t > 4.0 {
            continue;
        }
        scored += 1;
        // Central differences of the true field (the scored mask keeps 3 px from any edge).
        let slope =
            ((truth[i + 1] - truth[i - 1]) / 2.0).hypot((truth[i + w] - truth[i - w]) / 2.0);
        let is_gentle = slope <= MAX_GRADIENT;
        gentle += usize::from(is_gentle);
        let o = map.order[i];
        if o.is_finite() {
            valued += 1;
            gentle_valued += usize::from(is_gentle);
            let e = f64::from((o - t).abs());
            sum += e;
            if e > 0.5 {
                gross += 1;
                gentle_gross += usize::from(is_gentle);
            }
        }
    }
    Score {
        mae: sum / valued.max(1) as f64,
        gross_share: gentle_gross as f64 / gentle.max(1) as f64,
        gross_share_all: gross as f64 / scored.max(1) as f64,
        coverage: gentle_valued as f64 / gentle.max(1) as f64,
        coverage_all: valued as f64 / scored.max(1) as f64,
        scored,
    }
}

fn disc() -> DiscField {
    disc_scaled(1.0)
}

/// The test disc drawn `scale` times larger (same load, same orders).
fn disc_scaled(scale: f64) -> DiscField {
    DiscField::new(
        PixelPoint {
            x: 180.0 * scale,
            y: 180.0 * scale,
        },
        160.0 * scale,
        DiscInCompression::new(40.0, THICKNESS, 700.0).unwrap(),
        FRINGE_VALUE,
    )
    .unwrap()
}

fn plate() -> HoleField {
    plate_scaled(1.0)
}

/// The test plate drawn `scale` times larger (same load, same orders).
fn plate_scaled(scale: f64) -> HoleField {
    let law = StressOpticLaw::new(FRINGE_VALUE, THICKNESS).unwrap();
    HoleField::new(
        PixelPoint {
            x: 200.0 * scale,
            y: 150.0 * scale,
        },
        45.0 * scale,
        PlateWithHole::new(6.0, law.stress_difference_mpa(1.2)).unwrap(),
        law,
    )
    .unwrap()
}

/// The targets: mean absolute error (fringes), share of pixels off by more than 0.5
/// fringe, coverage (valued share of the scored pixels).
const MAE_TARGET: f64 = 0.02;
const GROSS_SHARE_TARGET: f64 = 0.001;
const COVERAGE_TARGET: f64 = 0.99;

/// Photos of the disc and the plate must meet the targets.
fn check(name: &str, c: Conditions) {
    check_parts(
        name,
        c,
        &[
            ("disc", &disc(), (360, 360)),
            ("plate", &plate(), (400, 300)),
        ],
    );
}

/// A part to map: name, field and photo size (pixels).
type Part<'a> = (&'a str, &'a dyn OrderField, (u32, u32));

/// Maps each part under conditions `c`, prints its score and checks it against the targets.
fn check_parts(name: &str, c: Conditions, parts: &[Part]) {
    for &(what, field, size) in parts {
        let score = run(c, field, size);
        println!(
            "{name:<24} {what:<5} scored {:>6}  MAE {:.4}  >0.5 {:.3}% (all slopes {:.3}%)  coverage {:.2}% (all slopes {:.2}%)",
            score.scored,
            score.mae,
            100.0 * score.gross_share,
            100.0 * score.gross_share_all,
            100.0 * score.coverage,
            100.0 * score.coverage_all
        );
        assert!(
            score.scored > 10_000,
            "{name} {what}: too few scored pixels"
        );
        assert!(score.mae <= MAE_TARGET, "{name} {what}: MAE {}", score.mae);
        assert!(
            score.gross_share_all <= GROSS_SHARE_TARGET,
            "{name} {what}: gross share {} over all slopes",
            score.gross_share_all
        );
        assert!(
            score.coverage_all >= COVERAGE_TARGET,
            "{name} {what}: coverage {} over all slopes",
            score.coverage_all
        );
    }
}

#[test]
fn daylight_colorimetric_camera_clean_png_meets_the_accuracy_targets() {
    check("daylight clean", BASE);
}

#[test]
fn halogen_light_with_sensor_noise_meets_the_accuracy_targets() {
    check(
        "halogen noisy",
        Conditions {
            light: LightSource::Halogen,
            camera: CameraModel::Sensor,
            noise: 2.0,
            ..BASE
        },
    );
}

#[test]
fn fluorescent_tube_light_meets_the_accuracy_targets() {
    check(
        "tri-band fluorescent",
        Conditions {
            light: LightSource::TriBand,
            noise: 1.0,
            ..BASE
        },
    );
}

/// JPEG stores colour on 2 × 2 blocks (4:2:0): around the disc's load points, where fringes
/// lie a few pixels apart, colours blur across fringes. Before the window fit modelled the
/// subsampled chroma the small disc reached only 98.4–98.7 % coverage over all slopes.
#[test]
fn jpeg_quality_95_with_chroma_subsampling_meets_the_accuracy_targets() {
    check(
        "jpeg 95",
        Conditions {
            camera: CameraModel::Sensor,
            noise: 1.0,
            encoding: PhotoEncoding::Jpeg { quality: 95 },
            ..BASE
        },
    );
}

#[test]
fn jpeg_quality_90_with_chroma_subsampling_meets_the_accuracy_targets() {
    check(
        "jpeg 90",
        Conditions {
            noise: 1.0,
            encoding: PhotoEncoding::Jpeg { quality: 90 },
            ..BASE
        },
    );
}

#[test]
fn a_specimen_photo_twenty_percent_darker_meets_the_accuracy_targets() {
    check(
        "20% darker",
        Conditions {
            specimen_exposure: 0.8,
            noise: 1.0,
            ..BASE
        },
    );
}

#[test]
fn vignetting_to_eighty_percent_in_the_corners_meets_the_accuracy_targets() {
    check(
        "vignetting",
        Conditions {
            corner_brightness: 0.8,
            noise: 1.0,
            ..BASE
        },
    );
}

/// Both drifts at once: the corners of the specimen photo get 0.8 × 0.8 = 64 % of the
/// calibration's light. Before the preliminary pass compared exposure-invariant chroma, the
/// exposure fit found no vignetting here and 35 % of the plate read a fringe too high.
#[test]
fn a_photo_twenty_percent_darker_with_vignetting_meets_the_accuracy_targets() {
    check(
        "20% darker, vignetting",
        Conditions {
            specimen_exposure: 0.8,
            corner_brightness: 0.8,
            noise: 1.0,
            ..BASE
        },
    );
}

#[test]
fn quarter_wave_plates_exact_only_at_520_nm_meet_the_accuracy_targets() {
    check(
        "plates 520 nm",
        Conditions {
            plates_design_nm: Some(520.0),
            noise: 1.0,
            ..BASE
        },
    );
}

/// Past the end of the table the colours repeat in paler form and, far past it, wash out to
/// grey. A disc loaded to 7 or 10 fringes at its centre (table up to 4.4) must come out flagged
/// beyond range there, not read as the table's upper fringes (an under-read), while its rim
/// keeps its values — also in JPEG, 15 % darker, with vignetting.
#[test]
fn discs_loaded_past_the_table_are_flagged_beyond_range_not_read_as_its_top() {
    // source: Timoshenko & Goodier, disc in diametral compression: centre σ1 − σ2 = 8P/(πDh),
    // so N = 8P/(πD·f_σ): 10.0 fringes for P = 1728 N and 6.9 for P = 1200 N, with
    // D = 40 mm and f_σ = 11 N/mm.
    let darker_jpeg = PhotoEffects {
        blur_sigma_px: 0.7,
        noise_sigma_codes: 1.5,
        exposure: 0.85,
        corner_brightness: 0.85,
        seed: 9,
    };
    let clean = PhotoEffects {
        blur_sigma_px: 0.6,
        noise_sigma_codes: 1.0,
        seed: 4,
        ..PhotoEffects::default()
    };
    for (name, load, light, encoding, fx) in [
        (
            "N 10, halogen, png",
            1728.0,
            LightSource::Halogen,
            PhotoEncoding::Png8,
            clean,
        ),
        (
            // Under a tri-band tube the colours past the table stay vivid and match low orders.
            "N 6.9, tri-band fluorescent, png",
            1200.0,
            LightSource::TriBand,
            PhotoEncoding::Png8,
            clean,
        ),
        (
            // Just past the table: the centre reads like the table's last fringe.
            "N 5.2, daylight, jpeg 90",
            900.0,
            LightSource::Daylight,
            PhotoEncoding::Jpeg { quality: 90 },
            PhotoEffects {
                exposure: 1.0,
                corner_brightness: 1.0,
                ..darker_jpeg
            },
        ),
        (
            "N 6.9, tri-band fluorescent, jpeg 90, 15 % darker, vignetting",
            1200.0,
            LightSource::TriBand,
            PhotoEncoding::Jpeg { quality: 90 },
            darker_jpeg,
        ),
        (
            "N 6.9, daylight, jpeg 92, 15 % darker, vignetting",
            1200.0,
            LightSource::Daylight,
            PhotoEncoding::Jpeg { quality: 92 },
            darker_jpeg,
        ),
    ] {
        let disc = DiscField::new(
            PixelPoint { x: 300.0, y: 300.0 },
            280.0,
            DiscInCompression::new(40.0, THICKNESS, load).unwrap(),
            FRINGE_VALUE,
        )
        .unwrap();
        let renderer = Renderer::new(RenderSetup {
            light,
            camera: CameraModel::Sensor,
            plates: QuarterWavePlates::Ideal,
            dispersion: 0.0,
            exposure: 0.9,
        })
        .unwrap();
        let beam_fx = PhotoEffects {
            exposure: 1.0,
            corner_brightness: 1.0,
            ..fx
        };
        let table = photographed_beam_table(
            &renderer,
            &beam_fx,
            encoding,
            CalibrationMetadata {
                name: "past the table".into(),
                ..Default::default()
            },
        )
        .unwrap();
        let (specimen, truth, mask) = photo(&disc, &renderer, (600, 600), &fx, encoding);
        let map = map_orders(&specimen, &table, Some(&mask), &MapOptions::default()).unwrap();
        let top = table.max_order() as f32;
        let scored = mask.eroded(3);
        let (mut past, mut past_valued, mut band, mut band_valued) = (0, 0, 0, 0);
        for (i, t) in truth.iter().enumerate() {
            if !scored.as_slice()[i] || !t.is_finite() {
                continue;
            }
            let valued = map.order[i].is_finite();
            if *t > top + 0.5 {
                past += 1;
                past_valued += usize::from(valued);
            } else if *t <= 4.0 {
                band += 1;
                band_valued += usize::from(valued);
            }
        }
        let past_share = past_valued as f64 / past as f64;
        let band_share = band_valued as f64 / band as f64;
        println!(
            "{name}: more than 0.5 past the table {past} px, {:.2} % valued; N ≤ 4: {band} px, {:.2} % valued",
            100.0 * past_share,
            100.0 * band_share
        );
        assert!(
            past > 20_000,
            "{name}: too few pixels past the table ({past})"
        );
        // Measured 0.00 % in all five cases, and 99.44–99.66 % of the pixels with N ≤ 4
        // valued. Before the washed-out and unanchored-region rules a 360-px disc at N 10 had
        // 93 % of them valued, and the second case 25–29 %.
        assert!(
            past_share < 0.05,
            "{name}: {:.1} % of the pixels past the table got a value",
            100.0 * past_share
        );
        assert!(
            band_share >= COVERAGE_TARGET,
            "{name}: only {:.1} % of the pixels with N ≤ 4 got a value",
            100.0 * band_share
        );
    }
}

/// Photos above one megapixel are labelled on block means and refined at full resolution,
/// where pixels next to the mask's edge are interpolated from the valued blocks alone: the same
/// parts drawn four times larger (1440 × 1440 disc, 1600 × 1200 plate) must meet the targets.
#[test]
fn photos_above_a_megapixel_mapped_on_block_means_meet_the_accuracy_targets() {
    let c = Conditions {
        light: LightSource::Halogen,
        camera: CameraModel::Sensor,
        noise: 1.0,
        ..BASE
    };
    check_parts(
        "block means",
        c,
        &[
            ("disc", &disc_scaled(4.0), (1440, 1440)),
            ("plate", &plate_scaled(4.0), (1600, 1200)),
        ],
    );
}

/// JPEG's 4:2:0 chroma costs coverage where fringes lie a few pixels apart; drawn four times
/// larger, the disc's fringes are four times wider and JPEG quality 90 meets the targets too.
#[test]
fn jpeg_photos_above_a_megapixel_meet_the_accuracy_targets() {
    let c = Conditions {
        noise: 1.0,
        encoding: PhotoEncoding::Jpeg { quality: 90 },
        ..BASE
    };
    check_parts(
        "block means, jpeg 90",
        c,
        &[
            ("disc", &disc_scaled(4.0), (1440, 1440)),
            ("plate", &plate_scaled(4.0), (1600, 1200)),
        ],
    );
}

/// A four-point-bend beam photographed as a specimen, whole: linear ramps to 3.8 fringes at the
/// edges between the inner loads, falling to zero towards the supports, and black zero-order
/// ends beyond the supports, which are not to be taken for orders past the table.
#[test]
fn a_bending_beam_with_zero_order_ends_meets_the_accuracy_targets() {
    // source: pure bending, order linear through the depth, N_edge = 6M/(f_σ·d²) (the field's
    // edge order is given directly here).
    let beam = BendingBeamField::new(
        PixelRect {
            left: 20.0,
            top: 100.0,
            right: 780.0,
            bottom: 300.0,
        },
        (40.0, 760.0),
        (250.0, 550.0),
        3.8,
    )
    .unwrap();
    for (name, encoding) in [
        ("beam, png", PhotoEncoding::Png8),
        ("beam, jpeg 92", PhotoEncoding::Jpeg { quality: 92 }),
    ] {
        let c = Conditions {
            light: LightSource::Halogen,
            camera: CameraModel::Sensor,
            noise: 1.0,
            encoding,
            ..BASE
        };
        check_parts(name, c, &[("beam", &beam, (800, 400))]);
    }
}

/// Conditions outside the suite above, on the 360-px disc, discs of 300 and 480 px and the
/// plate, scored the same way. They hold the limits the README states: no run reads more than
/// 0.3 % of its pixels half a fringe wrong or misses the mean error; with lens blur up to 1 px
/// at most 3 of the 56 runs miss a target (measured 3: the 300-px disc, whose load-point flanks
/// are steepest); at 1.4 px coverage stays above 90 % (measured 91.9 % at worst, the plate).
#[test]
fn a_sweep_of_further_conditions_stays_within_the_stated_limits() {
    let jpeg = |quality| PhotoEncoding::Jpeg { quality };
    let noisy = Conditions { noise: 1.0, ..BASE };
    let sharp_enough: [(&str, Conditions); 14] = [
        (
            "jpeg 80",
            Conditions {
                encoding: jpeg(80),
                ..noisy
            },
        ),
        (
            "jpeg 85",
            Conditions {
                encoding: jpeg(85),
                ..noisy
            },
        ),
        (
            "jpeg 90, other noise",
            Conditions {
                encoding: jpeg(90),
                seed: 3,
                ..noisy
            },
        ),
        (
            "jpeg 90, sensor, noise 1.5",
            Conditions {
                encoding: jpeg(90),
                camera: CameraModel::Sensor,
                noise: 1.5,
                seed: 7,
                ..BASE
            },
        ),
        (
            "tri-band, jpeg 90",
            Conditions {
                light: LightSource::TriBand,
                encoding: jpeg(90),
                ..noisy
            },
        ),
        (
            "cool-white, sensor, jpeg 92",
            Conditions {
                light: LightSource::CoolWhite,
                camera: CameraModel::Sensor,
                encoding: jpeg(92),
                ..noisy
            },
        ),
        (
            "halogen, plates 520 nm, jpeg 90",
            Conditions {
                light: LightSource::Halogen,
                plates_design_nm: Some(520.0),
                encoding: jpeg(90),
                ..noisy
            },
        ),
        (
            "15 % darker, corners 85 %, jpeg 90",
            Conditions {
                specimen_exposure: 0.85,
                corner_brightness: 0.85,
                encoding: jpeg(90),
                ..noisy
            },
        ),
        (
            "10 % darker, sensor, jpeg 95",
            Conditions {
                specimen_exposure: 0.9,
                camera: CameraModel::Sensor,
                encoding: jpeg(95),
                ..noisy
            },
        ),
        (
            "halogen, sensor, 20 % darker, corners 80 %, jpeg 90",
            Conditions {
                light: LightSource::Halogen,
                camera: CameraModel::Sensor,
                specimen_exposure: 0.8,
                corner_brightness: 0.8,
                noise: 2.0,
                encoding: jpeg(90),
                ..BASE
            },
        ),
        (
            "blur 0.3 px",
            Conditions {
                blur: 0.3,
                beam_blur: 0.3,
                ..noisy
            },
        ),
        (
            "blur 0.3 px, jpeg 90",
            Conditions {
                blur: 0.3,
                beam_blur: 0.3,
                encoding: jpeg(90),
                ..noisy
            },
        ),
        (
            "blur 1 px",
            Conditions {
                blur: 1.0,
                beam_blur: 1.0,
                ..noisy
            },
        ),
        (
            "blur 1 px, jpeg 90",
            Conditions {
                blur: 1.0,
                beam_blur: 1.0,
                encoding: jpeg(90),
                ..noisy
            },
        ),
    ];
    let blurred: [(&str, Conditions); 6] = [
        (
            "blur 1.4 px",
            Conditions {
                blur: 1.4,
                beam_blur: 1.4,
                ..noisy
            },
        ),
        (
            "blur 1.4 px, jpeg 90",
            Conditions {
                blur: 1.4,
                beam_blur: 1.4,
                encoding: jpeg(90),
                ..noisy
            },
        ),
        (
            "blur 1.4 px, jpeg 95",
            Conditions {
                blur: 1.4,
                beam_blur: 1.4,
                encoding: jpeg(95),
                ..noisy
            },
        ),
        ("blur 1.4 px, beam 0.6", Conditions { blur: 1.4, ..noisy }),
        (
            "blur 1.4 px, beam 0.6, jpeg 90",
            Conditions {
                blur: 1.4,
                encoding: jpeg(90),
                ..noisy
            },
        ),
        (
            "blur 0.6 px, beam 1.4",
            Conditions {
                beam_blur: 1.4,
                ..noisy
            },
        ),
    ];
    let parts: [Part; 4] = [
        ("disc", &disc(), (360, 360)),
        ("disc 300", &disc_scaled(300.0 / 360.0), (300, 300)),
        ("disc 480", &disc_scaled(480.0 / 360.0), (480, 480)),
        ("plate", &plate(), (400, 300)),
    ];
    let mut misses = [0, 0];
    for (set, conditions) in [&sharp_enough[..], &blurred[..]].iter().enumerate() {
        for &(name, c) in *conditions {
            for &(what, field, size) in &parts {
                let score = run(c, field, size);
                let met = score.mae <= MAE_TARGET
                    && score.gross_share_all <= GROSS_SHARE_TARGET
                    && score.coverage_all >= COVERAGE_TARGET;
                misses[set] += usize::from(!met);
                println!(
                    "{name:<52} {what:<8} MAE {:.4}  >0.5 {:.3}%  coverage {:.2}%{}",
                    score.mae,
                    100.0 * score.gross_share_all,
                    100.0 * score.coverage_all,
                    if met { "" } else { "  (misses a target)" }
                );
                assert!(score.mae <= MAE_TARGET, "{name} {what}: MAE {}", score.mae);
                assert!(
                    score.gross_share_all <= 0.003,
                    "{name} {what}: gross share {}",
                    score.gross_share_all
                );
                assert!(
                    score.coverage_all >= 0.9,
                    "{name} {what}: coverage {}",
                    score.coverage_all
                );
            }
        }
    }
    println!(
        "missed a target: {} of {} runs with blur up to 1 px, {} of {} at 1.4 px",
        misses[0],
        sharp_enough.len() * parts.len(),
        misses[1],
        blurred.len() * parts.len()
    );
    assert!(
        misses[0] <= 3,
        "{} runs with blur up to 1 px missed",
        misses[0]
    );
}
