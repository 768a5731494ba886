//! Randomised, seeded scenes for judging the solver outside its own suite.
//!
//! [`Scenario::draw`] turns a seed into a complete lab situation: a light source (daylight
//! phases, incandescent lamps, the CIE fluorescent tubes F1–F12, the CIE white-LED series),
//! a camera with its own Gaussian channel sensitivities, quarter-wave plates exact somewhere
//! in 500–600 nm, a specimen material with birefringence dispersion, exposure, vignetting,
//! lens blur, sensor noise and a file format (PNG, JPEG 80–100 with 4:2:0 or 4:4:4 chroma),
//! and one specimen: a bending beam with unloaded ends, a uniform field with or without a
//! hole, a disc, a ring or an edge notch, at several sizes and loads, many of them loaded past
//! the calibration's range. The calibration beam is photographed under the same light,
//! camera, plates, material and file format as the specimen, with its own exposure, blur and
//! noise, as in a lab. [`Scenario::render`] makes the table and the photo;
//! [`SceneScore::of`] scores a map against the truth.
//!
//! Equal seeds give equal scenes on any machine and thread count.

use std::f64::consts::PI;

use colorimetry::illuminant::{self, Illuminant};
use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};
use serde::Serialize;

use super::camera::{gaussian_camera_weights, white_balanced};
use super::effects::{develop, PhotoEffects, PhotoEncoding};
use super::fields::{
    BendingBeamField, DiscField, EdgeNotchField, FieldSample, HoleField, OrderField, RingField,
    UniformField,
};
use super::polariscope::QuarterWavePlates;
use super::renderer::{Renderer, SpectralSetup};
use super::scene::{render_light_field, render_scene, LinearImage};
use super::{photographed_beam, photographed_beam_table, SPECTRUM_SAMPLES};
use crate::calibration::{CalibrationMetadata, CalibrationTable};
use crate::colour::{DecodeLimits, Photo};
use crate::error::{CoreError, CoreResult};
use crate::geometry::{Mask, PixelPoint, PixelRect};
use crate::order_map::{OrderMap, PixelFlags};
use crate::stress::{DiscInCompression, PlateWithHole, StressOpticLaw};

/// Samples per pixel along each axis when rendering a scenario.
const SUPERSAMPLING: u32 = 3;
/// Invented material of every scenario: fringe value (N/mm per fringe) and thickness (mm).
const FRINGE_VALUE: f64 = 11.0;
const THICKNESS: f64 = 6.0;

/// A light source drawn for a scenario.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(tag = "source", rename_all = "snake_case")]
pub enum DrawnLight {
    /// A CIE daylight phase at this correlated colour temperature, K.
    Daylight { kelvin: f64 },
    /// An incandescent or halogen lamp: a black body at this temperature, K.
    Incandescent { kelvin: f64 },
    /// A CIE fluorescent tube, F1–F12 (F10–F12 are narrow tri-band tubes).
    Fluorescent { tube: u8 },
    /// A CIE white LED (CIE 15:2018 series): B1–B5 phosphor-converted at 2700–6600 K, BH1
    /// hybrid, RGB1 three-chip, V1–V2 violet-pumped, numbered 1–9 in that order.
    WhiteLed { kind: u8 },
}

impl DrawnLight {
    /// Relative spectral power at 380, 381, …, 780 nm.
    pub fn spectrum(&self) -> CoreResult<[f64; SPECTRUM_SAMPLES]> {
        let owned;
        let light: &Illuminant = match *self {
            DrawnLight::Daylight { kelvin } => {
                owned = Illuminant::d_illuminant(kelvin)
                    .map_err(|e| CoreError::invalid("kelvin", e.to_string()))?;
                &owned
            }
            DrawnLight::Incandescent { kelvin } => {
                owned = Illuminant::planckian(kelvin);
                &owned
            }
            DrawnLight::Fluorescent { tube } => {
                const TUBES: [&Illuminant; 12] = [
                    &illuminant::F1,
                    &illuminant::F2,
                    &illuminant::F3,
                    &illuminant::F4,
                    &illuminant::F5,
                    &illuminant::F6,
                    &illuminant::F7,
                    &illuminant::F8,
                    &illuminant::F9,
                    &illuminant::F10,
                    &illuminant::F11,
                    &illuminant::F12,
                ];
                TUBES[usize::from(tube.clamp(1, 12)) - 1]
            }
            DrawnLight::WhiteLed { kind } => {
                const LEDS: [&Illuminant; 9] = [
                    &illuminant::LED_B1,
                    &illuminant::LED_B2,
                    &illuminant::LED_B3,
                    &illuminant::LED_B4,
                    &illuminant::LED_B5,
                    &illuminant::LED_BH1,
                    &illuminant::LED_RGB1,
                    &illuminant::LED_V1,
                    &illuminant::LED_V2,
                ];
                LEDS[usize::from(kind.clamp(1, 9)) - 1]
            }
        };
        let spectrum: &colorimetry::spectrum::Spectrum = light.as_ref();
        Ok(*spectrum.as_array())
    }

