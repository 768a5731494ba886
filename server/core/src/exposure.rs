//! Exposure, white-balance and vignetting drift between the calibration photo and a specimen
//! photo, modelled as a gain on linear light:
//!
//! `corrected_c(x, y) = observed_c(x, y) · gain_c · (1 + vignetting · ρ²)`
//!
//! where c is the linear-sRGB channel and ρ the distance from the image centre divided by the
//! half-diagonal (0 at the centre, 1 in the corners).

use palette::LinSrgb;
use serde::{Deserialize, Serialize};

/// A correction applied to linear-light sRGB before conversion to CIELAB.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ExposureCorrection {
    /// Per-channel gain [red, green, blue] on linear light.
    pub gain: [f32; 3],
    /// Radial brightening coefficient (0 = none): gains grow by `1 + vignetting·ρ²`.
    pub vignetting: f32,
}

impl ExposureCorrection {
    /// The identity correction.
    pub const NONE: ExposureCorrection = ExposureCorrection {
        gain: [1.0; 3],
        vignetting: 0.0,
    };

    /// Applies the correction to the linear colour of pixel (x, y) in a `width` × `height` image.
    #[inline]
    pub fn apply(
        &self,
        c: LinSrgb<f32>,
        x: usize,
        y: usize,
        width: u32,
        height: u32,
    ) -> LinSrgb<f32> {
        let radial = if self.vignetting == 0.0 {
            1.0
        } else {
            1.0 + self.vignetting * radius_sq(x, y, width, height)
        };
        LinSrgb::new(
            c.red * self.gain[0] * radial,
            c.green * self.gain[1] * radial,
            c.blue * self.gain[2] * radial,
        )
    }
}

/// ρ² of pixel (x, y): squared distance of its centre from the image centre over the squared
/// half-diagonal.
#[inline]
pub fn radius_sq(x: usize, y: usize, width: u32, height: u32) -> f32 {
    let (cx, cy) = (width as f32 * 0.5, height as f32 * 0.5);
    let (dx, dy) = (x as f32 + 0.5 - cx, y as f32 + 0.5 - cy);
    (dx * dx + dy * dy) / (cx * cx + cy * cy)
}
