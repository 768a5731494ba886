//! Pixel geometry shared by every layer.
//!
//! Convention everywhere (CLI, API, files): x to the right, y down; pixel (x, y) covers
//! [x, x+1) × [y, y+1), so its centre lies at (x + 0.5, y + 0.5). Rectangles and points are
//! given in these *edge* coordinates, in pixels, as `f64`.

use serde::{Deserialize, Serialize};

use crate::error::{CoreError, CoreResult};

/// An axis-aligned rectangle in pixel-edge coordinates (pixels; x right, y down).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PixelRect {
    /// x of the left edge.
    pub left: f64,
    /// y of the upper edge.
    pub top: f64,
    /// x of the right edge.
    pub right: f64,
    /// y of the lower edge.
    pub bottom: f64,
}

impl PixelRect {
    /// Checks that all edges are finite and that the rectangle has positive width and height.
    pub fn new(left: f64, top: f64, right: f64, bottom: f64) -> CoreResult<Self> {
        let rect = PixelRect {
            left,
            top,
            right,
            bottom,
        };
        rect.validate()?;
        Ok(rect)
    }

    /// Parses `LEFT,TOP,RIGHT,BOTTOM` (pixel-edge coordinates).
    pub fn parse(text: &str) -> CoreResult<Self> {
        let parts: Vec<&str> = text.split(',').map(str::trim).collect();
        if parts.len() != 4 {
            return Err(CoreError::invalid(
                "region",
                format!("expected LEFT,TOP,RIGHT,BOTTOM, got {text:?}"),
            ));
        }
        let mut v = [0.0; 4];
        for (slot, part) in v.iter_mut().zip(&parts) {
            *slot = part
                .parse::<f64>()
                .map_err(|_| CoreError::invalid("region", format!("{part:?} is not a number")))?;
        }
        PixelRect::new(v[0], v[1], v[2], v[3])
    }

    /// Checks finiteness and orientation (right > left, bottom > top).
    pub fn validate(&self) -> CoreResult<()> {
        let all = [self.left, self.top, self.right, self.bottom];
        if all.iter().any(|v| !v.is_finite()) {
            return Err(CoreError::invalid("region", "edges must be finite numbers"));
        }
        if self.right <= self.left || self.bottom <= self.top {
            return Err(CoreError::invalid(
                "region",
                format!(
                    "right ({}) must exceed left ({}) and bottom ({}) must exceed top ({})",
                    self.right, self.left, self.bottom, self.top
                ),
            ));
        }
        Ok(())
    }

    /// Checks that the rectangle lies within an image of `width` × `height` pixels.
    pub fn check_inside(&self, width: u32, height: u32) -> CoreResult<()> {
        self.validate()?;
        if self.left < 0.0
            || self.top < 0.0
            || self.right > f64::from(width)
            || self.bottom > f64::from(height)
        {
            return Err(CoreError::invalid(
                "region",
                format!(
                    "{},{},{},{} lies outside the {width}×{height} photo",
                    self.left, self.top, self.right, self.bottom
                ),
            ));
        }
        Ok(())
    }

    /// Rectangle height in pixels.
    pub fn height(&self) -> f64 {
        self.bottom - self.top
    }

    /// Rectangle width in pixels.
    pub fn width(&self) -> f64 {
        self.right - self.left
    }

    /// Index range of the pixel columns whose centres lie inside the rectangle.
    pub fn column_range(&self) -> std::ops::Range<u32> {
        centre_range(self.left, self.right)
    }

    /// Index range of the pixel rows whose centres lie inside the rectangle.
    pub fn row_range(&self) -> std::ops::Range<u32> {
        centre_range(self.top, self.bottom)
    }
}

/// Pixel indices i with centre i + 0.5 in [lo, hi).
fn centre_range(lo: f64, hi: f64) -> std::ops::Range<u32> {
    let first = (lo - 0.5).ceil().max(0.0) as u32;
    let end = (hi - 0.5).ceil().max(0.0) as u32;
    first..end.max(first)
}

/// The physical scale of a photo: millimetres per pixel, the same along x and y (square
/// pixels, a view square to the specimen). Set from two points a known distance apart or typed.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Scale {
    mm_per_px: f64,
}

impl Scale {
    /// A scale of `mm_per_px` millimetres per pixel; refused naming `mm_per_px` unless it is a
    /// positive finite number.
    pub fn new(mm_per_px: f64) -> CoreResult<Scale> {
        if mm_per_px.is_finite() && mm_per_px > 0.0 {
            Ok(Scale { mm_per_px })
        } else {
            Err(CoreError::invalid(
                "mm_per_px",
                format!("must be a positive number of millimetres per pixel, got {mm_per_px}"),
            ))
        }
    }

    /// Millimetres per pixel.
    pub fn mm_per_px(&self) -> f64 {
        self.mm_per_px
    }

    /// A length or position of `px` pixels in millimetres.
    pub fn mm(&self, px: f64) -> f64 {
        px * self.mm_per_px
    }
}

