//! Spectral renderer: what a camera sees of a loaded birefringent model in a white-light
//! dark-field circular polariscope.
//!
//! The chain, per pixel sample: light source spectrum S(λ) → polariser → quarter-wave plate at
//! +45° → specimen (retardation R, fast axis along the isoclinic) → quarter-wave plate at −45° →
//! crossed analyser → camera sensitivities → 3×3 matrix to linear sRGB → white balance on the
//! light source → exposure → sRGB transfer function. With ideal plates the transmitted
//! intensity is I(λ) = S(λ) · sin²(πR/λ).
//!
//! Spectra are integrated at 1 nm over 380–780 nm ([`WAVELENGTHS_NM`]). Per-retardation colours
//! are precomputed once per [`Renderer`] so rendering a photo is a table lookup per sample.
//!
//! Conventions: fringe order N and retardation R are related by R = N · [`REFERENCE_WAVELENGTH_NM`].
//! Angles are radians from +x towards +y (down) in pixel coordinates; pixel (x, y) covers
//! [x, x+1) × [y, y+1).

/// Serialisation of a named renderer choice through its `description()` and `from_name()`:
/// plain words everywhere people see it (calibration tables, scenario files, API answers),
/// older short names still read.
macro_rules! serde_by_name {
    ($t:ty) => {
        impl From<$t> for String {
            fn from(value: $t) -> String {
                value.description().to_string()
            }
        }

        impl TryFrom<String> for $t {
            type Error = $crate::error::CoreError;

            fn try_from(name: String) -> $crate::error::CoreResult<$t> {
                <$t>::from_name(&name)
            }
        }
    };
}

pub mod calibrate;
pub mod camera;
pub mod demo;
pub mod effects;
pub mod fields;
pub mod light;
pub mod polariscope;
mod renderer;
pub mod scenarios;
pub mod scene;

pub use calibrate::{
    check_order_limit, load_preview, photographed_beam, photographed_beam_table, rendered_table,
    OrderLimitCheck, PreviewSwatch, PHOTOGRAPHED_BEAM_EDGE_ORDER,
};
pub use camera::CameraModel;
pub use effects::{develop, develop_srgb8, PhotoEffects, PhotoEncoding};
pub use fields::{
    BendingBeamField, DiscField, EdgeNotchField, FieldSample, HoleField, OrderField, RingField,
    UniformField,
};
pub use light::LightSource;
pub use polariscope::QuarterWavePlates;
pub use renderer::{RenderSetup, Renderer, SpectralSetup, MAX_RENDERED_ORDER};
pub use scene::{
    render_light_field, render_scene, LinearImage, RenderedScene, LIGHT_FIELD_RIM_PX,
    LIGHT_FIELD_RIM_TRANSMISSION,
};

/// Wavelength at which one fringe order equals one wavelength of retardation, nm.
///
/// R = N · 575 nm puts the first-order tint of passage (the sharp red-to-blue change where
/// green-yellow light is extinguished) at N = 1, the usual convention for white-light work.
pub const REFERENCE_WAVELENGTH_NM: f64 = 575.0;

/// Wavelengths integrated over, nm, in 1 nm steps (401 samples).
pub const WAVELENGTHS_NM: std::ops::RangeInclusive<usize> = 380..=780;

/// Number of samples in [`WAVELENGTHS_NM`].
pub const SPECTRUM_SAMPLES: usize = 401;

/// Retardation (nm) of fringe order `order`: R = N · λ_ref.
pub fn retardation_nm(order: f64) -> f64 {
    order * REFERENCE_WAVELENGTH_NM
}

/// Fringe order of a retardation (nm): N = R / λ_ref.
pub fn order_from_retardation(retardation_nm: f64) -> f64 {
    retardation_nm / REFERENCE_WAVELENGTH_NM
}

/// The wavelengths of [`WAVELENGTHS_NM`] as `f64`, nm.
pub(crate) fn wavelengths() -> impl Iterator<Item = f64> {
    WAVELENGTHS_NM.map(|nm| nm as f64)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn light_sources_and_cameras_are_written_in_plain_words_and_read_by_any_known_name() {
        for light in LightSource::ALL {
            let json = serde_json::to_value(light).unwrap();
            assert_eq!(json, light.description());
            assert_eq!(serde_json::from_value::<LightSource>(json).unwrap(), light);
        }
        for camera in CameraModel::ALL {
            let json = serde_json::to_value(camera).unwrap();
            assert_eq!(json, camera.description());
            assert_eq!(serde_json::from_value::<CameraModel>(json).unwrap(), camera);
        }
        // The short names files written before held still read, as do other spellings.
        let read = |s: &str| serde_json::from_value::<LightSource>(s.into());
        assert_eq!(read("d65").unwrap(), LightSource::Daylight);
        assert_eq!(read("daylight").unwrap(), LightSource::Daylight);
        assert_eq!(read("F11").unwrap(), LightSource::TriBand);
        assert_eq!(read("cool-white").unwrap(), LightSource::CoolWhite);
        let camera = |s: &str| serde_json::from_value::<CameraModel>(s.into()).unwrap();
        assert_eq!(camera("gaussian-sensor"), CameraModel::Sensor);
        assert_eq!(camera("sensor"), CameraModel::Sensor);
        assert_eq!(camera("CIE1931"), CameraModel::Colorimetric);
        // An unknown name is refused with a message naming the known ones in words.
        let refused = read("sodium").unwrap_err().to_string();
        assert!(
            refused.contains("daylight (CIE D65); incandescent"),
            "{refused}"
        );
    }
}