    fn draw(rng: &mut StdRng) -> DrawnLight {
        match rng.random_range(0..4) {
            0 => DrawnLight::Daylight {
                kelvin: rng.random_range(5000.0..7500.0),
            },
            1 => DrawnLight::Incandescent {
                kelvin: rng.random_range(2600.0..3400.0),
            },
            2 => DrawnLight::Fluorescent {
                tube: rng.random_range(1..=12),
            },
            _ => DrawnLight::WhiteLed {
                kind: rng.random_range(1..=9),
            },
        }
    }
}

/// The specimen of a scenario.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum DrawnSpecimen {
    /// A beam in four-point bending whose ends overhang the supports (zero order there).
    Beam(BendingBeamField),
    /// A plate in uniform tension filling the frame.
    Uniform(UniformField),
    /// A plate with a hole under tension, filling the frame (Kirsch).
    Plate(HoleField),
    /// A disc in diametral compression (zero order along its rim).
    Disc(DiscField),
    /// A thick ring under internal pressure (Lamé).
    Ring(RingField),
    /// A plate with a semicircular edge notch under tension.
    Notch(EdgeNotchField),
}

impl DrawnSpecimen {
    /// A short name: `beam`, `uniform`, `plate`, `disc`, `ring` or `notch`.
    pub fn name(&self) -> &'static str {
        match self {
            DrawnSpecimen::Beam(_) => "beam",
            DrawnSpecimen::Uniform(_) => "uniform",
            DrawnSpecimen::Plate(_) => "plate",
            DrawnSpecimen::Disc(_) => "disc",
            DrawnSpecimen::Ring(_) => "ring",
            DrawnSpecimen::Notch(_) => "notch",
        }
    }

    /// A specimen and its photo size (pixels). `scale` multiplies every length.
    fn draw(rng: &mut StdRng, scale: f64) -> CoreResult<(DrawnSpecimen, u32, u32)> {
        let law = StressOpticLaw::new(FRINGE_VALUE, THICKNESS)?;
        let px = |v: f64| (v * scale).round() as u32;
        Ok(match rng.random_range(0..6) {
            0 => {
                // Beam 100–160 px deep, its ends 30–60 px past the supports.
                let (w, h) = (px(rng.random_range(560.0..720.0)), px(240.0));
                let (wf, hf) = (f64::from(w), f64::from(h));
                let depth = rng.random_range(0.42..0.66) * hf;
                let top = 0.5 * (hf - depth);
                let left = 0.04 * wf;
                let overhang = rng.random_range(0.05..0.1) * wf;
                let (s0, s1) = (left + overhang, wf - left - overhang);
                let span = s1 - s0;
                let inner = rng.random_range(0.25..0.35) * span;
                let field = BendingBeamField::new(
                    PixelRect::new(left, top, wf - left, top + depth)?,
                    (s0, s1),
                    (s0 + inner, s1 - inner),
                    rng.random_range(1.0..6.0),
                )?;
                (DrawnSpecimen::Beam(field), w, h)
            }
            1 => {
                let (w, h) = (
                    px(rng.random_range(280.0..420.0)),
                    px(rng.random_range(220.0..320.0)),
                );
                let field = UniformField {
                    area: PixelRect::new(0.0, 0.0, f64::from(w), f64::from(h))?,
                    order: rng.random_range(0.3..3.8),
                    isoclinic_rad: rng.random_range(0.0..PI),
                };
                (DrawnSpecimen::Uniform(field), w, h)
            }
            2 | 5 => {
                let (w, h) = (
                    px(rng.random_range(320.0..440.0)),
                    px(rng.random_range(260.0..340.0)),
                );
                let radius = rng.random_range(0.1..0.18) * f64::from(h.min(w));
                let remote = rng.random_range(0.3..3.8);
                let hole = HoleField::new(
                    PixelPoint {
                        x: f64::from(w) * rng.random_range(0.4..0.6),
                        y: f64::from(h) * rng.random_range(0.4..0.6),
                    },
                    radius,
                    PlateWithHole::new(5.0, law.stress_difference_mpa(remote))?,
                    law,
                )?;
                if rng.random_bool(0.5) {
                    (DrawnSpecimen::Plate(hole), w, h)
                } else {
                    let notch = HoleField {
                        centre: PixelPoint {
                            x: 0.0,
                            ..hole.centre
                        },
                        ..hole
                    };
                    (DrawnSpecimen::Notch(EdgeNotchField(notch)), w, h)
                }
            }
            3 => {
                // Centre order 0.6–8: load points always run past the table, often far.
                let radius = f64::from(px(rng.random_range(120.0..200.0)));
                let side = (2.0 * radius + 30.0).ceil() as u32;
                let disc = DiscInCompression::new(40.0, THICKNESS, 1.0)?;
                let centre_order = rng.random_range(0.6..8.0);
                let load =
                    law.stress_difference_mpa(centre_order) / disc.centre_stress_difference_mpa();
                let field = DiscField::new(
                    PixelPoint {
                        x: 0.5 * f64::from(side),
                        y: 0.5 * f64::from(side),
                    },
                    radius,
                    DiscInCompression::new(40.0, THICKNESS, load)?,
                    FRINGE_VALUE,
                )?;
                (DrawnSpecimen::Disc(field), side, side)
            }
            _ => {
                let outer = f64::from(px(rng.random_range(120.0..200.0)));
                let side = (2.0 * outer + 30.0).ceil() as u32;
                let field = RingField {
                    centre: PixelPoint {
                        x: 0.5 * f64::from(side),
                        y: 0.5 * f64::from(side),
                    },
                    inner_radius_px: outer * rng.random_range(0.3..0.6),
                    outer_radius_px: outer,
                    inner_order: rng.random_range(1.0..9.0),
                };
                (DrawnSpecimen::Ring(field), side, side)
            }
        })
    }
}

