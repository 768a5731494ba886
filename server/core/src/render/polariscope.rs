//! The dark-field circular polariscope in Jones calculus.
//!
//! Optical train (angles from +x towards +y): polariser along x, quarter-wave plate with its
//! fast axis at +45°, specimen (retardance δ = 2πR/λ, fast axis at θ), quarter-wave plate at
//! −45°, analyser along y (crossed). Intensities are relative to the light leaving the
//! polariser, so the ideal instrument transmits sin²(πR/λ) ∈ [0, 1].
//!
//! Real plates are quarter-wave at one design wavelength only: their retardance is
//! (π/2) · λ_design / λ. Then the transmission depends on θ too. For any plates it has the exact
//! form
//!
//! I(δ, θ) = m0 + m1·cos δ + (q1·cos 4θ + q2·sin 4θ)·(1 − cos δ)/2 + (u1·cos 2θ + u2·sin 2θ)·sin δ/2
//!
//! with six numbers per wavelength ([`DarkFieldTerms`]); the renderer tabulates colours on
//! that basis so it never evaluates matrices per pixel.

use std::f64::consts::{FRAC_PI_2, FRAC_PI_4, PI};

use nalgebra::{Matrix2, Vector2};
use num_complex::Complex64;
use serde::{Deserialize, Serialize};

use crate::error::{CoreError, CoreResult};

/// The quarter-wave plates of the polariscope.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum QuarterWavePlates {
    /// Achromatic plates, exactly quarter-wave at every wavelength.
    Ideal,
    /// Plates that are quarter-wave at `design_nm` only; retardance (π/2)·λ_design/λ.
    Designed {
        /// Wavelength at which the plates are exact, nm (380–780).
        design_nm: f64,
    },
}

impl QuarterWavePlates {
    /// Plates exact at `design_nm` (nm, within 380–780).
    pub fn designed(design_nm: f64) -> CoreResult<Self> {
        if !(design_nm.is_finite() && (380.0..=780.0).contains(&design_nm)) {
            return Err(CoreError::invalid(
                "plate_design_nm",
                format!("must lie in 380–780 nm, got {design_nm}"),
            ));
        }
        Ok(QuarterWavePlates::Designed { design_nm })
    }

    /// The design wavelength, nm; `None` for ideal (achromatic) plates.
    pub fn design_nm(&self) -> Option<f64> {
        match *self {
            QuarterWavePlates::Ideal => None,
            QuarterWavePlates::Designed { design_nm } => Some(design_nm),
        }
    }

    /// Retardance of one plate at `wavelength_nm`, radians.
    fn retardance(&self, wavelength_nm: f64) -> f64 {
        match *self {
            QuarterWavePlates::Ideal => FRAC_PI_2,
            QuarterWavePlates::Designed { design_nm } => FRAC_PI_2 * design_nm / wavelength_nm,
        }
    }

    /// Transmitted intensity (0–1, relative to the light after the polariser) at one
    /// wavelength, by direct Jones matrix products. `fast_axis_rad` is the specimen's fast axis.
    pub fn transmission(&self, wavelength_nm: f64, retardation_nm: f64, fast_axis_rad: f64) -> f64 {
        let gamma = self.retardance(wavelength_nm);
        let delta = 2.0 * PI * retardation_nm / wavelength_nm;
        let out = analyser()
            * retarder(-FRAC_PI_4, gamma)
            * retarder(fast_axis_rad, delta)
            * retarder(FRAC_PI_4, gamma)
            * polarised_input();
        out.norm_squared()
    }

