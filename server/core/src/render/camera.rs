//! Camera models: spectral sensitivities and the 3×3 matrix that takes them to linear sRGB.
//!
//! Each model reduces to one linear-sRGB weight triple per wavelength (1 nm, 380–780 nm), the
//! sensitivities already multiplied by the model's matrix. White balance and exposure are
//! applied later by the [`super::Renderer`].

use std::sync::OnceLock;

use nalgebra::{Matrix3, Vector3};
use palette::LinSrgb;
use serde::{Deserialize, Serialize};

use super::light::{cmf, LightSource};
use super::polariscope::ideal_dark_field;
use super::{wavelengths, SPECTRUM_SAMPLES, WAVELENGTHS_NM};
use crate::error::{CoreError, CoreResult};

/// XYZ → linear sRGB, IEC 61966-2-1:1999 (D65 white).
const XYZ_TO_LINEAR_SRGB: [[f64; 3]; 3] = [
    [3.2406, -1.5372, -0.4986],
    [-0.9689, 1.8758, 0.0415],
    [0.0557, -0.2040, 1.0570],
];

/// Peak wavelength and standard deviation (nm) of the Gaussian channels of
/// [`CameraModel::Sensor`], red, green, blue.
const SENSOR_CHANNELS: [(f64, f64); 3] = [(600.0, 32.0), (535.0, 38.0), (460.0, 28.0)];

/// A camera model.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(into = "String", try_from = "String")]
pub enum CameraModel {
    /// An ideal colorimetric camera: CIE 1931 2° observer → XYZ → linear sRGB by the
    /// IEC 61966-2-1 matrix.
    Colorimetric,
    /// A typical colour sensor with Gaussian RGB sensitivities (peaks 600, 535, 460 nm;
    /// σ 32, 38, 28 nm) and a 3×3 matrix to linear sRGB fitted by least squares under D65, so
    /// it is only roughly colorimetric.
    Sensor,
}

impl CameraModel {
    /// Every camera model, in a fixed order.
    pub const ALL: [CameraModel; 2] = [CameraModel::Colorimetric, CameraModel::Sensor];

    /// A few words for people; also how files and the API write the camera.
    pub fn description(self) -> &'static str {
        match self {
            CameraModel::Colorimetric => "ideal colorimetric camera (CIE 1931 observer)",
            CameraModel::Sensor => "typical colour sensor (Gaussian RGB channels)",
        }
    }

    /// Parses a camera (case-insensitive): its [`description`](Self::description), or the
    /// short names files written before held: `cie1931` (or `colorimetric`), `gaussian-sensor`
    /// (or `sensor`).
    pub fn from_name(name: &str) -> CoreResult<CameraModel> {
        let lower = name.trim().to_ascii_lowercase();
        let by_description = CameraModel::ALL
            .into_iter()
            .find(|c| c.description().eq_ignore_ascii_case(&lower));
        let found = by_description.or(match lower.as_str() {
            "cie1931" | "colorimetric" => Some(CameraModel::Colorimetric),
            "gaussian-sensor" | "sensor" => Some(CameraModel::Sensor),
            _ => None,
        });
        found.ok_or_else(|| {
            CoreError::invalid(
                "camera",
                format!(
                    "unknown camera {name:?}; known: {}",
                    CameraModel::ALL.map(CameraModel::description).join("; ")
                ),
            )
        })
    }

    /// Linear-sRGB response weights per wavelength (380, 381, …, 780 nm), before white
    /// balance: a spectrum E(λ) gives Σ E(λ)·w(λ).
    pub(crate) fn weights(self) -> &'static [[f64; 3]] {
        static COLORIMETRIC: OnceLock<Vec<[f64; 3]>> = OnceLock::new();
        static SENSOR: OnceLock<Vec<[f64; 3]>> = OnceLock::new();
        match self {
            CameraModel::Colorimetric => COLORIMETRIC.get_or_init(|| {
                WAVELENGTHS_NM
                    .map(|nm| apply(&xyz_to_srgb(), cmf(nm)))
                    .collect()
            }),
            CameraModel::Sensor => SENSOR.get_or_init(|| gaussian_camera_weights(SENSOR_CHANNELS)),
        }
    }

    /// Per-wavelength linear-sRGB weights S(λ)·w(λ) under `light`, white balanced so that they
    /// sum to (1, 1, 1).
    pub(crate) fn balanced_weights(self, light: LightSource) -> Vec<[f64; 3]> {
        white_balanced(self.weights(), light.spectrum())
    }

    /// Linear sRGB of `light` after the spectral transmission `transmission(λ nm)` (0–1), white
    /// balanced so that full transmission gives (1, 1, 1).
    pub fn balanced_response(
        self,
        light: LightSource,
        transmission: impl Fn(f64) -> f64,
    ) -> LinSrgb<f64> {
        let mut c = [0.0; 3];
        for (w, lambda) in self.balanced_weights(light).iter().zip(wavelengths()) {
            let t = transmission(lambda);
            for k in 0..3 {
                c[k] += w[k] * t;
            }
        }
        LinSrgb::new(c[0], c[1], c[2])
    }
}

