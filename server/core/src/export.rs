//! Output formats of an order map: NPY, 16-bit PNG, false-colour preview PNG, CSV; and of its
//! σ1 − σ2 map in MPa (NPY, preview PNG, CSV).

use std::io::Write;
use std::sync::{Arc, Mutex};

use image::{Rgb, RgbImage};

use crate::error::{CoreError, CoreResult};
use crate::order_map::{MapStatistics, OrderMap, PixelFlags};
use crate::stress::{Coating, Specimen, StressOpticLaw};

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
    /// CSV with header `x,y,order,residual_de2000,flags`, one line per pixel, empty order = no value.
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

/// Whole rows of a map, row-major with `width` pixels a row: what a [`FileWriter`] is fed.
/// Every slice holds the same number of pixels, a multiple of `width`.
#[derive(Debug, Clone, Copy)]
pub struct Rows<'a> {
    /// Pixels per row.
    pub width: usize,
    /// Fringe orders, NaN = no value.
    pub order: &'a [f32],
    /// Colour residuals, CIEDE2000 (ΔE00).
    pub residual: &'a [f32],
    /// Flag bits.
    pub flags: &'a [PixelFlags],
    /// Standard uncertainty (1 σ) of the order, fringes, NaN = no value.
    pub uncertainty: &'a [f32],
}

impl Rows<'_> {
    /// Number of rows.
    pub fn count(&self) -> usize {
        self.order.len() / self.width.max(1)
    }

    /// Rows `first..end` of these (counted from the first of these).
    pub fn slice(&self, first: usize, end: usize) -> Self {
        let span = first * self.width..end * self.width;
        Rows {
            width: self.width,
            order: &self.order[span.clone()],
            residual: &self.residual[span.clone()],
            flags: &self.flags[span.clone()],
            uncertainty: &self.uncertainty[span],
        }
    }
}

impl OrderMap {
    /// All of the map's rows.
    pub fn rows(&self) -> Rows<'_> {
        Rows {
            width: self.width as usize,
            order: &self.order,
            residual: &self.residual,
            flags: &self.flags,
            uncertainty: &self.uncertainty,
        }
    }
}

/// What a file of a map holds: its orders in an [`OutputFormat`], σ1 − σ2 in MPa through a
/// stress-optic law or a coating's ε1 − ε2 in µε (NPY, preview or CSV), the 1 σ uncertainty of
/// the orders (NPY float32) or the flag bits (NPY uint8).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum FileKind {
    /// Fringe orders.
    Orders(OutputFormat),
    /// σ1 − σ2, MPa, through the law.
    Stress(OutputFormat, StressOpticLaw),
    /// ε1 − ε2 of a coating, µε: N·f_ε/(2·t_c).
    Strain(OutputFormat, Coating),
    /// Standard uncertainty (1 σ) of the order, fringes, NPY float32, NaN = no value.
    Uncertainty,
    /// Per-pixel flag bits, NPY uint8.
    Flags,
}

impl FileKind {
    /// Every name [`FileKind::from_name`] reads; the `stress-` ones need a law.
    pub const NAMES: [&'static str; 12] = [
        "npy",
        "png16",
        "preview",
        "csv",
        "uncertainty",
        "flags",
        "stress-npy",
        "stress-preview",
        "stress-csv",
        "strain-npy",
        "strain-preview",
        "strain-csv",
    ];

    /// Parses the API's `format` names: one of the orders' formats, `uncertainty`, `flags`, or
    /// `stress-` or `strain-` and `npy`, `preview` or `csv`, which need a specimen (strains a
    /// coating). An unknown name is refused naming `format`, a stress format without a specimen
    /// naming `fringe_value_n_per_mm`, a strain format without a coating
    /// `strain_fringe_value_um`.
    pub fn from_name(name: &str, specimen: Option<Specimen>) -> CoreResult<Self> {
        let unknown = || {
            let shown: String = name.chars().take(40).collect();
            CoreError::invalid(
                "format",
                format!(
                    "{shown:?} is not one of npy, png16, preview, csv, uncertainty, flags, \
                     stress-npy, stress-preview, stress-csv, strain-npy, strain-preview, \
                     strain-csv"
                ),
            )
        };
        let scaled = |rest: &str| {
            OutputFormat::from_name(rest)
                .ok()
                .filter(|f| *f != OutputFormat::Png16)
                .ok_or_else(unknown)
        };
        if let Some(rest) = name.strip_prefix("stress-") {
            let format = scaled(rest)?;
            let law = specimen.map(|s| s.law()).ok_or_else(|| {
                CoreError::invalid(
                    "fringe_value_n_per_mm",
                    format!("is required (with thickness_mm) for format {name}"),
                )
            })?;
            return Ok(FileKind::Stress(format, law));
        }
        match name.strip_prefix("strain-") {
            Some(rest) => {
                let format = scaled(rest)?;
                match specimen {
                    Some(Specimen::Coating(c)) => Ok(FileKind::Strain(format, c.coating)),
                    _ => Err(CoreError::invalid(
                        "strain_fringe_value_um",
                        format!("is required (a coating's fields) for format {name}"),
                    )),
                }
            }
            None => match name {
                "uncertainty" => Ok(FileKind::Uncertainty),
                "flags" => Ok(FileKind::Flags),
                _ => OutputFormat::from_name(name)
                    .map(FileKind::Orders)
                    .map_err(|_| unknown()),
            },
        }
    }