/// Everything about one drawn scene. Serialises to JSON for reports.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Scenario {
    /// The seed it was drawn from.
    pub seed: u64,
    /// Light source.
    pub light: DrawnLight,
    /// Camera channels, red, green, blue: (peak nm, standard deviation nm).
    pub camera_channels: [(f64, f64); 3],
    /// Wavelength at which the quarter-wave plates are exact, nm.
    pub plate_design_nm: f64,
    /// Birefringence dispersion of the material (see [`SpectralSetup::dispersion`]).
    pub dispersion: f64,
    /// Exposure of the calibration beam's photo, factor on linear light.
    pub beam_exposure: f64,
    /// Exposure of the specimen photo relative to the beam's.
    pub specimen_exposure: f32,
    /// Corner brightness of the specimen photo (vignetting; 1 = none).
    pub corner_brightness: f32,
    /// Lens blur of the beam photo, Gaussian σ in pixels.
    pub beam_blur_px: f32,
    /// Lens blur of the specimen photo, Gaussian σ in pixels.
    pub specimen_blur_px: f32,
    /// Sensor noise, σ in 8-bit code values (both photos).
    pub noise_codes: f32,
    /// File format of both photos.
    pub encoding: PhotoEncoding,
    /// The specimen.
    pub specimen: DrawnSpecimen,
    /// Specimen photo size, pixels.
    pub width: u32,
    /// See `width`.
    pub height: u32,
}

/// A scenario made: the calibration table from its beam photo, and the specimen photo with its
/// truth.
pub struct RenderedScenario {
    /// Table measured on the beam photo.
    pub table: CalibrationTable,
    /// The specimen photo, decoded from its file.
    pub photo: Photo,
    /// True order at each pixel centre; NaN off the specimen.
    pub true_order: Vec<f32>,
    /// The specimen (pixel centre on it).
    pub mask: Mask,
}

