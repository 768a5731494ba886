//! The compact form of a stored order map: what a service keeps, and what every file of a
//! stored map is made from.
//!
//! The map is cut into bands of [`BAND_ROWS`] rows (the last may be shorter). Each band is one
//! zlib stream (deflate with a checksum, the `flate2` crate) of, in order: the flag bits (one
//! byte a pixel), then the orders (steps of [`ORDER_STEP`] fringe), residuals (steps of
//! [`RESIDUAL_STEP`] ΔE\*ab) and uncertainties (steps of [`UNCERTAINTY_STEP`] fringe), each as
//! whole steps (`i32`, [`NO_VALUE`] for NaN) minus the pixel's left neighbour's (the pixel
//! above's at a row's start), zig-zag coded and split into four byte planes, lowest byte
//! first. Smooth fields give small differences, whose high byte planes are all zeros and
//! compress to almost nothing. A stored value is within half a step of the map's, and NaN
//! stays NaN; finite values beyond ±2³¹ − 1 steps are clamped there. The ambiguity margins are
//! not kept (no file holds them): a decoded map has NaN margins.

use std::io::{Read, Write};

use flate2::read::ZlibDecoder;
use flate2::write::ZlibEncoder;
use flate2::Compression;
use rayon::prelude::*;

use crate::error::{CoreError, CoreResult};
use crate::export::Rows;
use crate::exposure::ExposureCorrection;
use crate::order_map::{MapStatistics, OrderMap, PixelFlags};

/// Rows of a band.
pub const BAND_ROWS: u32 = 32;
/// Resolution of the stored orders, fringes.
pub const ORDER_STEP: f64 = 1e-4;
/// Resolution of the stored colour residuals, ΔE00 (the CSV's two decimals).
pub const RESIDUAL_STEP: f64 = 0.01;
/// Resolution of the stored uncertainties, fringes.
pub const UNCERTAINTY_STEP: f64 = 1e-4;
/// The step count that stands for NaN.
const NO_VALUE: i32 = i32::MIN;
/// Bytes a pixel before compression: flags, then three planes of four bytes.
const RAW_BYTES_PER_PIXEL: usize = 13;

/// A band of rows decoded from the compact form.
#[derive(Debug, Clone, PartialEq)]
pub struct Band {
    /// Pixels a row.
    pub width: usize,
    /// Fringe orders, NaN = no value.
    pub order: Vec<f32>,
    /// Colour residuals, CIEDE2000 (ΔE00).
    pub residual: Vec<f32>,
    /// Flag bits.
    pub flags: Vec<PixelFlags>,
    /// Standard uncertainty (1 σ) of the order, fringes, NaN = no value.
    pub uncertainty: Vec<f32>,
}

impl Band {
    /// The band's rows, ready for an `export::FileWriter`.
    pub fn rows(&self) -> Rows<'_> {
        Rows {
            width: self.width,
            order: &self.order,
            residual: &self.residual,
            flags: &self.flags,
            uncertainty: &self.uncertainty,
        }
    }
}

/// Number of bands of a map `height` rows high.
pub fn band_count(height: u32) -> u32 {
    height.div_ceil(BAND_ROWS)
}

/// Rows of band `index` of a map `height` rows high.
pub fn band_rows(index: u32, height: u32) -> u32 {
    BAND_ROWS.min(height.saturating_sub(index * BAND_ROWS))
}

fn steps(value: f32, step: f64) -> i32 {
    if value.is_nan() {
        NO_VALUE
    } else {
        (f64::from(value) / step)
            .round()
            .clamp(f64::from(NO_VALUE) + 1.0, f64::from(i32::MAX)) as i32
    }
}

fn value(steps: i32, step: f64) -> f32 {
    if steps == NO_VALUE {
        f32::NAN
    } else {
        (f64::from(steps) * step) as f32
    }
}