    /// MIME type of the file.
    pub fn content_type(self) -> &'static str {
        match self {
            FileKind::Orders(format)
            | FileKind::Stress(format, _)
            | FileKind::Strain(format, _) => format.content_type(),
            FileKind::Uncertainty | FileKind::Flags => OutputFormat::Npy.content_type(),
        }
    }

    /// The file's name for a map named `stem`.
    pub fn file_name(self, stem: &str) -> String {
        match self {
            FileKind::Orders(format) => format!("{stem}.{}", format.extension()),
            FileKind::Stress(format, _) => format!("{stem}-stress.{}", format.extension()),
            FileKind::Strain(format, _) => format!("{stem}-strain.{}", format.extension()),
            FileKind::Uncertainty => format!("{stem}-uncertainty.npy"),
            FileKind::Flags => format!("{stem}-flags.npy"),
        }
    }
}

impl FileKind {
    /// A stress or strain file's value per fringe (MPa or µε) and its colour bar's title.
    fn per_fringe(self) -> Option<(f64, &'static str)> {
        match self {
            FileKind::Stress(_, law) => Some((law.stress_difference_mpa(1.0), STRESS_BAR_TITLE)),
            FileKind::Strain(_, coating) => {
                Some((coating.strain_difference(1.0) * 1e6, STRAIN_BAR_TITLE))
            }
            _ => None,
        }
    }
}

/// Encodes the whole of `map` as a file of `kind`.
pub fn encode(map: &OrderMap, kind: FileKind) -> CoreResult<Vec<u8>> {
    let mut writer = FileWriter::new(kind, map.width, map.height, &map.statistics)?;
    let mut out = writer.header();
    out.extend(writer.write(map.rows())?);
    out.extend(writer.finish()?);
    Ok(out)
}

/// A byte buffer shared between a PNG stream writer and the [`FileWriter`] that drains it.
#[derive(Debug, Clone, Default)]
struct SharedBuffer(Arc<Mutex<Vec<u8>>>);

impl SharedBuffer {
    fn take(&self) -> Vec<u8> {
        std::mem::take(&mut *self.0.lock().unwrap_or_else(|e| e.into_inner()))
    }
}

impl Write for SharedBuffer {
    fn write(&mut self, bytes: &[u8]) -> std::io::Result<usize> {
        self.0
            .lock()
            .unwrap_or_else(|e| e.into_inner())
            .extend_from_slice(bytes);
        Ok(bytes.len())
    }

    fn flush(&mut self) -> std::io::Result<()> {
        Ok(())
    }
}

/// Where encoded rows go: plain bytes (NPY, CSV) or a PNG stream.
enum Output {
    Bytes(Vec<u8>),
    Png {
        stream: Box<png::StreamWriter<'static, SharedBuffer>>,
        buffer: SharedBuffer,
    },
}

/// Encodes a map's file row by row, so that a file of any size is made with memory for a
/// few rows at a time: feed it all rows in order ([`FileWriter::write`] returns the bytes
/// ready so far), then [`FileWriter::finish`]. The bytes of [`FileWriter::header`],
/// of each `write` and of `finish`, in that order, are the file.
pub struct FileWriter {
    kind: FileKind,
    width: u32,
    height: u32,
    next_row: u32,
    /// The value at the top of a preview's colour bar, in the bar's unit.
    bar_top: f64,
    /// The preview's part right of the map, its full height.
    panel: Option<RgbImage>,
    header: Vec<u8>,
    output: Output,
}