impl Scenario {
    /// The scene of `seed`.
    pub fn draw(seed: u64) -> CoreResult<Scenario> {
        let mut rng = StdRng::seed_from_u64(seed);
        let light = DrawnLight::draw(&mut rng);
        let camera_channels = [
            (rng.random_range(585.0..625.0), rng.random_range(22.0..45.0)),
            (rng.random_range(515.0..555.0), rng.random_range(25.0..45.0)),
            (rng.random_range(440.0..475.0), rng.random_range(18.0..35.0)),
        ];
        let plate_design_nm = rng.random_range(500.0..600.0);
        let dispersion = rng.random_range(0.0..0.12);
        let beam_exposure = rng.random_range(0.75..0.95);
        let specimen_exposure = rng.random_range(0.75..1.1);
        let corner_brightness = rng.random_range(0.8..1.0);
        let beam_blur_px = rng.random_range(0.4..1.2);
        let specimen_blur_px = rng.random_range(0.4..1.2);
        let noise_codes = rng.random_range(0.0..2.5);
        let quality = rng.random_range(80..=100);
        let encoding = match rng.random_range(0..5) {
            0 | 1 => PhotoEncoding::Png8,
            2 | 3 => PhotoEncoding::Jpeg { quality },
            _ => PhotoEncoding::JpegFullChroma { quality },
        };
        // One scene in ten is drawn three times larger: past a megapixel the solver works on
        // block means.
        let scale = if rng.random_bool(0.1) {
            3.0
        } else {
            rng.random_range(0.7..1.3)
        };
        let (specimen, width, height) = DrawnSpecimen::draw(&mut rng, scale)?;
        Ok(Scenario {
            seed,
            light,
            camera_channels,
            plate_design_nm,
            dispersion,
            beam_exposure,
            specimen_exposure,
            corner_brightness,
            beam_blur_px,
            specimen_blur_px,
            noise_codes,
            encoding,
            specimen,
            width,
            height,
        })
    }

    /// One line for people: seed, specimen, light, plates, file format.
    pub fn summary(&self) -> String {
        let light = match self.light {
            DrawnLight::Daylight { kelvin } => format!("daylight {kelvin:.0} K"),
            DrawnLight::Incandescent { kelvin } => format!("lamp {kelvin:.0} K"),
            DrawnLight::Fluorescent { tube } => format!("F{tube}"),
            DrawnLight::WhiteLed { kind } => format!("LED {kind}"),
        };
        let file = match self.encoding {
            PhotoEncoding::Png8 | PhotoEncoding::Png16 => "PNG".to_string(),
            PhotoEncoding::Jpeg { quality } => format!("JPEG {quality} 4:2:0"),
            PhotoEncoding::JpegFullChroma { quality } => format!("JPEG {quality} 4:4:4"),
        };
        format!(
            "seed {:>4} {:<7} {:>4}×{:<4} {:<15} plates {:.0} nm, disp {:.2}, exp {:.2}, corner {:.2}, blur {:.1}/{:.1}, noise {:.1}, {file}",
            self.seed,
            self.specimen.name(),
            self.width,
            self.height,
            light,
            self.plate_design_nm,
            self.dispersion,
            self.specimen_exposure,
            self.corner_brightness,
            self.beam_blur_px,
            self.specimen_blur_px,
            self.noise_codes,
        )
    }

    /// The renderer of this scene's light, camera, plates, material and beam exposure.
    fn renderer(&self) -> CoreResult<Renderer> {
        let spectrum = self.light.spectrum()?;
        Renderer::spectral(&SpectralSetup {
            balanced_weights: white_balanced(
                &gaussian_camera_weights(self.camera_channels),
                &spectrum,
            ),
            plates: QuarterWavePlates::designed(self.plate_design_nm)?,
            dispersion: self.dispersion,
            exposure: self.beam_exposure,
        })
    }

    /// Blur and noise of the calibration beam's photo.
    fn beam_effects(&self) -> PhotoEffects {
        PhotoEffects {
            blur_sigma_px: self.beam_blur_px,
            noise_sigma_codes: self.noise_codes,
            seed: self.seed.wrapping_mul(2),
            ..PhotoEffects::default()
        }
    }

    /// The calibration beam's photo ([`super::photographed_beam`], edge order
    /// [`super::PHOTOGRAPHED_BEAM_EDGE_ORDER`]) and its constant-moment zone.
    pub fn beam_photo(&self) -> CoreResult<(Photo, PixelRect)> {
        photographed_beam(&self.renderer()?, &self.beam_effects(), self.encoding)
    }

