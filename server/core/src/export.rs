//! Output formats of an order map: NPY, 16-bit PNG, false-colour preview PNG, CSV; and of its
//! σ1 − σ2 map in MPa (NPY, preview PNG, CSV).

use std::io::Write;

use image::{ImageEncoder, Rgb, RgbImage};

use crate::error::{CoreError, CoreResult};
use crate::order_map::{MapStatistics, OrderMap, PixelFlags};
use crate::stress::StressOpticLaw;

/// Scale of the 16-bit PNG: grey value = round(order × 1000); N = value / 1000.
pub const PNG16_SCALE: f32 = 1000.0;
/// Grey value of the 16-bit PNG that means "no value".
pub const PNG16_NO_VALUE: u16 = u16::MAX;

/// Output formats, chosen by file extension or by the `format` query parameter.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum OutputFormat {
    /// `.npy`: little-endian float32, shape (height, width), C order, NaN = no value.
    Npy,
    /// 16-bit grey PNG, value = round(N × 1000), 65535 = no value.
    Png16,
    /// False-colour PNG with a colour bar numbered in fringe orders from 0 to the table's last
    /// order (for people, not for measurement).
    Preview,
    /// CSV with header `x,y,order,residual,flags`, one line per pixel, empty order = no value.
    Csv,
}

impl OutputFormat {
    /// Picks a format from a path's extension: `.npy`, `.csv`, `.png` (16-bit) or
    /// `.preview.png` / `-preview.png` (false colour).
    pub fn from_path(path: &str) -> CoreResult<Self> {
        let lower = path.to_ascii_lowercase();
        if lower.ends_with(".npy") {
            Ok(OutputFormat::Npy)
        } else if lower.ends_with(".csv") {
            Ok(OutputFormat::Csv)
        } else if lower.ends_with("preview.png") {
            Ok(OutputFormat::Preview)
        } else if lower.ends_with(".png") {
            Ok(OutputFormat::Png16)
        } else {
            Err(CoreError::invalid(
                "out",
                format!("{path:?}: use .npy, .png (16-bit), .preview.png (false colour) or .csv"),
            ))
        }
    }

    /// Parses the API's `format` names: `npy`, `png16`, `preview`, `csv`.
    pub fn from_name(name: &str) -> CoreResult<Self> {
        match name {
            "npy" => Ok(OutputFormat::Npy),
            "png16" => Ok(OutputFormat::Png16),
            "preview" => Ok(OutputFormat::Preview),
            "csv" => Ok(OutputFormat::Csv),
            other => Err(CoreError::invalid(
                "format",
                format!("{other:?} is not one of npy, png16, preview, csv"),
            )),
        }
    }

    /// The API name of the format.
    pub fn name(self) -> &'static str {
        match self {
            OutputFormat::Npy => "npy",
            OutputFormat::Png16 => "png16",
            OutputFormat::Preview => "preview",
            OutputFormat::Csv => "csv",
        }
    }

    /// MIME type of the encoded bytes.
    pub fn content_type(self) -> &'static str {
        match self {
            OutputFormat::Npy => "application/octet-stream",
            OutputFormat::Png16 | OutputFormat::Preview => "image/png",
            OutputFormat::Csv => "text/csv; charset=utf-8",
        }
    }

    /// Conventional file extension.
    pub fn extension(self) -> &'static str {
        match self {
            OutputFormat::Npy => "npy",
            OutputFormat::Png16 => "png",
            OutputFormat::Preview => "preview.png",
            OutputFormat::Csv => "csv",
        }
    }
}

/// Encodes `map` in `format`.
pub fn encode(map: &OrderMap, format: OutputFormat) -> CoreResult<Vec<u8>> {
    match format {
        OutputFormat::Npy => Ok(npy_f32(&map.order, map.height as usize, map.width as usize)),
        OutputFormat::Png16 => png16(map),
        OutputFormat::Preview => {
            preview(map, &map.order, bar_top(&map.statistics), COLOUR_BAR_TITLE)
        }
        OutputFormat::Csv => Ok(csv(map, "x,y,order,residual,flags", |i| {
            let (o, r) = (map.order[i], map.residual[i]);
            if o.is_finite() {
                format!("{o:.4},{r:.2}")
            } else {
                ",".to_string()
            }
        })),
    }
}