impl std::fmt::Debug for FileWriter {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("FileWriter")
            .field("kind", &self.kind)
            .field("width", &self.width)
            .field("height", &self.height)
            .field("next_row", &self.next_row)
            .finish_non_exhaustive()
    }
}

fn png_error(e: impl std::fmt::Display) -> CoreError {
    CoreError::Encode(format!("png: {e}"))
}

fn png_stream(
    width: u32,
    height: u32,
    colour: png::ColorType,
    depth: png::BitDepth,
) -> CoreResult<Output> {
    let buffer = SharedBuffer::default();
    let mut encoder = png::Encoder::new(buffer.clone(), width, height);
    encoder.set_color(colour);
    encoder.set_depth(depth);
    let stream = encoder
        .write_header()
        .and_then(png::Writer::into_stream_writer)
        .map_err(png_error)?;
    Ok(Output::Png {
        stream: Box::new(stream),
        buffer,
    })
}

impl FileWriter {
    /// A writer of a `kind` file of a `width` × `height` map with `statistics` (the preview's
    /// colour bar reads the table's last order from them).
    pub fn new(
        kind: FileKind,
        width: u32,
        height: u32,
        statistics: &MapStatistics,
    ) -> CoreResult<Self> {
        let (rows, cols) = (height as usize, width as usize);
        let top = bar_top(statistics);
        let mut panel = None;
        let mut bar_top_value = top;
        let plain = |header: Vec<u8>| (header, Output::Bytes(Vec::new()));
        let (header, output) = match kind {
            FileKind::Orders(OutputFormat::Npy)
            | FileKind::Stress(OutputFormat::Npy, _)
            | FileKind::Strain(OutputFormat::Npy, _)
            | FileKind::Uncertainty => plain(npy_header("<f4", rows, cols)),
            FileKind::Flags => plain(npy_header("|u1", rows, cols)),
            FileKind::Orders(OutputFormat::Csv) => {
                plain(b"x,y,order,residual_de2000,flags\n".to_vec())
            }
            FileKind::Stress(OutputFormat::Csv, _) => plain(b"x,y,stress_mpa,flags\n".to_vec()),
            FileKind::Strain(OutputFormat::Csv, _) => {
                plain(b"x,y,strain_microstrain,flags\n".to_vec())
            }
            FileKind::Orders(OutputFormat::Png16) => (
                Vec::new(),
                png_stream(
                    width,
                    height,
                    png::ColorType::Grayscale,
                    png::BitDepth::Sixteen,
                )?,
            ),
            FileKind::Stress(OutputFormat::Png16, _) | FileKind::Strain(OutputFormat::Png16, _) => {
                return Err(CoreError::invalid(
                    "format",
                    "a stress or strain map is written as NPY, preview PNG or CSV, not as a \
                     16-bit PNG",
                ))
            }
            FileKind::Orders(OutputFormat::Preview)
            | FileKind::Stress(OutputFormat::Preview, _)
            | FileKind::Strain(OutputFormat::Preview, _) => {
                let (top, title) = match kind.per_fringe() {
                    Some((per_fringe, title)) => (per_fringe * top, title),
                    None => (top, COLOUR_BAR_TITLE),
                };
                bar_top_value = top;
                let side = preview_panel(width, height, top, title);
                let output = png_stream(
                    width + side.width(),
                    side.height(),
                    png::ColorType::Rgb,
                    png::BitDepth::Eight,
                )?;
                panel = Some(side);
                (Vec::new(), output)
            }
        };
        Ok(FileWriter {
            kind,
            width,
            height,
            next_row: 0,
            bar_top: bar_top_value,
            panel,
            header,
            output,
        })
    }

    /// The file's first bytes (NPY header, CSV header line, PNG signature and header).
    pub fn header(&mut self) -> Vec<u8> {
        let mut out = std::mem::take(&mut self.header);
        if let Output::Png { buffer, .. } = &self.output {
            out.extend(buffer.take());
        }
        out
    }

