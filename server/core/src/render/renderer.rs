//! Precomputed colours of the polariscope as a function of retardation.

use std::f64::consts::PI;

use palette::{LinSrgb, Srgb};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::camera::CameraModel;
use super::light::LightSource;
use super::polariscope::QuarterWavePlates;
use super::{retardation_nm, wavelengths, REFERENCE_WAVELENGTH_NM, SPECTRUM_SAMPLES};
use crate::error::{CoreError, CoreResult};

/// Largest fringe order tabulated; beyond it colours are the fully washed-out mean.
pub const MAX_RENDERED_ORDER: f64 = 20.0;

/// Retardation grid step of the colour table, nm (colours are interpolated linearly between).
const RETARDATION_STEP_NM: f64 = 2.0;

/// Number of θ basis functions: 1, cos 4θ, sin 4θ, cos 2θ, sin 2θ.
const BASIS: usize = 5;

/// Everything that fixes the colour of a retardation.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct RenderSetup {
    /// Light source.
    pub light: LightSource,
    /// Camera model.
    pub camera: CameraModel,
    /// Quarter-wave plates.
    pub plates: QuarterWavePlates,
    /// Birefringence dispersion of the material (see [`SpectralSetup::dispersion`]); 0 = none.
    #[serde(default)]
    pub dispersion: f64,
    /// Exposure factor on linear light: full transmission renders as linear (e, e, e).
    pub exposure: f64,
}

impl Default for RenderSetup {
    /// Daylight, colorimetric camera, ideal plates, no dispersion, exposure 1.
    fn default() -> Self {
        RenderSetup {
            light: LightSource::Daylight,
            camera: CameraModel::Colorimetric,
            plates: QuarterWavePlates::Ideal,
            dispersion: 0.0,
            exposure: 1.0,
        }
    }
}

/// Everything that fixes the colour of a retardation, as spectra: what [`RenderSetup`] names,
/// or any light, camera and specimen material drawn by [`super::scenarios`].
#[derive(Debug, Clone, PartialEq)]
pub struct SpectralSetup {
    /// Per-wavelength linear-sRGB weights of light × camera (380, 381, …, 780 nm), white
    /// balanced so that they sum to (1, 1, 1): full transmission renders as white.
    pub balanced_weights: Vec<[f64; 3]>,
    /// Quarter-wave plates.
    pub plates: QuarterWavePlates,
    /// Birefringence dispersion of the specimen material: the retardation at wavelength λ is
    /// R(λ) = R · (1 + d · ((λ_ref/λ)² − 1)), R = N · λ_ref ([`super::REFERENCE_WAVELENGTH_NM`]).
    /// 0 = none; polymers show a few hundredths to about a tenth (more retardation in blue).
    pub dispersion: f64,
    /// Exposure factor on linear light: full transmission renders as linear (e, e, e).
    pub exposure: f64,
}

impl From<RenderSetup> for SpectralSetup {
    fn from(setup: RenderSetup) -> SpectralSetup {
        SpectralSetup {
            balanced_weights: setup.camera.balanced_weights(setup.light),
            plates: setup.plates,
            dispersion: setup.dispersion,
            exposure: setup.exposure,
        }
    }
}

/// Colour of every retardation for one [`SpectralSetup`], tabulated every 2 nm up to
/// [`MAX_RENDERED_ORDER`]. Build once, then look up many samples (cheap, thread-safe).
#[derive(Debug, Clone)]
pub struct Renderer {
    /// Exposure factor on linear light.
    exposure: f64,
    /// Per retardation step, the linear-sRGB coefficient of each θ basis function (exposure 1).
    rows: Vec<[[f32; 3]; BASIS]>,
    /// The same for infinite retardation (cos δ and sin δ averaged out).
    washout: [[f32; 3]; BASIS],
    /// True when the colour does not depend on θ (ideal plates).
    isotropic: bool,
}

