//! Rendering a field into a photo, with supersampling, plus the true order per pixel.

use palette::LinSrgb;
use rayon::prelude::*;

use super::fields::{FieldSample, OrderField};
use super::renderer::Renderer;
use crate::error::{CoreError, CoreResult};
use crate::geometry::Mask;

/// Largest accepted supersampling factor (samples per pixel along each axis).
pub const MAX_SUPERSAMPLING: u32 = 8;

/// A linear-light sRGB image (components nominally 0–1, not clipped), row-major, pixel (x, y)
/// at index `y * width + x`.
#[derive(Debug, Clone, PartialEq)]
pub struct LinearImage {
    /// Width in pixels.
    pub width: u32,
    /// Height in pixels.
    pub height: u32,
    /// Row-major pixels.
    pub pixels: Vec<LinSrgb<f32>>,
}

/// A rendered photo with its ground truth.
#[derive(Debug, Clone)]
pub struct RenderedScene {
    /// What the camera saw, linear light, before any photo effect.
    pub image: LinearImage,
    /// True fringe order at each pixel centre; NaN off the specimen.
    pub true_order: Vec<f32>,
    /// Specimen pixels (pixel centre on the specimen).
    pub mask: Mask,
}

/// Width of the dark rim a light-field photo shows along the specimen's edge, pixels.
pub const LIGHT_FIELD_RIM_PX: usize = 3;
/// Share of the light a rim pixel of a light-field photo passes (0–1).
///
/// A modelling choice, not a measured value: a real model's cut edge refracts and scatters the
/// light that meets it away from the lens, so its outline photographs as a dark line a few
/// pixels wide against the bright light-field background. The rim is drawn on the specimen's
/// side of its edge (pixel centres on the specimen with a pixel off it within
/// [`LIGHT_FIELD_RIM_PX`], the photo's border being no edge), and only in light field: the
/// dark-field background is black anyway.
pub const LIGHT_FIELD_RIM_TRANSMISSION: f32 = 0.1;

/// Renders `field` into a `width` × `height` photo. Each pixel averages `supersampling`² samples
/// on a regular grid inside it (in linear light), as a lens would blur steep fringes; off the
/// specimen samples are black. The true order and the mask are taken at pixel centres.
pub fn render_scene(
    field: &dyn OrderField,
    renderer: &Renderer,
    width: u32,
    height: u32,
    supersampling: u32,
) -> CoreResult<RenderedScene> {
    render_samples(field, width, height, supersampling, |s| {
        s.map_or(LinSrgb::new(0.0, 0.0, 0.0), |s| {
            renderer.linear(s.order, s.fast_axis_rad())
        })
    })
}

/// Renders `field` as [`render_scene`] does, in light field: each sample takes
/// [`Renderer::linear_light_field`], off the specimen full-exposure white (no specimen, no
/// retardation), and the specimen's outline is darkened to [`LIGHT_FIELD_RIM_TRANSMISSION`]
/// over [`LIGHT_FIELD_RIM_PX`] (see there). Answers the photo (linear light, before any photo
/// effect); its truth is that of [`render_scene`].
pub fn render_light_field(
    field: &dyn OrderField,
    renderer: &Renderer,
    width: u32,
    height: u32,
    supersampling: u32,
) -> CoreResult<LinearImage> {
    let mut scene = render_samples(field, width, height, supersampling, |s| {
        let order = s.map_or(0.0, |s| s.order);
        renderer.linear_light_field(order, s.map_or(0.0, |s| s.fast_axis_rad()))
    })?;
    let rim = specimen_rim(&scene.mask, LIGHT_FIELD_RIM_PX);
    for (pixel, on_rim) in scene.image.pixels.iter_mut().zip(rim) {
        if on_rim {
            *pixel *= LIGHT_FIELD_RIM_TRANSMISSION;
        }
    }
    Ok(scene.image)
}

/// Specimen pixels of `mask` with a pixel off the specimen within `r` (Chebyshev distance,
/// inside the photo).
fn specimen_rim(mask: &Mask, r: usize) -> Vec<bool> {
    let (w, h) = (mask.width() as usize, mask.height() as usize);
    let inside = mask.as_slice();
    let near = |get: &dyn Fn(usize) -> bool, len: usize, i: usize| {
        (i.saturating_sub(r)..(i + r + 1).min(len)).any(get)
    };
    let rows: Vec<bool> = (0..w * h)
        .map(|p| near(&|x| !inside[p - p % w + x], w, p % w))
        .collect();
    (0..w * h)
        .map(|p| inside[p] && near(&|y| rows[y * w + p % w], h, p / w))
        .collect()
}

/// Renders `field` with `colour` for each sample (`None` off the specimen); see
/// [`render_scene`].
fn render_samples(
    field: &dyn OrderField,
    width: u32,
    height: u32,
    supersampling: u32,
    colour: impl Fn(Option<FieldSample>) -> LinSrgb<f32> + Sync,
) -> CoreResult<RenderedScene> {
    if width == 0 || height == 0 || u64::from(width) * u64::from(height) > 100_000_000 {
        return Err(CoreError::invalid(
            "size",
            format!("{width}×{height} is not a renderable photo size"),
        ));
    }
    if !(1..=MAX_SUPERSAMPLING).contains(&supersampling) {
        return Err(CoreError::invalid(
            "supersampling",
            format!("must lie in 1–{MAX_SUPERSAMPLING}, got {supersampling}"),
        ));
    }
    let w = width as usize;
    let n = supersampling;
    let weight = 1.0 / (n * n) as f32;
    let rows: Vec<(Vec<LinSrgb<f32>>, Vec<f32>)> = (0..height)
        .into_par_iter()
        .map(|y| {
            let mut colours = Vec::with_capacity(w);
            let mut orders = Vec::with_capacity(w);
            for x in 0..width {
                let mut sum = LinSrgb::new(0.0f32, 0.0, 0.0);
                for j in 0..n {
                    let sy = f64::from(y) + (f64::from(j) + 0.5) / f64::from(n);
                    for i in 0..n {
                        let sx = f64::from(x) + (f64::from(i) + 0.5) / f64::from(n);
                        sum += colour(field.sample(sx, sy));
                    }
                }
                colours.push(sum * weight);
                let centre = field.sample(f64::from(x) + 0.5, f64::from(y) + 0.5);
                orders.push(centre.map_or(f32::NAN, |s| s.order as f32));
            }
            (colours, orders)
        })
        .collect();
    let mut pixels = Vec::with_capacity(w * height as usize);
    let mut true_order = Vec::with_capacity(w * height as usize);
    for (c, o) in rows {
        pixels.extend(c);
        true_order.extend(o);
    }
    let inside = true_order.iter().map(|o| !o.is_nan()).collect();
    Ok(RenderedScene {
        image: LinearImage {
            width,
            height,
            pixels,
        },
        true_order,
        mask: Mask::new(width, height, inside)?,
    })
}