    /// Encodes the next `rows`; returns the bytes ready so far. Rows past the map's height,
    /// or of another width, are refused.
    pub fn write(&mut self, rows: Rows<'_>) -> CoreResult<Vec<u8>> {
        let count = rows.count() as u32;
        if rows.width != self.width as usize || self.next_row + count > self.height {
            return Err(CoreError::Encode(format!(
                "{count} rows of {} pixels do not continue a {}×{} map at row {}",
                rows.width, self.width, self.height, self.next_row
            )));
        }
        let y0 = self.next_row as usize;
        self.next_row += count;
        let stress = self.kind.per_fringe().map(|(per_fringe, _)| {
            let k = per_fringe as f32;
            rows.order.iter().map(|n| n * k).collect::<Vec<f32>>()
        });
        let values = stress.as_deref().unwrap_or(rows.order);
        let w = rows.width;
        match (&mut self.output, self.kind) {
            (Output::Bytes(out), FileKind::Flags) => out.extend(rows.flags.iter().map(|f| f.0)),
            (Output::Bytes(out), FileKind::Uncertainty) => {
                out.extend(rows.uncertainty.iter().flat_map(|v| v.to_le_bytes()));
            }
            (Output::Bytes(out), FileKind::Orders(OutputFormat::Csv)) => {
                out.reserve(values.len() * 24);
                for (i, (o, r)) in values.iter().zip(rows.residual).enumerate() {
                    let _ = write!(out, "{},{},", i % w, y0 + i / w);
                    if o.is_finite() {
                        let _ = write!(out, "{o:.4},{r:.2}");
                    } else {
                        out.push(b',');
                    }
                    let _ = writeln!(out, ",{}", rows.flags[i].0);
                }
            }
            (Output::Bytes(out), FileKind::Stress(OutputFormat::Csv, _))
            | (Output::Bytes(out), FileKind::Strain(OutputFormat::Csv, _)) => {
                out.reserve(values.len() * 20);
                for (i, s) in values.iter().enumerate() {
                    let _ = write!(out, "{},{},", i % w, y0 + i / w);
                    if s.is_finite() {
                        let _ = write!(out, "{s:.4}");
                    }
                    let _ = writeln!(out, ",{}", rows.flags[i].0);
                }
            }
            (Output::Bytes(out), _) => {
                out.extend(values.iter().flat_map(|v| v.to_le_bytes()));
            }
            (Output::Png { stream, .. }, FileKind::Orders(OutputFormat::Png16)) => {
                let mut raw = Vec::with_capacity(values.len() * 2);
                for v in values {
                    // PNG stores 16-bit samples big-endian.
                    raw.extend_from_slice(&png16_grey(*v).to_be_bytes());
                }
                stream.write_all(&raw).map_err(png_error)?;
            }
            (Output::Png { stream, .. }, _) => {
                let panel = self.panel.as_ref().ok_or_else(|| png_error("no panel"))?;
                let mut raw = Vec::with_capacity((w + panel.width() as usize) * 3);
                for (row, y) in (0..rows.count()).zip(y0..) {
                    raw.clear();
                    let span = row * w..(row + 1) * w;
                    for (flags, value) in rows.flags[span.clone()].iter().zip(&values[span]) {
                        let c = preview_flag_colour(*flags).unwrap_or_else(|| {
                            if value.is_finite() {
                                scale_colour(f64::from(*value) / self.bar_top)
                            } else {
                                [230, 0, 200]
                            }
                        });
                        raw.extend_from_slice(&c);
                    }
                    raw.extend_from_slice(panel_row(panel, y as u32));
                    stream.write_all(&raw).map_err(png_error)?;
                }
            }
        }
        Ok(self.take_output())
    }

    fn take_output(&mut self) -> Vec<u8> {
        match &mut self.output {
            Output::Bytes(out) => std::mem::take(out),
            Output::Png { buffer, .. } => buffer.take(),
        }
    }

    /// Ends the file; returns its last bytes. Refused unless every row was written.
    pub fn finish(mut self) -> CoreResult<Vec<u8>> {
        if self.next_row != self.height {
            return Err(CoreError::Encode(format!(
                "the file ended after {} of {} rows",
                self.next_row, self.height
            )));
        }
        let mut out = self.header();
        out.extend(self.take_output());
        if let Output::Png { mut stream, buffer } = self.output {
            // A preview taller than the map (for its bar's title): white below the map.
            if let Some(panel) = &self.panel {
                let white = vec![255u8; self.width as usize * 3];
                for y in self.height..panel.height() {
                    stream.write_all(&white).map_err(png_error)?;
                    stream.write_all(panel_row(panel, y)).map_err(png_error)?;
                }
            }
            stream.finish().map_err(png_error)?;
            out.extend(buffer.take());
        }
        Ok(out)
    }
}