/// Per-wavelength weights of the θ basis: constant, ×cos δ, and the (1 − cos δ)/2 and
/// sin δ/2 terms.
#[derive(Clone, Copy)]
struct WavelengthWeights {
    /// Phase per nm of retardation at this wavelength, 2π/λ with dispersion, rad/nm.
    phase_per_nm: f64,
    constant: [f64; 3],
    with_cos: [f64; 3],
    quartic: [[f64; 3]; 2],
    double: [[f64; 3]; 2],
}

impl Renderer {
    /// Builds the colour table of a named setup; see [`Renderer::spectral`].
    pub fn new(setup: RenderSetup) -> CoreResult<Renderer> {
        Renderer::spectral(&setup.into())
    }

    /// Builds the colour table: 401 wavelengths × 5751 retardations, about 0.1 s in release
    /// mode on two cores. Build once per setup and share.
    pub fn spectral(setup: &SpectralSetup) -> CoreResult<Renderer> {
        if !(setup.exposure.is_finite() && setup.exposure > 0.0) {
            return Err(CoreError::invalid(
                "exposure",
                format!("must be a positive number, got {}", setup.exposure),
            ));
        }
        if let Some(design) = setup.plates.design_nm() {
            QuarterWavePlates::designed(design)?;
        }
        if setup.balanced_weights.len() != SPECTRUM_SAMPLES {
            return Err(CoreError::invalid(
                "balanced_weights",
                format!(
                    "needs {SPECTRUM_SAMPLES} wavelengths, got {}",
                    setup.balanced_weights.len()
                ),
            ));
        }
        if !(setup.dispersion.is_finite() && setup.dispersion.abs() <= 0.5) {
            return Err(CoreError::invalid(
                "dispersion",
                format!("must lie in −0.5–0.5, got {}", setup.dispersion),
            ));
        }
        let dispersion = setup.dispersion;
        let per_lambda: Vec<WavelengthWeights> = wavelengths()
            .zip(setup.balanced_weights.iter().copied())
            .map(|(lambda, wk)| {
                let t = setup.plates.terms(lambda);
                let scaled = |c: f64| wk.map(|v| v * c);
                WavelengthWeights {
                    // Dispersion scales the phase 2πR/λ at this wavelength.
                    phase_per_nm: 2.0 * PI / lambda
                        * (1.0 + dispersion * ((REFERENCE_WAVELENGTH_NM / lambda).powi(2) - 1.0)),
                    constant: scaled(t.m0),
                    with_cos: scaled(t.m1),
                    quartic: [scaled(0.5 * t.q1), scaled(0.5 * t.q2)],
                    double: [scaled(0.5 * t.u1), scaled(0.5 * t.u2)],
                }
            })
            .collect();
        let steps = (retardation_nm(MAX_RENDERED_ORDER) / RETARDATION_STEP_NM).ceil() as usize;
        let rows: Vec<[[f32; 3]; BASIS]> = (0..=steps)
            .into_par_iter()
            .map(|i| {
                let r = i as f64 * RETARDATION_STEP_NM;
                row(&per_lambda, |phase_per_nm| (phase_per_nm * r).sin_cos())
            })
            .collect();
        let washout = row(&per_lambda, |_| (0.0, 0.0));
        let isotropic = setup.plates.design_nm().is_none();
        Ok(Renderer {
            exposure: setup.exposure,
            rows,
            washout,
            isotropic,
        })
    }

    /// Linear-sRGB colour (exposure applied, not clipped) of fringe order `order` with the
    /// specimen's fast axis at `fast_axis_rad` (radians from +x towards +y). Negative orders
    /// are treated as their magnitude; orders past [`MAX_RENDERED_ORDER`] are washed out.
    pub fn linear(&self, order: f64, fast_axis_rad: f64) -> LinSrgb<f32> {
        let coeffs = self.interpolated(order);
        let mut c = coeffs[0];
        if !self.isotropic {
            let (s2, c2) = (2.0 * fast_axis_rad).sin_cos();
            let (s4, c4) = (2.0 * s2 * c2, c2 * c2 - s2 * s2);
            let g = [c4, s4, c2, s2].map(|v| v as f32);
            for (j, gj) in g.iter().enumerate() {
                for k in 0..3 {
                    c[k] += gj * coeffs[j + 1][k];
                }
            }
        }
        let e = self.exposure as f32;
        LinSrgb::new(c[0] * e, c[1] * e, c[2] * e)
    }

