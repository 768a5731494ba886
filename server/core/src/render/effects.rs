//! Photo effects and encoding: what a real camera and lens add to a rendered scene.
//!
//! Order of operations: exposure, vignetting and Gaussian blur act on linear light; then the
//! sRGB transfer function (IEC 61966-2-1, via palette) encodes the image, sensor noise is added
//! in code values, and the result is rounded to 8 or 16 bits and written as PNG or JPEG.

use std::io::Cursor;

use image::imageops::{blur_advanced, GaussianBlurParameters};
use image::{DynamicImage, ImageBuffer, Rgb, Rgb32FImage};
use jpeg_encoder::{ColorType, Encoder, SamplingFactor};
use palette::{LinSrgb, Srgb};
use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};
use rand_distr::Normal;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::renderer::clip;
use super::scene::LinearImage;
use crate::colour::YCbCr;
use crate::error::{CoreError, CoreResult};
use crate::exposure::radius_sq;
use crate::geometry::Mask;

/// Camera and lens imperfections applied to a rendered image.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct PhotoEffects {
    /// Standard deviation of the Gaussian lens blur, pixels (0 = sharp).
    pub blur_sigma_px: f32,
    /// Brightness in the image corners relative to the centre (1 = no vignetting, e.g. 0.8).
    /// Falloff follows 1 / (1 + v·ρ²), ρ = distance from the centre over the half-diagonal,
    /// the model [`crate::exposure::ExposureCorrection`] undoes.
    pub corner_brightness: f32,
    /// Exposure change, factor on linear light (1 = unchanged).
    pub exposure: f32,
    /// Standard deviation of Gaussian sensor noise, in 8-bit code values (scaled ×257 for
    /// 16-bit output).
    pub noise_sigma_codes: f32,
    /// Seed of the noise generator: equal seeds give equal images.
    pub seed: u64,
}

impl Default for PhotoEffects {
    /// No effect at all.
    fn default() -> Self {
        PhotoEffects {
            blur_sigma_px: 0.0,
            corner_brightness: 1.0,
            exposure: 1.0,
            noise_sigma_codes: 0.0,
            seed: 0,
        }
    }
}

impl PhotoEffects {
    /// Checks ranges; messages name the field.
    pub fn validate(&self) -> CoreResult<()> {
        let check = |field: &'static str, v: f32, ok: bool, what: &str| {
            if v.is_finite() && ok {
                Ok(())
            } else {
                Err(CoreError::invalid(
                    field,
                    format!("must be {what}, got {v}"),
                ))
            }
        };
        let b = self.blur_sigma_px;
        check(
            "blur_sigma_px",
            b,
            (0.0..=50.0).contains(&b),
            "within 0–50 pixels",
        )?;
        let c = self.corner_brightness;
        check("corner_brightness", c, c > 0.0 && c <= 1.0, "in (0, 1]")?;
        let e = self.exposure;
        check("exposure", e, e > 0.0, "positive")?;
        let n = self.noise_sigma_codes;
        check(
            "noise_sigma_codes",
            n,
            (0.0..=100.0).contains(&n),
            "within 0–100 code values",
        )
    }
}

/// How a developed photo is written.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum PhotoEncoding {
    /// PNG, 8 bits per channel, sRGB.
    Png8,
    /// PNG, 16 bits per channel, sRGB transfer function.
    Png16,
    /// Baseline JPEG, 8 bits, YCbCr with 4:2:0 chroma subsampling (chroma halved in both
    /// directions), like most cameras.
    Jpeg {
        /// Quality 1–100.
        quality: u8,
    },
    /// Baseline JPEG, 8 bits, YCbCr with chroma at full resolution (4:4:4), as some cameras
    /// write at their highest quality.
    JpegFullChroma {
        /// Quality 1–100.
        quality: u8,
    },
}

impl PhotoEncoding {
    /// File extension without the dot: `png` or `jpg`.
    pub fn extension(self) -> &'static str {
        match self {
            PhotoEncoding::Png8 | PhotoEncoding::Png16 => "png",
            PhotoEncoding::Jpeg { .. } | PhotoEncoding::JpegFullChroma { .. } => "jpg",
        }
    }
}