/// Encodes the σ1 − σ2 map of `map` through `law`, MPa, in `format`: NPY float32 (NaN = no
/// value), a preview whose bar runs from 0 to the stress at the table's last order, or CSV
/// `x,y,stress_mpa,flags`. There is no 16-bit PNG of stresses.
pub fn encode_stress(
    map: &OrderMap,
    law: &StressOpticLaw,
    format: OutputFormat,
) -> CoreResult<Vec<u8>> {
    let stress = law.stress_map_mpa(&map.order);
    match format {
        OutputFormat::Npy => Ok(npy_f32(&stress, map.height as usize, map.width as usize)),
        OutputFormat::Png16 => Err(CoreError::invalid(
            "format",
            "a stress map is written as NPY, preview PNG or CSV, not as a 16-bit PNG",
        )),
        OutputFormat::Preview => preview(
            map,
            &stress,
            law.stress_difference_mpa(bar_top(&map.statistics)),
            STRESS_BAR_TITLE,
        ),
        OutputFormat::Csv => Ok(csv(map, "x,y,stress_mpa,flags", |i| {
            let s = stress[i];
            if s.is_finite() {
                format!("{s:.4}")
            } else {
                String::new()
            }
        })),
    }
}

/// NPY version 1.0 header for a 2-D C-order array of `descr` (e.g. `<f4`), padded so that
/// magic, version, length and dictionary together fill a multiple of 64 bytes.
fn npy_header(descr: &str, rows: usize, cols: usize, payload: usize) -> Vec<u8> {
    let dict =
        format!("{{'descr': '{descr}', 'fortran_order': False, 'shape': ({rows}, {cols}), }}");
    let unpadded = 10 + dict.len() + 1;
    let padding = (64 - unpadded % 64) % 64;
    let header_len = dict.len() + padding + 1;
    let mut out = Vec::with_capacity(10 + header_len + payload);
    out.extend_from_slice(b"\x93NUMPY\x01\x00");
    out.extend_from_slice(&(header_len as u16).to_le_bytes());
    out.extend_from_slice(dict.as_bytes());
    out.extend(std::iter::repeat_n(b' ', padding));
    out.push(b'\n');
    out
}

/// NPY version 1.0 bytes of a little-endian float32 array of shape (rows, cols), C order.
pub fn npy_f32(values: &[f32], rows: usize, cols: usize) -> Vec<u8> {
    let mut out = npy_header("<f4", rows, cols, values.len() * 4);
    for v in values {
        out.extend_from_slice(&v.to_le_bytes());
    }
    out
}

/// Reads NPY bytes written as little-endian float32, 2-D, C order; returns (rows, cols, values).
pub fn read_npy_f32(bytes: &[u8]) -> CoreResult<(usize, usize, Vec<f32>)> {
    let bad = |m: &str| CoreError::Decode(format!("npy: {m}"));
    if bytes.len() < 10 || &bytes[..6] != b"\x93NUMPY" {
        return Err(bad("missing magic"));
    }
    let (header_len, start) = match bytes[6] {
        1 => (u16::from_le_bytes([bytes[8], bytes[9]]) as usize, 10),
        2 | 3 if bytes.len() >= 12 => (
            u32::from_le_bytes([bytes[8], bytes[9], bytes[10], bytes[11]]) as usize,
            12,
        ),
        _ => return Err(bad("unsupported version")),
    };
    let header = bytes
        .get(start..start + header_len)
        .and_then(|h| std::str::from_utf8(h).ok())
        .ok_or_else(|| bad("truncated header"))?;
    if !header.contains("'descr': '<f4'") || !header.contains("'fortran_order': False") {
        return Err(bad("expected little-endian float32 in C order"));
    }
    let shape = header
        .split("'shape': (")
        .nth(1)
        .and_then(|s| s.split(')').next())
        .ok_or_else(|| bad("no shape"))?;
    let dims: Vec<usize> = shape
        .split(',')
        .map(str::trim)
        .filter(|s| !s.is_empty())
        .map(|s| s.parse().map_err(|_| bad("bad shape")))
        .collect::<CoreResult<_>>()?;
    let [rows, cols] = dims[..] else {
        return Err(bad("expected a 2-D array"));
    };
    let data = &bytes[start + header_len..];
    if data.len() != rows * cols * 4 {
        return Err(bad("data length does not match the shape"));
    }
    let values = data
        .chunks_exact(4)
        .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
        .collect();
    Ok((rows, cols, values))
}