    /// Linear-sRGB colour (exposure applied, not clipped) of the same polariscope in light
    /// field (analyser turned 90°, parallel to the polariser): at each wavelength the
    /// transmission is 1 − the dark-field one (common practice, no source), so with the
    /// white-balanced weights summing to 1 the colour is exposure × (1, 1, 1) − the dark-field
    /// colour. Order 0 (and no specimen at all) is full-exposure white.
    pub fn linear_light_field(&self, order: f64, fast_axis_rad: f64) -> LinSrgb<f32> {
        let dark = self.linear(order, fast_axis_rad);
        let e = self.exposure as f32;
        LinSrgb::new(e - dark.red, e - dark.green, e - dark.blue)
    }

    /// Linear-sRGB colour of `order` averaged over all fast-axis angles (exposure applied).
    /// Equal to [`Renderer::linear`] for ideal plates.
    pub fn linear_isoclinic_mean(&self, order: f64) -> LinSrgb<f32> {
        let c = self.interpolated(order)[0];
        let e = self.exposure as f32;
        LinSrgb::new(c[0] * e, c[1] * e, c[2] * e)
    }

    /// 8-bit sRGB of [`Renderer::linear`], clipped to 0–1 in linear light first.
    pub fn srgb8(&self, order: f64, fast_axis_rad: f64) -> Srgb<u8> {
        encode_srgb8(self.linear(order, fast_axis_rad))
    }

    fn interpolated(&self, order: f64) -> [[f32; 3]; BASIS] {
        let pos = retardation_nm(order.abs()) / RETARDATION_STEP_NM;
        if !pos.is_finite() || pos >= (self.rows.len() - 1) as f64 {
            return self.washout;
        }
        let i = pos as usize;
        let t = (pos - i as f64) as f32;
        let (a, b) = (&self.rows[i], &self.rows[i + 1]);
        std::array::from_fn(|j| std::array::from_fn(|k| a[j][k] + t * (b[j][k] - a[j][k])))
    }
}

/// One table row: Σ over wavelengths of the basis coefficients at the (sin δ, cos δ) that
/// `phase(phase_per_nm)` gives.
#[allow(clippy::needless_range_loop)] // five accumulators share the channel index
fn row(per_lambda: &[WavelengthWeights], phase: impl Fn(f64) -> (f64, f64)) -> [[f32; 3]; BASIS] {
    let mut acc = [[0.0f64; 3]; BASIS];
    for w in per_lambda {
        let (sd, cd) = phase(w.phase_per_nm);
        let one_minus = 1.0 - cd;
        for k in 0..3 {
            acc[0][k] += w.constant[k] + w.with_cos[k] * cd;
            acc[1][k] += w.quartic[0][k] * one_minus;
            acc[2][k] += w.quartic[1][k] * one_minus;
            acc[3][k] += w.double[0][k] * sd;
            acc[4][k] += w.double[1][k] * sd;
        }
    }
    acc.map(|c| c.map(|v| v as f32))
}

/// 8-bit sRGB of a linear colour, clipped to 0–1 first.
pub(crate) fn encode_srgb8(c: LinSrgb<f32>) -> Srgb<u8> {
    Srgb::<f32>::from_linear(clip(c)).into_format::<u8>()
}

/// A linear colour clipped to 0–1 per channel.
pub(crate) fn clip(c: LinSrgb<f32>) -> LinSrgb<f32> {
    LinSrgb::new(
        c.red.clamp(0.0, 1.0),
        c.green.clamp(0.0, 1.0),
        c.blue.clamp(0.0, 1.0),
    )
}