/// Exposure, vignetting and blur, in linear light.
pub fn apply_optics(image: &LinearImage, effects: &PhotoEffects) -> CoreResult<LinearImage> {
    effects.validate()?;
    let (w, h) = (image.width, image.height);
    let v = 1.0 / effects.corner_brightness - 1.0;
    let mut pixels: Vec<LinSrgb<f32>> = image
        .pixels
        .par_iter()
        .enumerate()
        .map(|(i, c)| {
            let rho2 = radius_sq(i % w as usize, i / w as usize, w, h);
            *c * (effects.exposure / (1.0 + v * rho2))
        })
        .collect();
    if effects.blur_sigma_px > 0.0 {
        let raw: Vec<f32> = pixels
            .iter()
            .flat_map(|c| [c.red, c.green, c.blue])
            .collect();
        let buffer = Rgb32FImage::from_raw(w, h, raw).expect("buffer length is width × height × 3");
        let blurred = blur_advanced(
            &buffer,
            GaussianBlurParameters::new_from_sigma(effects.blur_sigma_px),
        );
        pixels = blurred
            .into_raw()
            .chunks_exact(3)
            .map(|c| LinSrgb::new(c[0], c[1], c[2]))
            .collect();
    }
    Ok(LinearImage {
        width: w,
        height: h,
        pixels,
    })
}

/// Applies `effects` and returns sRGB code values 0–`max_code` (not yet rounded), noise included.
fn develop_codes(
    image: &LinearImage,
    effects: &PhotoEffects,
    max_code: f32,
) -> CoreResult<Vec<[f32; 3]>> {
    let optics = apply_optics(image, effects)?;
    let w = image.width as usize;
    let sigma = effects.noise_sigma_codes * max_code / 255.0;
    let noise = (sigma > 0.0)
        .then(|| Normal::new(0.0f32, sigma))
        .transpose()
        .map_err(|e| CoreError::invalid("noise_sigma_codes", e.to_string()))?;
    let mut codes = vec![[0.0f32; 3]; optics.pixels.len()];
    codes
        .par_chunks_mut(w)
        .zip(optics.pixels.par_chunks(w))
        .enumerate()
        .for_each(|(y, (out, row))| {
            // One generator per row, seeded from (seed, row): reproducible on any thread count.
            let mut rng = StdRng::seed_from_u64(
                effects.seed ^ (y as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15),
            );
            for (o, c) in out.iter_mut().zip(row) {
                let e: Srgb<f32> = Srgb::from_linear(clip(*c));
                *o = [e.red, e.green, e.blue].map(|v| {
                    let n = noise.map_or(0.0, |d| rng.sample(d));
                    (v * max_code + n).clamp(0.0, max_code)
                });
            }
        });
    Ok(codes)
}

/// Applies `effects` and rounds to 8-bit sRGB pixels (row-major).
pub fn develop_srgb8(image: &LinearImage, effects: &PhotoEffects) -> CoreResult<Vec<Srgb<u8>>> {
    Ok(develop_codes(image, effects, 255.0)?
        .into_iter()
        .map(|c| Srgb::new(c[0].round() as u8, c[1].round() as u8, c[2].round() as u8))
        .collect())
}