/// Appends the four byte planes of `values` in `step`s, each predicted by its left neighbour
/// (the one above at a row's start, 0 for the band's first pixel).
fn push_planes(out: &mut Vec<u8>, values: &[f32], width: usize, step: f64) {
    let q: Vec<i32> = values.iter().map(|v| steps(*v, step)).collect();
    let start = out.len();
    out.resize(start + 4 * q.len(), 0);
    let (n, planes) = (q.len(), &mut out[start..]);
    for i in 0..n {
        let predicted = match i {
            0 => 0,
            _ if i % width == 0 => q[i - width],
            _ => q[i - 1],
        };
        let d = q[i].wrapping_sub(predicted);
        let zigzag = ((d << 1) ^ (d >> 31)) as u32;
        for (k, byte) in zigzag.to_le_bytes().into_iter().enumerate() {
            planes[k * n + i] = byte;
        }
    }
}

/// Reads back what [`push_planes`] wrote for `n` pixels.
fn read_planes(planes: &[u8], width: usize, step: f64) -> Vec<f32> {
    let n = planes.len() / 4;
    let mut q = vec![0i32; n];
    for i in 0..n {
        let zigzag = u32::from_le_bytes([
            planes[i],
            planes[n + i],
            planes[2 * n + i],
            planes[3 * n + i],
        ]);
        let d = ((zigzag >> 1) as i32) ^ -((zigzag & 1) as i32);
        let predicted = match i {
            0 => 0,
            _ if i % width == 0 => q[i - width],
            _ => q[i - 1],
        };
        q[i] = predicted.wrapping_add(d);
    }
    q.into_iter().map(|s| value(s, step)).collect()
}

/// The compact bytes of `rows` (one band).
pub fn encode_band(rows: Rows<'_>) -> CoreResult<Vec<u8>> {
    let n = rows.order.len();
    let mut raw = Vec::with_capacity(n * RAW_BYTES_PER_PIXEL);
    raw.extend(rows.flags.iter().map(|f| f.0));
    push_planes(&mut raw, rows.order, rows.width, ORDER_STEP);
    push_planes(&mut raw, rows.residual, rows.width, RESIDUAL_STEP);
    push_planes(&mut raw, rows.uncertainty, rows.width, UNCERTAINTY_STEP);
    let mut encoder = ZlibEncoder::new(Vec::with_capacity(n), Compression::fast());
    encoder
        .write_all(&raw)
        .and_then(|()| encoder.finish())
        .map_err(|e| CoreError::Encode(format!("compressing a band: {e}")))
}

/// Decodes a band of `rows` rows of `width` pixels from its compact bytes; refuses bytes that
/// are damaged or of another size.
pub fn decode_band(bytes: &[u8], width: usize, rows: usize) -> CoreResult<Band> {
    let n = width * rows;
    let expected = n * RAW_BYTES_PER_PIXEL;
    let mut raw = Vec::with_capacity(expected);
    ZlibDecoder::new(bytes)
        .take(expected as u64 + 1)
        .read_to_end(&mut raw)
        .map_err(|e| CoreError::Decode(format!("stored band: {e}")))?;
    if raw.len() != expected {
        return Err(CoreError::Decode(format!(
            "stored band holds {} bytes for {rows} rows of {width} pixels ({expected} expected)",
            raw.len()
        )));
    }
    let (flags, planes) = raw.split_at(n);
    let plane = |k: usize| &planes[4 * n * k..4 * n * (k + 1)];
    Ok(Band {
        width,
        flags: flags.iter().map(|f| PixelFlags(*f)).collect(),
        order: read_planes(plane(0), width, ORDER_STEP),
        residual: read_planes(plane(1), width, RESIDUAL_STEP),
        uncertainty: read_planes(plane(2), width, UNCERTAINTY_STEP),
    })
}

/// Every band of `map`, in order, compressed in parallel.
pub fn encode_map(map: &OrderMap) -> CoreResult<Vec<Vec<u8>>> {
    let rows = map.rows();
    (0..band_count(map.height))
        .into_par_iter()
        .map(|b| {
            let first = (b * BAND_ROWS) as usize;
            encode_band(rows.slice(first, first + band_rows(b, map.height) as usize))
        })
        .collect()
}