/// The 16-bit PNG's grey value of an order: round(order × 1000), 65535 where there is none.
fn png16_grey(order: f32) -> u16 {
    if order.is_finite() {
        (order * PNG16_SCALE)
            .round()
            .clamp(0.0, f32::from(PNG16_NO_VALUE - 1)) as u16
    } else {
        PNG16_NO_VALUE
    }
}

/// Row `y` of the preview's panel, RGB bytes.
fn panel_row(panel: &RgbImage, y: u32) -> &[u8] {
    let stride = panel.width() as usize * 3;
    let start = y as usize * stride;
    &panel.as_raw()[start..start + stride]
}

/// NPY version 1.0 header for a 2-D C-order array of `descr` (e.g. `<f4`), padded so that
/// magic, version, length and dictionary together fill a multiple of 64 bytes.
fn npy_header(descr: &str, rows: usize, cols: usize) -> Vec<u8> {
    let dict =
        format!("{{'descr': '{descr}', 'fortran_order': False, 'shape': ({rows}, {cols}), }}");
    let unpadded = 10 + dict.len() + 1;
    let padding = (64 - unpadded % 64) % 64;
    let header_len = dict.len() + padding + 1;
    let mut out = Vec::with_capacity(10 + header_len);
    out.extend_from_slice(b"\x93NUMPY\x01\x00");
    out.extend_from_slice(&(header_len as u16).to_le_bytes());
    out.extend_from_slice(dict.as_bytes());
    out.extend(std::iter::repeat_n(b' ', padding));
    out.push(b'\n');
    out
}