    /// Photographs the calibration beam and the specimen.
    pub fn render(&self) -> CoreResult<RenderedScenario> {
        let renderer = self.renderer()?;
        let table = photographed_beam_table(
            &renderer,
            &self.beam_effects(),
            self.encoding,
            CalibrationMetadata {
                name: format!("scenario {} beam", self.seed),
                ..Default::default()
            },
        )?;
        let scene = render_scene(
            &self.specimen,
            &renderer,
            self.width,
            self.height,
            SUPERSAMPLING,
        )?;
        let photo = self.specimen_photo(&scene.image, self.seed.wrapping_mul(2) + 1)?;
        Ok(RenderedScenario {
            table,
            photo,
            true_order: scene.true_order,
            mask: scene.mask,
        })
    }
}

impl Scenario {
    /// The specimen photographed in light field ([`super::render_light_field`]: analyser turned
    /// 90°, bright background, dark rim along the outline) with the same light, camera, plates,
    /// material, exposure, vignetting, blur, noise level and file format as [`Scenario::render`]'s
    /// dark-field photo, and its own noise. Same size as that photo.
    pub fn light_field_photo(&self) -> CoreResult<Photo> {
        let image = render_light_field(
            &self.specimen,
            &self.renderer()?,
            self.width,
            self.height,
            SUPERSAMPLING,
        )?;
        self.specimen_photo(&image, self.seed.wrapping_mul(2) + 2)
    }

    /// The specimen's camera effects and file format applied to `image`, decoded; `noise_seed`
    /// draws the sensor noise.
    fn specimen_photo(&self, image: &LinearImage, noise_seed: u64) -> CoreResult<Photo> {
        let fx = PhotoEffects {
            blur_sigma_px: self.specimen_blur_px,
            corner_brightness: self.corner_brightness,
            exposure: self.specimen_exposure,
            noise_sigma_codes: self.noise_codes,
            seed: noise_seed,
        };
        Photo::decode(
            &develop(image, &fx, self.encoding)?,
            &DecodeLimits::default(),
        )
    }
}

impl OrderField for DrawnSpecimen {
    fn sample(&self, x: f64, y: f64) -> Option<FieldSample> {
        match self {
            DrawnSpecimen::Beam(f) => f.sample(x, y),
            DrawnSpecimen::Uniform(f) => f.sample(x, y),
            DrawnSpecimen::Plate(f) => f.sample(x, y),
            DrawnSpecimen::Disc(f) => f.sample(x, y),
            DrawnSpecimen::Ring(f) => f.sample(x, y),
            DrawnSpecimen::Notch(f) => f.sample(x, y),
        }
    }
}

/// How far inside the specimen a pixel must lie to be scored, pixels: the edge's blur band
/// mixes the specimen's colour with the black surround.
pub const SCORED_INSET_PX: u32 = 3;
/// Scored pixels have a true field no steeper than this, fringes per pixel: the solver's
/// default maximum gradient ([`crate::MapOptions::max_gradient`]), fringes 5 px apart.
pub const SCORED_SLOPE: f32 = 0.2;
/// Scored pixels lie at least this far below the table's last order, fringes.
pub const SCORED_BELOW_TOP: f64 = 0.3;
/// Pixels more than this past the table's last order must not get a value, fringes.
pub const PAST_TABLE: f64 = 0.5;
/// Zero-order regions: pixels whose true order is at most this, fringes, at the pixel and at
/// every pixel within [`SCORED_INSET_PX`] of it (a region, not the thin zero line of a
/// neutral axis, which lens blur lifts above zero).
pub const ZERO_ORDER: f32 = 0.02;
/// A zero-order pixel is read right when its value is at most this, fringes.
pub const ZERO_ORDER_TOLERANCE: f32 = 0.05;
/// A value this far from the truth is a jump (a wrong fringe), fringes.
pub const JUMP: f32 = 0.5;