fn png16(map: &OrderMap) -> CoreResult<Vec<u8>> {
    let mut raw = Vec::with_capacity(map.order.len() * 2);
    for v in &map.order {
        let grey = if v.is_finite() {
            (v * PNG16_SCALE)
                .round()
                .clamp(0.0, f32::from(PNG16_NO_VALUE - 1)) as u16
        } else {
            PNG16_NO_VALUE
        };
        // PNG stores 16-bit samples big-endian.
        raw.extend_from_slice(&grey.to_be_bytes());
    }
    let mut out = Vec::new();
    image::codecs::png::PngEncoder::new(&mut out)
        .write_image(&raw, map.width, map.height, image::ExtendedColorType::L16)
        .map_err(|e| CoreError::Encode(e.to_string()))?;
    Ok(out)
}

/// Colour of a flagged pixel in the preview: outside mask dark grey, beyond range white,
/// unreliable magenta.
pub fn preview_flag_colour(flags: PixelFlags) -> Option<[u8; 3]> {
    if flags.has(PixelFlags::OUTSIDE_MASK) {
        Some([40, 40, 40])
    } else if flags.has(PixelFlags::BEYOND_RANGE) {
        Some([255, 255, 255])
    } else if flags.has(PixelFlags::UNRELIABLE) {
        Some([230, 0, 200])
    } else {
        None
    }
}

/// The colour scale of the preview (perceptually uniform, from the `colorous` crate).
fn scale_colour(t: f64) -> [u8; 3] {
    colorous::CIVIDIS
        .eval_continuous(t.clamp(0.0, 1.0))
        .as_array()
}

/// Height and width of one character of the preview's text, pixels (an 8 × 8 bitmap font).
const GLYPH_PX: u32 = 8;

/// Title of the order preview's colour bar, written upwards beside its numbers.
pub const COLOUR_BAR_TITLE: &str = "fringe order";

/// Title of the stress preview's colour bar (σ1 − σ2 in MPa; the preview's font is ASCII).
pub const STRESS_BAR_TITLE: &str = "sigma1 - sigma2 (MPa)";

/// One number of the preview's colour bar.
#[derive(Debug, Clone, PartialEq)]
pub struct BarLabel {
    /// The value it marks, in the bar's unit (fringes or MPa).
    pub order: f64,
    /// The bar's pixel row it marks, counted from the bar's first (top) row.
    pub row: u32,
    /// The number as written.
    pub text: String,
}

/// The numbers of a colour bar `rows` pixels high that runs from 0 on its last row to `top` (in
/// the bar's unit) on its first: `top` itself, and the multiples of the smallest step of 1, 2 or
/// 5 times a power of ten that lies at least five text heights apart, but not one within 1.5
/// text heights of `top`. Listed from 0 up.
pub fn colour_bar_labels(top: f64, rows: u32) -> Vec<BarLabel> {
    let span = f64::from(rows.max(2) - 1);
    let row_of = |value: f64| ((1.0 - value / top) * span).round() as u32;
    let px_per_unit = span / top;
    let least = 5.0 * f64::from(GLYPH_PX) / px_per_unit;
    let decade = 10f64.powf(least.log10().floor());
    let step = [1.0, 2.0, 5.0, 10.0]
        .into_iter()
        .map(|m| m * decade)
        .find(|s| *s >= least * (1.0 - 1e-9))
        .unwrap_or(top);
    let decimals = (-step.log10()).ceil().max(2.0) as usize;
    let label = |value: f64| BarLabel {
        order: value,
        row: row_of(value),
        text: number_text(value, decimals),
    };
    let mut labels: Vec<BarLabel> = (0..)
        .map(|i| f64::from(i) * step)
        .take_while(|value| (top - value) * px_per_unit >= 1.5 * f64::from(GLYPH_PX))
        .map(label)
        .collect();
    labels.push(label(top));
    labels
}