/// Applies `effects` and writes the photo as `encoding`.
pub fn develop(
    image: &LinearImage,
    effects: &PhotoEffects,
    encoding: PhotoEncoding,
) -> CoreResult<Vec<u8>> {
    let (w, h) = (image.width, image.height);
    let eight = || -> CoreResult<Vec<u8>> {
        Ok(develop_srgb8(image, effects)?
            .into_iter()
            .flat_map(|c| [c.red, c.green, c.blue])
            .collect())
    };
    match encoding {
        PhotoEncoding::Png8 => {
            let buffer =
                ImageBuffer::<Rgb<u8>, _>::from_raw(w, h, eight()?).expect("length matches");
            png(DynamicImage::ImageRgb8(buffer))
        }
        PhotoEncoding::Png16 => {
            let raw: Vec<u16> = develop_codes(image, effects, 65535.0)?
                .into_iter()
                .flat_map(|c| c.map(|v| v.round() as u16))
                .collect();
            let buffer = ImageBuffer::<Rgb<u16>, _>::from_raw(w, h, raw).expect("length matches");
            png(DynamicImage::ImageRgb16(buffer))
        }
        PhotoEncoding::Jpeg { quality } | PhotoEncoding::JpegFullChroma { quality } => {
            let subsampled = matches!(encoding, PhotoEncoding::Jpeg { .. });
            if !(1..=100).contains(&quality) {
                return Err(CoreError::invalid(
                    "quality",
                    format!("must lie in 1–100, got {quality}"),
                ));
            }
            let (w16, h16) = match (u16::try_from(w), u16::try_from(h)) {
                (Ok(a), Ok(b)) => (a, b),
                _ => {
                    return Err(CoreError::invalid(
                        "size",
                        "JPEG sides are limited to 65535 pixels",
                    ))
                }
            };
            let mut rgb = eight()?;
            let mut out = Vec::new();
            let mut encoder = Encoder::new(&mut out, quality);
            if subsampled {
                average_chroma_blocks(&mut rgb, w as usize, h as usize);
                encoder.set_sampling_factor(SamplingFactor::R_4_2_0);
            } else {
                encoder.set_sampling_factor(SamplingFactor::R_4_4_4);
            }
            encoder
                .encode(&rgb, w16, h16, ColorType::Rgb)
                .map_err(|e| CoreError::Encode(e.to_string()))?;
            Ok(out)
        }
    }
}

/// Replaces the chroma (JFIF YCbCr) of every 2×2 block by the block mean, keeping each pixel's
/// luma. The JPEG encoder subsamples chroma by taking one pixel per block; averaging first
/// makes its 4:2:0 output centred on the block, as camera encoders produce it.
fn average_chroma_blocks(rgb: &mut [u8], width: usize, height: usize) {
    let ycc = |p: &[u8]| YCbCr::from_srgb(Srgb::new(p[0], p[1], p[2]).into_format());
    for by in (0..height).step_by(2) {
        for bx in (0..width).step_by(2) {
            let pixels: Vec<usize> = [(0, 0), (1, 0), (0, 1), (1, 1)]
                .iter()
                .filter(|(dx, dy)| bx + dx < width && by + dy < height)
                .map(|(dx, dy)| ((by + dy) * width + bx + dx) * 3)
                .collect();
            let n = pixels.len() as f32;
            let (cb, cr) = pixels.iter().fold((0.0, 0.0), |acc, &i| {
                let c = ycc(&rgb[i..i + 3]);
                (acc.0 + c.cb / n, acc.1 + c.cr / n)
            });
            for &i in &pixels {
                let out = YCbCr {
                    y: ycc(&rgb[i..i + 3]).y,
                    cb,
                    cr,
                }
                .to_srgb();
                for (slot, v) in rgb[i..i + 3].iter_mut().zip([out.red, out.green, out.blue]) {
                    *slot = (255.0 * v).round().clamp(0.0, 255.0) as u8;
                }
            }
        }
    }
}

/// An 8-bit greyscale PNG of a mask: 255 = specimen, 0 = elsewhere.
pub fn encode_mask_png(mask: &Mask) -> CoreResult<Vec<u8>> {
    let raw = mask
        .as_slice()
        .iter()
        .map(|&m| if m { 255 } else { 0 })
        .collect();
    let buffer =
        image::GrayImage::from_raw(mask.width(), mask.height(), raw).expect("length matches");
    png(DynamicImage::ImageLuma8(buffer))
}

fn png(image: DynamicImage) -> CoreResult<Vec<u8>> {
    let mut out = Cursor::new(Vec::new());
    image
        .write_to(&mut out, image::ImageFormat::Png)
        .map_err(|e| CoreError::Encode(e.to_string()))?;
    Ok(out.into_inner())
}