/// A point in pixel-edge coordinates (pixels; x right, y down).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PixelPoint {
    /// x in pixel-edge coordinates.
    pub x: f64,
    /// y in pixel-edge coordinates.
    pub y: f64,
}

impl PixelPoint {
    /// The pixel that contains this point, if it lies inside a `width` × `height` image.
    pub fn pixel(&self, width: u32, height: u32) -> Option<(u32, u32)> {
        if !(self.x.is_finite() && self.y.is_finite()) || self.x < 0.0 || self.y < 0.0 {
            return None;
        }
        let (x, y) = (self.x.floor() as u64, self.y.floor() as u64);
        (x < u64::from(width) && y < u64::from(height)).then_some((x as u32, y as u32))
    }
}

/// Which pixels belong to the specimen: row-major, `true` = specimen.
#[derive(Debug, Clone, PartialEq)]
pub struct Mask {
    width: u32,
    height: u32,
    inside: Vec<bool>,
}

impl Mask {
    /// A mask from row-major flags (`true` = specimen). Fails if the length is not width × height.
    pub fn new(width: u32, height: u32, inside: Vec<bool>) -> CoreResult<Self> {
        if inside.len() as u64 != u64::from(width) * u64::from(height) {
            return Err(CoreError::invalid(
                "mask",
                format!("{} flags for a {width}×{height} image", inside.len()),
            ));
        }
        Ok(Mask {
            width,
            height,
            inside,
        })
    }

    /// Mask width in pixels.
    pub fn width(&self) -> u32 {
        self.width
    }

    /// Mask height in pixels.
    pub fn height(&self) -> u32 {
        self.height
    }

    /// Row-major flags, `true` = specimen.
    pub fn as_slice(&self) -> &[bool] {
        &self.inside
    }

    /// Whether pixel (x, y) belongs to the specimen.
    pub fn contains(&self, x: u32, y: u32) -> bool {
        self.inside[y as usize * self.width as usize + x as usize]
    }

    /// The mask with every specimen pixel within `radius` pixels (Chebyshev distance) of a
    /// non-specimen pixel or of the image border removed.
    pub fn eroded(&self, radius: u32) -> Mask {
        let (w, h) = (self.width as usize, self.height as usize);
        let r = radius as usize;
        // Separable erosion: horizontal pass then vertical pass.
        let pass = |src: &[bool], len: usize, stride: usize, count: usize, step: usize| {
            let mut out = vec![false; src.len()];
            for line in 0..count {
                let base = line * step;
                let mut run_start = None;
                for i in 0..=len {
                    let on = i < len && src[base + i * stride];
                    match (on, run_start) {
                        (true, None) => run_start = Some(i),
                        (false, Some(s)) => {
                            if i - s > 2 * r {
                                for k in s + r..i - r {
                                    out[base + k * stride] = true;
                                }
                            }
                            run_start = None;
                        }
                        _ => {}
                    }
                }
            }
            out
        };
        let horizontal = pass(&self.inside, w, 1, h, w);
        let both = pass(&horizontal, h, w, w, 1);
        Mask {
            width: self.width,
            height: self.height,
            inside: both,
        }
    }

    /// Decodes a mask image (PNG or any format the photo decoder reads): non-zero = specimen.
    pub fn decode(bytes: &[u8], limits: &crate::colour::DecodeLimits) -> CoreResult<Mask> {
        let image = crate::colour::decode_dynamic(bytes, limits, "mask")?;
        let luma = image.into_luma16();
        let (width, height) = luma.dimensions();
        let inside = luma.into_raw().into_iter().map(|v| v != 0).collect();
        Mask::new(width, height, inside)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rows_whose_centres_lie_inside_a_rectangle_are_selected() {
        let r = PixelRect::new(10.0, 2.0, 20.0, 6.0).unwrap();
        assert_eq!(r.row_range(), 2..6);
        assert_eq!(r.column_range(), 10..20);
        let half = PixelRect::new(10.5, 2.6, 20.4, 6.5).unwrap();
        assert_eq!(half.row_range(), 3..6);
        assert_eq!(half.column_range(), 10..20);
    }

    #[test]
    fn a_region_outside_the_photo_is_refused() {
        let r = PixelRect::parse("0,0,101,50").unwrap();
        assert!(r.check_inside(100, 50).is_err());
        assert!(PixelRect::parse("5,5,1,9").is_err());
        assert!(PixelRect::parse("a,b,c,d").is_err());
        assert!(PixelRect::parse("NaN,0,1,1").is_err());
    }

    #[test]
    fn erosion_removes_a_border_of_the_given_width() {
        let m = Mask::new(7, 5, vec![true; 35]).unwrap().eroded(1);
        let kept: usize = m.as_slice().iter().filter(|v| **v).count();
        assert_eq!(kept, 5 * 3);
        assert!(!m.contains(0, 2) && m.contains(1, 1) && !m.contains(6, 4));
    }
}