fn xyz_to_srgb() -> Matrix3<f64> {
    let m = XYZ_TO_LINEAR_SRGB;
    Matrix3::from_fn(|r, c| m[r][c])
}

fn apply(m: &Matrix3<f64>, v: [f64; 3]) -> [f64; 3] {
    (m * Vector3::from(v)).into()
}

/// Σ S(λ)·T(λ)·w(λ) over the wavelength grid.
fn raw_response(
    weights: &[[f64; 3]],
    spectrum: &[f64; SPECTRUM_SAMPLES],
    transmission: impl Fn(f64) -> f64,
) -> [f64; 3] {
    let mut sum = [0.0; 3];
    for ((w, s), lambda) in weights.iter().zip(spectrum).zip(wavelengths()) {
        let e = s * transmission(lambda);
        for k in 0..3 {
            sum[k] += e * w[k];
        }
    }
    sum
}

/// Per-wavelength weights S(λ)·w(λ) of camera `weights` (linear sRGB, 380–780 nm at 1 nm)
/// under the light `spectrum`, white balanced so that they sum to (1, 1, 1).
pub fn white_balanced(weights: &[[f64; 3]], spectrum: &[f64; SPECTRUM_SAMPLES]) -> Vec<[f64; 3]> {
    let white = raw_response(weights, spectrum, |_| 1.0);
    weights
        .iter()
        .zip(spectrum)
        .map(|(w, s)| std::array::from_fn(|k| s * w[k] / white[k]))
        .collect()
}

/// Linear-sRGB weights per wavelength (380–780 nm at 1 nm, before white balance) of a camera
/// with Gaussian red, green and blue channels `(peak nm, standard deviation nm)` and a 3×3
/// matrix to linear sRGB fitted by least squares as for [`CameraModel::Sensor`].
pub fn gaussian_camera_weights(channels: [(f64, f64); 3]) -> Vec<[f64; 3]> {
    let matrix = fit_sensor_matrix(channels);
    gaussian_sensitivities(channels)
        .map(|s| apply(&matrix, s))
        .collect()
}

/// Raw sensitivities per wavelength (peak 1) of Gaussian channels `(peak nm, σ nm)`.
fn gaussian_sensitivities(channels: [(f64, f64); 3]) -> impl Iterator<Item = [f64; 3]> {
    wavelengths().map(move |lambda| {
        channels.map(|(peak, sigma)| (-0.5 * ((lambda - peak) / sigma).powi(2)).exp())
    })
}

/// Least-squares 3×3 matrix M minimising Σ |M·raw − target|² over training spectra: D65 seen
/// through an ideal dark-field polariscope at retardations 0–3000 nm (every 20 nm) plus the
/// open light, with the colorimetric camera's linear sRGB as target. These are exactly the
/// colours the camera is used for.
fn fit_sensor_matrix(channels: [(f64, f64); 3]) -> Matrix3<f64> {
    let raw_weights: Vec<[f64; 3]> = gaussian_sensitivities(channels).collect();
    let target_weights = CameraModel::Colorimetric.weights();
    let spectrum = LightSource::Daylight.spectrum();
    let mut raw_raw = Matrix3::zeros();
    let mut target_raw = Matrix3::zeros();
    let retardations = (0..=150).map(|i| Some(f64::from(i) * 20.0)).chain([None]);
    for retardation in retardations {
        let transmission = |lambda: f64| retardation.map_or(1.0, |r| ideal_dark_field(lambda, r));
        let raw = Vector3::from(raw_response(&raw_weights, spectrum, transmission));
        let target = Vector3::from(raw_response(target_weights, spectrum, transmission));
        raw_raw += raw * raw.transpose();
        target_raw += target * raw.transpose();
    }
    let inverse = raw_raw
        .try_inverse()
        .expect("the training colours span all three channels");
    target_raw * inverse
}

serde_by_name!(CameraModel);