/// A whole map from its bands (in order), size, exposure and figures. Margins are not stored:
/// they read back as NaN.
pub fn decode_map(
    bands: &[Vec<u8>],
    width: u32,
    height: u32,
    exposure: ExposureCorrection,
    statistics: MapStatistics,
) -> CoreResult<OrderMap> {
    if bands.len() != band_count(height) as usize {
        return Err(CoreError::Decode(format!(
            "{} stored bands for a map of {height} rows ({} expected)",
            bands.len(),
            band_count(height)
        )));
    }
    let pixels = width as usize * height as usize;
    let mut map = OrderMap {
        width,
        height,
        order: Vec::with_capacity(pixels),
        residual: Vec::with_capacity(pixels),
        margin: vec![f32::NAN; pixels],
        flags: Vec::with_capacity(pixels),
        uncertainty: Vec::with_capacity(pixels),
        exposure,
        statistics,
    };
    for (b, bytes) in (0..).zip(bands) {
        let band = decode_band(bytes, width as usize, band_rows(b, height) as usize)?;
        map.order.extend(band.order);
        map.residual.extend(band.residual);
        map.flags.extend(band.flags);
        map.uncertainty.extend(band.uncertainty);
    }
    Ok(map)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_band_keeps_orders_within_half_a_step_and_nan_and_flags_exactly() {
        // Two rows of three: valued pixels, one past the table (NaN, beyond range), one
        // unreliable and one outside the mask; values rounding up and down to whole steps.
        let order = [0.0, 1.23456, 9.99996, f32::NAN, 2.00004, 0.00006];
        let residual = [0.5, 1.234, 0.0, f32::NAN, 12.345, 3.0];
        let uncertainty = [0.01, 0.02346, f32::NAN, f32::NAN, 0.1, 0.0];
        let flags = [0, 0, 0, 2, 4, 1].map(PixelFlags);
        let rows = Rows {
            width: 3,
            order: &order,
            residual: &residual,
            flags: &flags,
            uncertainty: &uncertainty,
        };
        let band = decode_band(&encode_band(rows).unwrap(), 3, 2).unwrap();
        assert_eq!(band.flags, flags);
        // Hand-worked: 1.23456 / 1e-4 = 12345.6 → 12346 steps → 1.2346.
        let expected_order = [0.0, 1.2346, 10.0, f32::NAN, 2.0, 0.0001];
        for (i, (got, want)) in band.order.iter().zip(expected_order).enumerate() {
            assert!(
                got.is_nan() == want.is_nan() && (want.is_nan() || (got - want).abs() < 1e-6),
                "order {i}: {got} against {want}"
            );
            assert!(
                got.is_nan() || (got - order[i]).abs() <= 0.5e-4 + 1e-6,
                "order {i}"
            );
        }
        assert_eq!(band.residual[1], 1.23);
        assert!(band.residual[3].is_nan());
        assert_eq!(band.uncertainty[1], 0.0235);
        assert!(band.uncertainty[2].is_nan() && band.uncertainty[3].is_nan());
    }

    #[test]
    fn damaged_or_missized_bands_are_refused() {
        let order = [1.0f32; 4];
        let flags = [PixelFlags(0); 4];
        let rows = Rows {
            width: 2,
            order: &order,
            residual: &order,
            flags: &flags,
            uncertainty: &order,
        };
        let mut bytes = encode_band(rows).unwrap();
        assert!(
            decode_band(&bytes, 2, 3).is_err(),
            "three rows asked of two"
        );
        let last = bytes.len() - 1;
        bytes[last] ^= 0xff;
        assert!(decode_band(&bytes, 2, 2).is_err(), "checksum broken");
    }

    #[test]
    fn a_map_is_cut_into_bands_of_thirty_two_rows_with_a_short_last_one() {
        assert_eq!(band_count(3000), 94);
        assert_eq!(band_rows(93, 3000), 3000 - 93 * 32);
        assert_eq!(band_rows(0, 5), 5);
    }
}