    /// The six transmission terms at one wavelength (see the module documentation).
    pub fn terms(&self, wavelength_nm: f64) -> DarkFieldTerms {
        let gamma = self.retardance(wavelength_nm);
        let after_first = retarder(FRAC_PI_4, gamma) * polarised_input();
        let second = analyser() * retarder(-FRAC_PI_4, gamma);
        let minus_i = Complex64::new(0.0, -1.0);
        let pauli_z = Matrix2::new(
            Complex64::new(1.0, 0.0),
            Complex64::new(0.0, 0.0),
            Complex64::new(0.0, 0.0),
            Complex64::new(-1.0, 0.0),
        );
        let pauli_x = Matrix2::new(
            Complex64::new(0.0, 0.0),
            Complex64::new(1.0, 0.0),
            Complex64::new(1.0, 0.0),
            Complex64::new(0.0, 0.0),
        );
        // Specimen = cos(δ/2)·1 − i·sin(δ/2)·(cos 2θ·Z + sin 2θ·X), so the output field is
        // cos(δ/2)·a + sin(δ/2)·(cos 2θ·b + sin 2θ·d).
        let a = second * after_first;
        let b = second * pauli_z * after_first * minus_i;
        let d = second * pauli_x * after_first * minus_i;
        let p = a.norm_squared();
        let q0 = 0.5 * (b.norm_squared() + d.norm_squared());
        DarkFieldTerms {
            m0: 0.5 * (p + q0),
            m1: 0.5 * (p - q0),
            q1: 0.5 * (b.norm_squared() - d.norm_squared()),
            q2: b.dotc(&d).re,
            u1: 2.0 * b.dotc(&a).re,
            u2: 2.0 * d.dotc(&a).re,
        }
    }
}

/// Transmission of the ideal dark-field circular polariscope at one wavelength: sin²(πR/λ).
pub fn ideal_dark_field(wavelength_nm: f64, retardation_nm: f64) -> f64 {
    (PI * retardation_nm / wavelength_nm).sin().powi(2)
}

/// The six numbers that give the transmission at one wavelength for any retardance δ and
/// fast-axis angle θ (see the module documentation). Ideal plates: m0 = ½, m1 = −½, rest 0.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DarkFieldTerms {
    /// Constant term.
    pub m0: f64,
    /// Coefficient of cos δ.
    pub m1: f64,
    /// Coefficient of cos 4θ · (1 − cos δ)/2.
    pub q1: f64,
    /// Coefficient of sin 4θ · (1 − cos δ)/2.
    pub q2: f64,
    /// Coefficient of cos 2θ · sin δ/2.
    pub u1: f64,
    /// Coefficient of sin 2θ · sin δ/2.
    pub u2: f64,
}

impl DarkFieldTerms {
    /// Transmission (0–1) for retardance `delta` (radians) and fast axis `theta` (radians).
    pub fn transmission(&self, delta: f64, theta: f64) -> f64 {
        let (sd, cd) = delta.sin_cos();
        self.m0
            + self.m1 * cd
            + (self.q1 * (4.0 * theta).cos() + self.q2 * (4.0 * theta).sin()) * 0.5 * (1.0 - cd)
            + (self.u1 * (2.0 * theta).cos() + self.u2 * (2.0 * theta).sin()) * 0.5 * sd
    }
}

/// Light after the polariser: unit amplitude along x.
fn polarised_input() -> Vector2<Complex64> {
    Vector2::new(Complex64::new(1.0, 0.0), Complex64::new(0.0, 0.0))
}

/// Analyser along y.
fn analyser() -> Matrix2<Complex64> {
    let zero = Complex64::new(0.0, 0.0);
    Matrix2::new(zero, zero, zero, Complex64::new(1.0, 0.0))
}

/// A linear retarder with its fast axis at `axis` (radians) and retardance `retardance`
/// (radians): R(axis) · diag(e^{−iΓ/2}, e^{iΓ/2}) · R(−axis).
fn retarder(axis: f64, retardance: f64) -> Matrix2<Complex64> {
    let (s2, c2) = (2.0 * axis).sin_cos();
    let (sh, ch) = (0.5 * retardance).sin_cos();
    let c = Complex64::new(ch, 0.0);
    let k = Complex64::new(0.0, -sh);
    Matrix2::new(c + k * c2, k * s2, k * s2, c - k * c2)
}
