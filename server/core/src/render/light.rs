//! Light sources of the polariscope, as CIE standard spectra (1 nm, 380–780 nm).

use colorimetry::illuminant::{Illuminant, A, D65, F11, F2};
use colorimetry::observer::Observer;
use palette::white_point::D65 as PaletteD65;
use palette::Xyz;
use serde::{Deserialize, Serialize};

use super::{wavelengths, SPECTRUM_SAMPLES, WAVELENGTHS_NM};
use crate::error::{CoreError, CoreResult};

/// A white light source behind the polariscope.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(into = "String", try_from = "String")]
pub enum LightSource {
    /// Average daylight, CIE D65 (6500 K); a smooth spectrum.
    Daylight,
    /// Incandescent or halogen lamp, CIE A (2856 K); smooth, rich in red.
    Halogen,
    /// Narrow tri-band fluorescent tube, CIE F11 (4000 K); three spiky emission bands.
    TriBand,
    /// Broad-band cool white fluorescent tube, CIE F2 (4230 K); mercury lines on a phosphor hump.
    CoolWhite,
}

impl LightSource {
    /// Every light source, in a fixed order.
    pub const ALL: [LightSource; 4] = [
        LightSource::Daylight,
        LightSource::Halogen,
        LightSource::TriBand,
        LightSource::CoolWhite,
    ];

    /// Parses a light source (case-insensitive): its [`description`](Self::description), or
    /// the short names files written before held (`d65`, `halogen`, `tri-band`, `cool-white`),
    /// the CIE codes `a`, `f11`, `f2`, or `daylight`.
    pub fn from_name(name: &str) -> CoreResult<LightSource> {
        let lower = name.trim().to_ascii_lowercase();
        let by_description = LightSource::ALL
            .into_iter()
            .find(|l| l.description().eq_ignore_ascii_case(&lower));
        let found = by_description.or(match lower.as_str() {
            "d65" | "daylight" => Some(LightSource::Daylight),
            "halogen" | "a" => Some(LightSource::Halogen),
            "tri-band" | "f11" => Some(LightSource::TriBand),
            "cool-white" | "f2" => Some(LightSource::CoolWhite),
            _ => None,
        });
        found.ok_or_else(|| {
            CoreError::invalid(
                "light",
                format!(
                    "unknown light source {name:?}; known: {}",
                    LightSource::ALL.map(LightSource::description).join("; ")
                ),
            )
        })
    }

    /// A few words for people; also how files and the API write the light source.
    pub fn description(self) -> &'static str {
        match self {
            LightSource::Daylight => "daylight (CIE D65)",
            LightSource::Halogen => "incandescent / halogen lamp (CIE A)",
            LightSource::TriBand => "narrow tri-band fluorescent tube (CIE F11)",
            LightSource::CoolWhite => "cool white fluorescent tube (CIE F2)",
        }
    }

    /// Relative spectral power at 380, 381, …, 780 nm (arbitrary scale).
    pub fn spectrum(self) -> &'static [f64; SPECTRUM_SAMPLES] {
        let illuminant: &'static Illuminant = match self {
            LightSource::Daylight => &D65,
            LightSource::Halogen => &A,
            LightSource::TriBand => &F11,
            LightSource::CoolWhite => &F2,
        };
        AsRef::<colorimetry::spectrum::Spectrum>::as_ref(illuminant).as_array()
    }

    /// CIE 1931 2° tristimulus values of this light after a spectral transmission
    /// `transmission(λ nm)` (0–1), normalised so that the light itself has Y = 1. The palette
    /// type's D65 tag is only the reference white for later conversions, not this light's colour.
    pub fn xyz(self, transmission: impl Fn(f64) -> f64) -> Xyz<PaletteD65, f64> {
        let spectrum = self.spectrum();
        let (mut x, mut y, mut z, mut y_white) = (0.0, 0.0, 0.0, 0.0);
        for ((nm, lambda), s) in WAVELENGTHS_NM.zip(wavelengths()).zip(spectrum) {
            let [xb, yb, zb] = cmf(nm);
            let t = transmission(lambda);
            x += s * xb * t;
            y += s * yb * t;
            z += s * zb * t;
            y_white += s * yb;
        }
        Xyz::new(x / y_white, y / y_white, z / y_white)
    }
}

/// CIE 1931 2° colour-matching functions x̄, ȳ, z̄ at `nm` (380–780).
pub(crate) fn cmf(nm: usize) -> [f64; 3] {
    Observer::Cie1931
        .xyz_at_wavelength(nm)
        .expect("wavelength inside 380–780 nm")
        .to_array()
}

serde_by_name!(LightSource);