/// Figures of one map against its scenario's truth; shares are 0–1, NaN when the scene has no
/// pixel of that kind.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct SceneScore {
    /// The table's last order, fringes.
    pub table_top: f64,
    /// Scored pixels: ≥ [`SCORED_INSET_PX`] inside, true slope ≤ [`SCORED_SLOPE`], true order
    /// ≤ table top − [`SCORED_BELOW_TOP`].
    pub scored: usize,
    /// Mean absolute error over valued scored pixels, fringes.
    pub mae: f64,
    /// Share of valued scored pixels off by more than [`JUMP`].
    pub jumps: f64,
    /// Valued share of the scored pixels.
    pub coverage: f64,
    /// Share flagged beyond range of the pixels ≥ [`SCORED_INSET_PX`] inside whose true order
    /// is ≤ table top − [`SCORED_BELOW_TOP`] (any slope).
    pub false_beyond: f64,
    /// Pixels of zero-order regions (see [`ZERO_ORDER`]), ≥ [`SCORED_INSET_PX`] inside.
    pub zero_pixels: usize,
    /// Share of them valued within [`ZERO_ORDER_TOLERANCE`] of 0.
    pub zero_right: f64,
    /// Specimen pixels more than [`PAST_TABLE`] past the table's top.
    pub past_pixels: usize,
    /// Share of them that got a value.
    pub past_valued: f64,
    /// Valued scored pixels with an uncertainty.
    pub with_sigma: usize,
    /// Share of them within 2 σ of the truth.
    pub within_two_sigma: f64,
    /// Median σ over them, fringes.
    pub median_sigma: f64,
}

impl SceneScore {
    /// Scores `map` against the truth of `scene`.
    pub fn of(map: &OrderMap, scene: &RenderedScenario) -> SceneScore {
        let top = scene.table.max_order();
        let inner = scene.mask.eroded(SCORED_INSET_PX);
        let truth = &scene.true_order;
        let w = map.width as usize;
        let zero_region = Mask::new(
            map.width,
            map.height,
            truth.iter().map(|t| *t <= ZERO_ORDER).collect(),
        )
        .expect("the truth has one value per pixel")
        .eroded(SCORED_INSET_PX);
        let share = |part: usize, whole: usize| {
            if whole == 0 {
                f64::NAN
            } else {
                part as f64 / whole as f64
            }
        };
        let (mut scored, mut valued, mut sum, mut jumps) = (0, 0, 0.0, 0);
        let (mut low, mut false_beyond) = (0, 0);
        let (mut zero, mut zero_right) = (0, 0);
        let (mut past, mut past_valued) = (0, 0);
        let (mut within, mut sigmas) = (0, Vec::new());
        for (i, &t) in truth.iter().enumerate() {
            if !t.is_finite() {
                continue;
            }
            let o = map.order[i];
            if f64::from(t) > top + PAST_TABLE {
                past += 1;
                past_valued += usize::from(o.is_finite());
            }
            if !inner.as_slice()[i] {
                continue;
            }
            if zero_region.as_slice()[i] {
                zero += 1;
                zero_right += usize::from(o.is_finite() && o.abs() <= ZERO_ORDER_TOLERANCE);
            }
            if f64::from(t) > top - SCORED_BELOW_TOP {
                continue;
            }
            low += 1;
            false_beyond += usize::from(map.flags[i].has(PixelFlags::BEYOND_RANGE));
            // Central differences; the inset keeps neighbours on the specimen.
            let slope =
                ((truth[i + 1] - truth[i - 1]) / 2.0).hypot((truth[i + w] - truth[i - w]) / 2.0);
            if slope > SCORED_SLOPE {
                continue;
            }
            scored += 1;
            if o.is_finite() {
                valued += 1;
                let e = (o - t).abs();
                sum += f64::from(e);
                jumps += usize::from(e > JUMP);
                let s = map.uncertainty[i];
                if s.is_finite() {
                    sigmas.push(s);
                    within += usize::from(e <= 2.0 * s);
                }
            }
        }
        sigmas.sort_by(f32::total_cmp);
        SceneScore {
            table_top: top,
            scored,
            mae: sum / valued.max(1) as f64,
            jumps: share(jumps, valued),
            coverage: share(valued, scored),
            false_beyond: share(false_beyond, low),
            zero_pixels: zero,
            zero_right: share(zero_right, zero),
            past_pixels: past,
            past_valued: share(past_valued, past),
            with_sigma: sigmas.len(),
            within_two_sigma: share(within, sigmas.len()),
            median_sigma: sigmas
                .get(sigmas.len() / 2)
                .map_or(f64::NAN, |s| f64::from(*s)),
        }
    }
}