/// NPY version 1.0 bytes of a little-endian float32 array of shape (rows, cols), C order.
pub fn npy_f32(values: &[f32], rows: usize, cols: usize) -> Vec<u8> {
    let mut out = npy_header("<f4", rows, cols);
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

/// Title of a coating's strain preview's colour bar (ε1 − ε2 in µε).
pub const STRAIN_BAR_TITLE: &str = "eps1 - eps2 (microstrain)";

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
pub fn bar_top(s: &MapStatistics) -> f64 {
    if s.table_max_order.is_finite() && s.table_max_order > 0.0 {
        s.table_max_order
    } else if s.max_order.is_finite() && s.max_order > 0.0 {
        s.max_order.ceil()
    } else {
        1.0
    }
}

/// The part of a preview right of a `w` × `h` map: a colour bar from 0 to `top` (in the bar's
/// unit) titled `title`, its ticks and numbers. As tall as the picture, which is at least tall
/// enough for the title.
fn preview_panel(w: u32, h: u32, top: f64, title: &str) -> RgbImage {
    // Beside the map: a gap, the bar, its ticks and numbers, the title written upwards. The bar
    // leaves half a text height at each end so that the end numbers fit. Coordinates here are
    // the picture's less `w`.
    let bar_w = (w / 12).clamp(24, 120);
    let bar_x = bar_w / 3;
    let margin = GLYPH_PX / 2;
    let height = h.max((title.len() as u32 + 1) * GLYPH_PX);
    let labels = colour_bar_labels(top, height - 2 * margin);
    let label_x = bar_x + bar_w + GLYPH_PX / 2;
    let widest = labels.iter().map(|l| l.text.len()).max().unwrap_or(1) as u32;
    let title_x = label_x + (widest + 1) * GLYPH_PX;
    let width = title_x + GLYPH_PX + margin;
    let mut img = RgbImage::from_pixel(width, height, Rgb([255, 255, 255]));
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
    img
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
                ambiguous_colour: false,
            },
        }
    }

    #[test]
    fn the_preview_colours_the_tables_last_order_as_the_top_of_its_bar() {
        let map = three_pixel_map();
        let png = encode(&map, FileKind::Orders(OutputFormat::Preview)).unwrap();
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
        let npy = encode(&map, FileKind::Stress(OutputFormat::Npy, law)).unwrap();
        let (rows, cols, stress) = read_npy_f32(&npy).unwrap();
        assert_eq!((rows, cols), (1, 3));
        assert!(stress[0].is_nan());
        assert!((stress[1] - 3.85).abs() < 1e-5 && (stress[2] - 7.7).abs() < 1e-5);
        let csv =
            String::from_utf8(encode(&map, FileKind::Stress(OutputFormat::Csv, law)).unwrap())
                .unwrap();
        assert_eq!(
            csv,
            "x,y,stress_mpa,flags\n0,0,,4\n1,0,3.8500,0\n2,0,7.7000,0\n"
        );
        let err = encode(&map, FileKind::Stress(OutputFormat::Png16, law)).unwrap_err();
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
    fn a_coatings_strain_map_is_the_order_times_its_strain_per_fringe_and_needs_a_coating() {
        // source: ε1 − ε2 = N·f_ε/(2·t_c) for a coating read in reflection (common practice, no
        // source). Hand-worked: f_ε = 4 µm, t_c = 2 mm → 1000 µε per fringe, so orders 0, 2.2,
        // 4.4 read 0, 2200, 4400 µε.
        let map = three_pixel_map();
        let coating = Coating::new(4.0, 2.0).unwrap();
        let csv =
            String::from_utf8(encode(&map, FileKind::Strain(OutputFormat::Csv, coating)).unwrap())
                .unwrap();
        assert_eq!(
            csv,
            "x,y,strain_microstrain,flags\n0,0,0.0000,0\n1,0,2200.0000,0\n2,0,4400.0000,0\n"
        );
        let law = StressOpticLaw::new(10.5, 6.0).unwrap();
        let transmission = Some(Specimen::Transmission(law));
        let e = FileKind::from_name("strain-npy", transmission).unwrap_err();
        assert!(
            matches!(
                e,
                CoreError::Invalid {
                    field: "strain_fringe_value_um",
                    ..
                }
            ),
            "{e}"
        );
        assert_eq!(
            FileKind::from_name("stress-csv", transmission).unwrap(),
            FileKind::Stress(OutputFormat::Csv, law)
        );
        let png = encode(&map, FileKind::Strain(OutputFormat::Preview, coating)).unwrap();
        assert!(png.starts_with(b"\x89PNG"));
    }

    #[test]
    fn the_stress_preview_bar_runs_to_the_stress_at_the_tables_last_order_and_is_titled_in_mpa() {
        let map = three_pixel_map();
        let law = StressOpticLaw::new(10.5, 6.0).unwrap();
        let png = encode(&map, FileKind::Stress(OutputFormat::Preview, law)).unwrap();
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
    fn a_file_written_a_row_at_a_time_reads_as_the_file_written_at_once() {
        let mut map = three_pixel_map();
        map.width = 1;
        map.height = 3;
        map.order[1] = f32::NAN;
        map.flags[1] = PixelFlags(PixelFlags::BEYOND_RANGE);
        let law = StressOpticLaw::new(10.5, 6.0).unwrap();
        for kind in [
            FileKind::Orders(OutputFormat::Npy),
            FileKind::Orders(OutputFormat::Csv),
            FileKind::Orders(OutputFormat::Png16),
            FileKind::Orders(OutputFormat::Preview),
            FileKind::Stress(OutputFormat::Csv, law),
            FileKind::Uncertainty,
            FileKind::Flags,
        ] {
            let whole = encode(&map, kind).unwrap();
            let mut writer = FileWriter::new(kind, 1, 3, &map.statistics).unwrap();
            let mut parts = writer.header();
            for y in 0..3 {
                parts.extend(writer.write(map.rows().slice(y, y + 1)).unwrap());
            }
            parts.extend(writer.finish().unwrap());
            match kind {
                FileKind::Orders(OutputFormat::Png16 | OutputFormat::Preview) => {
                    let decoded = |b: &[u8]| image::load_from_memory(b).unwrap().into_bytes();
                    assert_eq!(decoded(&parts), decoded(&whole), "{kind:?}");
                }
                _ => assert_eq!(parts, whole, "{kind:?}"),
            }
        }
        let csv = String::from_utf8(encode(&map, FileKind::Orders(OutputFormat::Csv)).unwrap());
        assert_eq!(
            csv.unwrap(),
            "x,y,order,residual_de2000,flags\n0,0,0.0000,0.50,0\n0,1,,,2\n0,2,4.4000,0.50,0\n"
        );
        let flags = encode(&map, FileKind::Flags).unwrap();
        assert_eq!(&flags[flags.len() - 3..], &[0, 2, 0]);
    }

    #[test]
    fn a_file_missing_rows_is_refused_at_its_end() {
        let map = three_pixel_map();
        let writer = FileWriter::new(FileKind::Flags, 3, 2, &map.statistics).unwrap();
        assert!(matches!(writer.finish(), Err(CoreError::Encode(_))));
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