/// A number as the colour bar writes it: at most `decimals` decimals, no trailing zeros.
fn number_text(value: f64, decimals: usize) -> String {
    let text = format!("{value:.decimals$}");
    text.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// Writes `text` in black with its top-left corner at (x, y); upright, or turned to read
/// upwards with (x, y) its bottom-left corner.
fn draw_text(img: &mut RgbImage, text: &str, x: u32, y: u32, upwards: bool) {
    for (i, c) in text.chars().enumerate() {
        let glyph = font8x8::legacy::BASIC_LEGACY[usize::from(c as u8 & 0x7f)];
        let offset = i as u32 * GLYPH_PX;
        for (gy, bits) in (0..GLYPH_PX).zip(glyph) {
            for gx in (0..GLYPH_PX).filter(|gx| bits >> gx & 1 == 1) {
                let (px, py) = if upwards {
                    (x + gy, y - offset - gx)
                } else {
                    (x + offset + gx, y + gy)
                };
                if px < img.width() && py < img.height() {
                    img.put_pixel(px, py, Rgb([0, 0, 0]));
                }
            }
        }
    }
}

/// The order at the top of the preview's colour bar, fringes: the highest order the map could
/// read (the table's last order); for results stored without it, the map's highest order
/// rounded up.
fn bar_top(s: &MapStatistics) -> f64 {
    if s.table_max_order.is_finite() && s.table_max_order > 0.0 {
        s.table_max_order
    } else if s.max_order.is_finite() && s.max_order > 0.0 {
        s.max_order.ceil()
    } else {
        1.0
    }
}

/// The false-colour picture of `values` (one per pixel of `map`, in the bar's unit) beside a
/// colour bar from 0 to `top` titled `title`; flagged pixels in their flag colours.
fn preview(map: &OrderMap, values: &[f32], top: f64, title: &str) -> CoreResult<Vec<u8>> {
    let (w, h) = (map.width, map.height);
    // Beside the map: a gap, the bar, its ticks and numbers, the title written upwards. The
    // picture is at least tall enough for the title; the bar leaves half a text height at each
    // end so that the end numbers fit.
    let bar_w = (w / 12).clamp(24, 120);
    let bar_x = w + bar_w / 3;
    let margin = GLYPH_PX / 2;
    let height = h.max((title.len() as u32 + 1) * GLYPH_PX);
    let labels = colour_bar_labels(top, height - 2 * margin);
    let label_x = bar_x + bar_w + GLYPH_PX / 2;
    let widest = labels.iter().map(|l| l.text.len()).max().unwrap_or(1) as u32;
    let title_x = label_x + (widest + 1) * GLYPH_PX;
    let width = title_x + GLYPH_PX + margin;
    let mut img = RgbImage::from_pixel(width, height, Rgb([255, 255, 255]));
    for y in 0..h {
        for x in 0..w {
            let i = (y * w + x) as usize;
            let c = preview_flag_colour(map.flags[i]).unwrap_or_else(|| {
                if values[i].is_finite() {
                    scale_colour(f64::from(values[i]) / top)
                } else {
                    [230, 0, 200]
                }
            });
            img.put_pixel(x, y, Rgb(c));
        }
    }
    let bar_rows = height - 2 * margin;
    for row in 0..bar_rows {
        let colour = Rgb(scale_colour(1.0 - f64::from(row) / f64::from(bar_rows - 1)));
        for x in bar_x..bar_x + bar_w {
            img.put_pixel(x, margin + row, colour);
        }
    }
    for label in &labels {
        for x in bar_x + bar_w * 3 / 4..label_x - 1 {
            img.put_pixel(x, margin + label.row, Rgb([0, 0, 0]));
        }
        draw_text(&mut img, &label.text, label_x, label.row, false);
    }
    let title_px = title.len() as u32 * GLYPH_PX;
    draw_text(&mut img, title, title_x, (height + title_px) / 2 - 1, true);
    let mut out = Vec::new();
    image::codecs::png::PngEncoder::new(&mut out)
        .write_image(
            img.as_raw(),
            img.width(),
            img.height(),
            image::ExtendedColorType::Rgb8,
        )
        .map_err(|e| CoreError::Encode(e.to_string()))?;
    Ok(out)
}

/// CSV of `map`, one line `x,y,…,flags` per pixel under `header`; `cells(i)` writes the
/// columns between y and flags of pixel `i` (empty cells where there is no value).
fn csv(map: &OrderMap, header: &str, cells: impl Fn(usize) -> String) -> Vec<u8> {
    let mut out = Vec::with_capacity(map.order.len() * 24);
    let _ = writeln!(out, "{header}");
    let w = map.width as usize;
    for (i, flags) in map.flags.iter().enumerate() {
        let _ = writeln!(out, "{},{},{},{}", i % w, i / w, cells(i), flags.0);
    }
    out
}

/// NPY version 1.0 bytes of an unsigned 8-bit array of shape (rows, cols), C order — used for
/// the per-pixel [`PixelFlags`] bits.
pub fn npy_u8(values: &[u8], rows: usize, cols: usize) -> Vec<u8> {
    let mut out = npy_header("|u1", rows, cols, values.len());
    out.extend_from_slice(values);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn npy_header_is_padded_to_64_bytes_and_round_trips() {
        let v = [0.0, 1.5, f32::NAN, 4.25, -1.0, 2.0];
        let bytes = npy_f32(&v, 2, 3);
        let header_len = u16::from_le_bytes([bytes[8], bytes[9]]) as usize;
        // source: NumPy NEP 1 / numpy.lib.format documentation — total header is a multiple of 64
        assert_eq!((10 + header_len) % 64, 0);
        let (r, c, back) = read_npy_f32(&bytes).unwrap();
        assert_eq!((r, c), (2, 3));
        assert_eq!(back[1], 1.5);
        assert!(back[2].is_nan());
    }

    #[test]
    fn the_colour_bar_is_numbered_from_zero_to_the_tables_last_order() {
        let labelled = |top, rows| -> Vec<(f64, u32, String)> {
            colour_bar_labels(top, rows)
                .into_iter()
                .map(|l| (l.order, l.row, l.text))
                .collect()
        };
        // 89 rows for 4.4 fringes: 20 px per fringe, so steps of 2 (one fringe is under five
        // text heights); 4 lies 8 px below 4.4, within 1.5 text heights, and is left out.
        assert_eq!(
            labelled(4.4, 89),
            [
                (0.0, 88, "0".to_string()),
                (2.0, 48, "2".to_string()),
                (4.4, 0, "4.4".to_string())
            ]
        );
        // 101 rows for one fringe: 100 px per fringe, steps of half a fringe.
        assert_eq!(
            labelled(1.0, 101),
            [
                (0.0, 100, "0".to_string()),
                (0.5, 50, "0.5".to_string()),
                (1.0, 0, "1".to_string())
            ]
        );
    }

    /// One row of three valued pixels at orders 0, 2.2 and 4.4 of a table ending at 4.4.
    fn three_pixel_map() -> OrderMap {
        OrderMap {
            width: 3,
            height: 1,
            order: vec![0.0, 2.2, 4.4],
            residual: vec![0.5; 3],
            margin: vec![4.0; 3],
            flags: vec![PixelFlags(0); 3],
            uncertainty: vec![0.01; 3],
            exposure: crate::exposure::ExposureCorrection::NONE,
            statistics: MapStatistics {
                specimen_pixels: 3,
                valued_pixels: 3,
                beyond_range_share: 0.0,
                unreliable_share: 0.0,
                min_order: 0.0,
                max_order: 4.4,
                mean_order: 2.2,
                mean_residual: 0.5,
                table_max_order: 4.4,
            },
        }
    }

    #[test]
    fn the_preview_colours_the_tables_last_order_as_the_top_of_its_bar() {
        let map = three_pixel_map();
        let png = encode(&map, OutputFormat::Preview).unwrap();
        let img = image::load_from_memory(&png).unwrap().to_rgb8();
        // Tall enough for the title: 13 text heights of 8 px; the bar spans rows 4 to 99.
        assert_eq!(img.height(), 104);
        let (bar_x, margin) = (3 + 24 / 3, GLYPH_PX / 2);
        assert_eq!(img.get_pixel(bar_x, margin).0, scale_colour(1.0));
        assert_eq!(
            img.get_pixel(bar_x, img.height() - margin - 1).0,
            scale_colour(0.0)
        );
        assert_eq!(img.get_pixel(0, 0).0, scale_colour(0.0));
        assert_eq!(img.get_pixel(1, 0).0, scale_colour(0.5));
        assert_eq!(img.get_pixel(2, 0).0, img.get_pixel(bar_x, margin).0);
        // The numbers and the title are written in black beside the bar.
        let black = |x0: u32, x1: u32, y0: u32, y1: u32| {
            (x0..x1)
                .flat_map(|x| (y0..y1).map(move |y| (x, y)))
                .filter(|&(x, y)| img.get_pixel(x, y).0 == [0, 0, 0])
                .count()
        };
        let label_x = bar_x + 24 + GLYPH_PX / 2;
        assert!(
            black(label_x, label_x + 3 * GLYPH_PX, 0, GLYPH_PX) > 0,
            "4.4"
        );
        let title_x = label_x + 4 * GLYPH_PX;
        assert!(
            black(title_x, title_x + GLYPH_PX, 0, img.height()) > 0,
            "title"
        );
    }

    #[test]
    fn the_stress_map_is_the_order_times_fringe_value_over_thickness_in_every_format() {
        // source: stress-optic law σ1 − σ2 = N·f_σ/h. Hand-worked: f_σ = 10.5 N/mm, h = 6 mm →
        // 1.75 MPa per fringe, so orders 0, 2.2, 4.4 read 0, 3.85, 7.7 MPa.
        let mut map = three_pixel_map();
        map.order[0] = f32::NAN;
        map.flags[0] = PixelFlags(PixelFlags::UNRELIABLE);
        let law = StressOpticLaw::new(10.5, 6.0).unwrap();
        let npy = encode_stress(&map, &law, OutputFormat::Npy).unwrap();
        let (rows, cols, stress) = read_npy_f32(&npy).unwrap();
        assert_eq!((rows, cols), (1, 3));
        assert!(stress[0].is_nan());
        assert!((stress[1] - 3.85).abs() < 1e-5 && (stress[2] - 7.7).abs() < 1e-5);
        let csv = String::from_utf8(encode_stress(&map, &law, OutputFormat::Csv).unwrap()).unwrap();
        assert_eq!(
            csv,
            "x,y,stress_mpa,flags\n0,0,,4\n1,0,3.8500,0\n2,0,7.7000,0\n"
        );
        let err = encode_stress(&map, &law, OutputFormat::Png16).unwrap_err();
        assert!(
            matches!(
                err,
                CoreError::Invalid {
                    field: "format",
                    ..
                }
            ),
            "{err}"
        );
    }

    #[test]
    fn the_stress_preview_bar_runs_to_the_stress_at_the_tables_last_order_and_is_titled_in_mpa() {
        let map = three_pixel_map();
        let law = StressOpticLaw::new(10.5, 6.0).unwrap();
        let png = encode_stress(&map, &law, OutputFormat::Preview).unwrap();
        let img = image::load_from_memory(&png).unwrap().to_rgb8();
        // Tall enough for the 21-character title: 22 text heights of 8 px.
        assert_eq!(img.height(), 176);
        // The table's last order, 4.4 fringes, is 7.7 MPa: the top of the bar, as in the order
        // preview; the middle pixel at 3.85 MPa is the middle of the scale.
        assert_eq!(img.get_pixel(2, 0).0, scale_colour(1.0));
        assert_eq!(img.get_pixel(1, 0).0, scale_colour(0.5));
        // 168 rows for 7.7 MPa: 21.7 px per MPa, so a label every 2 MPa (five text heights are
        // 1.8 MPa); 6 lies 37 px below the top, clear of the top's own number.
        let texts: Vec<String> = colour_bar_labels(7.7, img.height() - GLYPH_PX)
            .into_iter()
            .map(|l| l.text)
            .collect();
        assert_eq!(texts, ["0", "2", "4", "6", "7.7"]);
    }

    #[test]
    fn colour_bars_in_megapascals_step_by_one_two_or_five_times_a_power_of_ten() {
        let steps = |top: f64, rows: u32| -> Vec<f64> {
            colour_bar_labels(top, rows)
                .into_iter()
                .map(|l| l.order)
                .collect()
        };
        // 201 rows for 250 MPa: 0.8 px per MPa; five text heights are 50 MPa.
        assert_eq!(steps(250.0, 201), [0.0, 50.0, 100.0, 150.0, 200.0, 250.0]);
        // 401 rows for 0.04 MPa: 10 000 px per MPa; five text heights are 0.004 MPa, so steps
        // of 0.005, written with three decimals.
        let texts: Vec<String> = colour_bar_labels(0.04, 401)
            .into_iter()
            .map(|l| l.text)
            .collect();
        assert_eq!(
            texts,
            ["0", "0.005", "0.01", "0.015", "0.02", "0.025", "0.03", "0.035", "0.04"]
        );
    }

    #[test]
    fn formats_are_chosen_by_extension() {
        assert_eq!(
            OutputFormat::from_path("a/b.NPY").unwrap(),
            OutputFormat::Npy
        );
        assert_eq!(
            OutputFormat::from_path("m.preview.png").unwrap(),
            OutputFormat::Preview
        );
        assert_eq!(
            OutputFormat::from_path("m.png").unwrap(),
            OutputFormat::Png16
        );
        assert!(OutputFormat::from_path("m.jpg").is_err());
    }
}
