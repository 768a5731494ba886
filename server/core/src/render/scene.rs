//! Rendering a field into a photo, with supersampling, plus the true order per pixel.

use palette::LinSrgb;
use rayon::prelude::*;

use super::fields::OrderField;
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
                        if let Some(s) = field.sample(sx, sy) {
                            sum += renderer.linear(s.order, s.fast_axis_rad());
                        }
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
