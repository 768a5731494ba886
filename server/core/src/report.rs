//! The PDF report of one photo: every input, the results and their caution as text a reader
//! (or `pdftotext`) can copy, the photo, the order and stress maps with their numbered colour
//! bars, and the free-edge stress profile with its maximum and K_t drawn as vector lines.
//!
//! Pictures are copies at most [`PICTURE_SIDE_PX`] pixels on their longer side, so a report
//! takes memory for those copies and its text, whatever the photo's size. Text is set in the
//! PDF's standard Helvetica (WinAnsi encoding); characters outside it print as `?`.
//!
//! Pixel convention of every position: x right, y down, pixel (x, y) covers
//! [x, x+1) × [y, y+1). Stresses in MPa, strains in µε.

use std::io::Write;

use flate2::write::ZlibEncoder;
use flate2::Compression;
use pdf_writer::{Content, Filter, Finish, Name, Pdf, Rect, Ref, Str, TextStr};

use crate::boundary::{boundary_stress, BoundaryStress, EdgePath};
use crate::colour::{source_index, thumbnail_size};
use crate::error::{CoreError, CoreResult};
use crate::export::{bar_top, colour_bar_labels, FileKind, FileWriter, OutputFormat, Rows};
use crate::order_map::OrderMap;
use crate::stress::{maximum_text, positive, InputOrigins, Specimen, STRESS_CAUTION};
use crate::Photo;

/// Longest side of the report's pictures (photo and maps), pixels.
pub const PICTURE_SIDE_PX: u32 = 640;

/// A4 portrait, points.
const PAGE: (f32, f32) = (595.0, 842.0);
/// Page margin, points.
const MARGIN: f32 = 50.0;
/// Body text size and line spacing, points.
const TEXT_PT: f32 = 9.5;
const LINE_PT: f32 = 13.0;
/// Characters per wrapped line of body text (Helvetica averages about half an em a character).
const WRAP_CHARS: usize = 100;

/// Longest report title, characters.
pub const MAX_TITLE_CHARS: usize = 200;

/// What a report says besides the map: the optional inputs a person gives.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ReportOptions {
    /// Nominal stress σ_nom, MPa (positive): adds K_t = σ_max / σ_nom.
    pub nominal_stress_mpa: Option<f64>,
    /// The load the photo was taken at, N (positive), as the report states it.
    pub load_n: Option<f64>,
    /// Image scale, mm per pixel (positive): positions are given in mm beside px.
    pub mm_per_px: Option<f64>,
    /// A title for the first page (default "Stress report").
    pub title: Option<String>,
}

impl ReportOptions {
    /// Checks every given number is positive; the error names the field.
    pub fn validate(&self) -> CoreResult<()> {
        for (field, value) in [
            ("nominal_stress_mpa", self.nominal_stress_mpa),
            ("load_n", self.load_n),
            ("mm_per_px", self.mm_per_px),
        ] {
            if let Some(v) = value {
                positive(field, v)?;
            }
        }
        if self
            .title
            .as_ref()
            .is_some_and(|t| t.chars().count() > MAX_TITLE_CHARS)
        {
            return Err(CoreError::invalid(
                "title",
                format!("is longer than {MAX_TITLE_CHARS} characters"),
            ));
        }
        Ok(())
    }
}

/// Everything a report states about where its numbers come from.
#[derive(Debug, Clone, PartialEq)]
pub struct ReportInputs {
    /// The photo's name (file name, or "upload").
    pub photo_name: String,
    /// The calibration's name.
    pub calibration_name: String,
    /// The calibration's id: the service's id, or the file and its SHA-256 on the command line.
    pub calibration_id: String,
    /// The model or coating material the calibration was measured on.
    pub material: String,
    /// How orders become stresses.
    pub specimen: Specimen,
    /// Which of the specimen's inputs were taken from the calibration.
    pub origins: InputOrigins,
    /// The edge sampled for the free-edge stress.
    pub edge: EdgePath,
    /// The optional inputs.
    pub options: ReportOptions,
}

/// Writes the PDF report of `map`, mapped from `photo` (`None` for a stored map, whose photo
/// is not kept: the report says so in the photo's place): the free-edge stress along
/// `inputs.edge` is computed here (refused as [`boundary_stress`] refuses it).
pub fn report_pdf(
    photo: Option<&Photo>,
    map: &OrderMap,
    inputs: &ReportInputs,
) -> CoreResult<Vec<u8>> {
    inputs.options.validate()?;
    if let Some(photo) = photo.filter(|p| (p.width(), p.height()) != (map.width, map.height)) {
        return Err(CoreError::invalid(
            "photo",
            format!(
                "is {}×{} but the map is {}×{}",
                photo.width(),
                photo.height(),
                map.width,
                map.height
            ),
        ));
    }
    let law = inputs.specimen.law();
    let edge = boundary_stress(map, &law, inputs.options.nominal_stress_mpa, &inputs.edge)?;
    let mut doc = Document::default();
    first_page(&mut doc, map, &edge, inputs);
    doc.new_page();
    doc.heading("Photo");
    match photo {
        Some(photo) => {
            let (w, h, rgb) = photo.thumbnail_rgb8(PICTURE_SIDE_PX);
            doc.picture(
                Picture::new(w, h, rgb)?,
                &format!("{} ({} x {} px)", inputs.photo_name, map.width, map.height),
                None,
            );
        }
        None => doc.paragraph(&format!(
            "{} ({} x {} px): the photo is not kept with a stored map, so it is not shown here.",
            inputs.photo_name, map.width, map.height
        )),
    }
    doc.heading("Fringe orders");
    let orders = map_picture(map, FileKind::Orders(OutputFormat::Preview))?;
    doc.picture(
        orders,
        &format!(
            "Fringe order N; colour bar from 0 to {:.2} fringes (the highest order the map can \
             read). Dark grey: outside the mask; white: beyond range; magenta: unreliable.",
            bar_top(&map.statistics)
        ),
        None,
    );
    doc.new_page();
    doc.heading("Stress map");
    let stress = map_picture(map, FileKind::Stress(OutputFormat::Preview, law))?;
    doc.picture(
        stress,
        &format!(
            "sigma1 - sigma2, MPa; colour bar from 0 to {:.3} MPa. The ring marks the \
             maximum free-edge stress.",
            law.stress_difference_mpa(bar_top(&map.statistics))
        ),
        Some((
            (edge.x / f64::from(map.width)) as f32,
            (edge.y / f64::from(map.height)) as f32,
        )),
    );
    doc.heading("Free-edge stress along the edge");
    profile(&mut doc, &edge, &inputs.edge);
    doc.finish(inputs.options.title.as_deref().unwrap_or("Stress report"))
}

/// The report's first page: inputs, results, statistics, flags and the caution.
fn first_page(doc: &mut Document, map: &OrderMap, edge: &BoundaryStress, inputs: &ReportInputs) {
    let o = &inputs.options;
    let s = &map.statistics;
    let mm = |x: f64, y: f64| {
        o.mm_per_px.map_or(String::new(), |k| {
            format!(" = ({:.2}, {:.2}) mm", x * k, y * k)
        })
    };
    let given =
        |v: Option<f64>, unit: &str| v.map_or("not given".to_string(), |v| format!("{v} {unit}"));
    doc.title(o.title.as_deref().unwrap_or("Stress report"));
    doc.paragraph("Results support, and do not replace, engineering judgement.");
    doc.heading("Inputs");
    doc.paragraph(&format!(
        "photo: {} ({} x {} px)",
        inputs.photo_name, map.width, map.height
    ));
    doc.paragraph(&format!(
        "calibration: {} (id {})",
        inputs.calibration_name, inputs.calibration_id
    ));
    let material = if inputs.material.trim().is_empty() {
        "not given"
    } else {
        inputs.material.as_str()
    };
    doc.paragraph(&format!("material: {material}"));
    for line in inputs.specimen.input_lines() {
        doc.paragraph(&line);
    }
    for line in inputs.origins.lines() {
        doc.paragraph(&line);
    }
    doc.paragraph(&format!("load: {}", given(o.load_n, "N")));
    doc.paragraph(&format!(
        "nominal stress: {}",
        given(o.nominal_stress_mpa, "MPa")
    ));
    doc.paragraph(&format!(
        "scale: {}",
        o.mm_per_px
            .map_or("not given (positions in px only)".to_string(), |k| format!(
                "{k} mm per px"
            ))
    ));
    doc.paragraph(&format!(
        "edge: {}",
        match &inputs.edge {
            EdgePath::Outline => "the whole outline of the mask".to_string(),
            EdgePath::Polyline(p) => format!("a polyline of {} points", p.len()),
        }
    ));
    doc.heading("Free-edge stress and K_t");
    doc.paragraph(&format!(
        "maximum free-edge stress |sigma_t|: {} at ({:.1}, {:.1}) px{}, fringe order {:.3}",
        maximum_text(edge.max_stress_mpa, "MPa", edge.max_is_lower_bound),
        edge.x,
        edge.y,
        mm(edge.x, edge.y),
        edge.order
    ));
    doc.paragraph(&match edge.kt {
        Some(kt) => format!(
            "K_t = sigma_max / sigma_nom: {}",
            maximum_text(kt, "", edge.max_is_lower_bound)
        ),
        None => "K_t: not computed (no nominal stress given)".to_string(),
    });
    doc.paragraph(&format!(
        "edge points: {} sampled, {} with a value; orders read {} and {} px inside the edge \
         and carried to it along the line through both",
        edge.edge_points, edge.valued_points, edge.sample_insets_px[0], edge.sample_insets_px[1]
    ));
    if edge.beyond_range {
        doc.paragraph(
            "Beyond-range pixels touch the edge: the true maximum may lie there, so the maximum \
             and K_t above are lower bounds.",
        );
    }
    doc.heading("Map statistics");
    let figures = inputs.specimen.statistics(s);
    doc.paragraph(&format!(
        "specimen pixels {}, valued {}, beyond range {:.1} %, unreliable {:.1} %",
        s.specimen_pixels,
        s.valued_pixels,
        100.0 * s.beyond_range_share,
        100.0 * s.unreliable_share
    ));
    doc.paragraph(&format!(
        "fringe order: min {:.3}, mean {:.3}, max {}",
        s.min_order,
        s.mean_order,
        maximum_text(s.max_order, "fringes", s.max_is_lower_bound())
    ));
    let t = figures.stress;
    doc.paragraph(&format!(
        "sigma1 - sigma2: min {:.3}, mean {:.3}, max {} ({:.4} MPa per fringe)",
        t.min_stress_mpa,
        t.mean_stress_mpa,
        maximum_text(t.max_stress_mpa, "MPa", t.max_is_lower_bound),
        figures.stress_per_fringe_mpa
    ));
    if let Some(e) = figures.strain {
        doc.paragraph(&format!(
            "eps1 - eps2: min {:.1}, mean {:.1}, max {}",
            e.min_strain_microstrain,
            e.mean_strain_microstrain,
            maximum_text(
                e.max_strain_microstrain,
                "microstrain",
                e.max_is_lower_bound
            )
        ));
    }
    doc.paragraph(&format!(
        "mean colour residual: {:.2} dE00 (CIEDE2000)",
        s.mean_residual
    ));
    if let Some(c) = s.caution() {
        doc.paragraph(&format!("caution: {c}"));
    }
    doc.heading("Flags");
    doc.paragraph("outside mask: not part of the specimen; no value (dark grey in the maps).");
    doc.paragraph(
        "beyond range: the order passes the calibration's last order; no value, and every \
         maximum of a map with such pixels is a lower bound (white in the maps).",
    );
    doc.paragraph(
        "unreliable: too steep, washed out or ambiguous to be sure; no value (magenta in the \
         maps).",
    );
    doc.heading("Caution");
    let mut caution = STRESS_CAUTION.to_string();
    caution[..1].make_ascii_uppercase();
    doc.paragraph(&format!("{caution}."));
}

/// A preview of `map` as a file of `kind` would draw it (with its numbered colour bar), from
/// a copy at most [`PICTURE_SIDE_PX`] on its longer side.
fn map_picture(map: &OrderMap, kind: FileKind) -> CoreResult<Picture> {
    let (w, h) = thumbnail_size(map.width, map.height, PICTURE_SIDE_PX);
    let n = (w * h) as usize;
    let (mut order, mut residual, mut flags, mut uncertainty) = (
        Vec::with_capacity(n),
        Vec::with_capacity(n),
        Vec::with_capacity(n),
        Vec::with_capacity(n),
    );
    for ty in 0..h {
        let y = source_index(ty, h, map.height);
        for tx in 0..w {
            let i = (y * map.width + source_index(tx, w, map.width)) as usize;
            order.push(map.order[i]);
            residual.push(map.residual[i]);
            flags.push(map.flags[i]);
            uncertainty.push(map.uncertainty[i]);
        }
    }
    let rows = Rows {
        width: w as usize,
        order: &order,
        residual: &residual,
        flags: &flags,
        uncertainty: &uncertainty,
    };
    let mut writer = FileWriter::new(kind, w, h, &map.statistics)?;
    let mut png = writer.header();
    png.extend(writer.write(rows)?);
    png.extend(writer.finish()?);
    let image = image::load_from_memory_with_format(&png, image::ImageFormat::Png)
        .map_err(|e| CoreError::Encode(format!("preview: {e}")))?
        .into_rgb8();
    let mut picture = Picture::new(image.width(), image.height(), image.into_raw())?;
    picture.map_size = (w, h);
    Ok(picture)
}

/// The free-edge stress profile: |σ_t| against the position along the edge (the angle about
/// the edge points' centroid for an outline, the distance along a polyline), the maximum
/// ringed, beyond-range points marked on the axis.
fn profile(doc: &mut Document, edge: &BoundaryStress, path: &EdgePath) {
    let samples = &edge.samples;
    let positions: Vec<f64> = match path {
        EdgePath::Polyline(_) => {
            let mut run = 0.0;
            let mut last: Option<(f64, f64)> = None;
            samples
                .iter()
                .map(|s| {
                    if let Some((x, y)) = last {
                        run += (s.x - x).hypot(s.y - y);
                    }
                    last = Some((s.x, s.y));
                    run
                })
                .collect()
        }
        EdgePath::Outline => {
            let n = samples.len().max(1) as f64;
            let cx = samples.iter().map(|s| s.x).sum::<f64>() / n;
            let cy = samples.iter().map(|s| s.y).sum::<f64>() / n;
            samples
                .iter()
                .map(|s| (s.y - cy).atan2(s.x - cx).to_degrees().rem_euclid(360.0))
                .collect()
        }
    };
    let (x_label, x_top) = match path {
        EdgePath::Polyline(_) => (
            "distance along the polyline (px)",
            positions.last().copied().unwrap_or(1.0).max(1.0),
        ),
        EdgePath::Outline => (
            "angle about the edge's centroid (degrees, from +x towards +y, y down)",
            360.0,
        ),
    };
    doc.ensure(270.0);
    let plot = Plot {
        left: MARGIN + 40.0,
        bottom: doc.y - 250.0,
        width: PAGE.0 - 2.0 * MARGIN - 50.0,
        height: 220.0,
        x_top,
        y_top: edge.max_stress_mpa.max(1e-9) * 1.1,
    };
    plot.axes(doc, x_label, "|sigma_t| (MPa)");
    let c = doc.content();
    c.set_fill_rgb(0.1, 0.2, 0.6);
    for (s, p) in samples.iter().zip(&positions) {
        if let Some(v) = s.stress_mpa {
            let (x, y) = plot.at(*p, v);
            c.rect(x - 0.8, y - 0.8, 1.6, 1.6);
        }
    }
    c.fill_nonzero();
    c.set_fill_rgb(0.85, 0.1, 0.1);
    for (s, p) in samples.iter().zip(&positions) {
        if s.beyond_range {
            let (x, y) = plot.at(*p, 0.0);
            c.rect(x - 0.5, y, 1.0, 4.0);
        }
    }
    c.fill_nonzero();
    if let Some(i) = samples
        .iter()
        .position(|s| s.x == edge.x && s.y == edge.y && s.stress_mpa.is_some())
    {
        let (x, y) = plot.at(positions[i], edge.max_stress_mpa);
        c.set_stroke_rgb(0.85, 0.1, 0.1);
        c.set_line_width(1.2);
        circle(c, x, y, 5.0);
        c.stroke();
    }
    doc.y = plot.bottom - 40.0;
    doc.paragraph(&format!(
        "Maximum {} at ({:.1}, {:.1}) px{}. Red marks on the axis: edge points with beyond-range \
         pixels between the edge and the second sample.",
        maximum_text(edge.max_stress_mpa, "MPa", edge.max_is_lower_bound),
        edge.x,
        edge.y,
        edge.kt.map_or(String::new(), |kt| format!(
            ", K_t {}",
            maximum_text(kt, "", edge.max_is_lower_bound)
        ))
    ));
}

/// A plot's frame on the page (points) and its axes' ranges (from 0).
#[derive(Debug, Clone, Copy)]
struct Plot {
    left: f32,
    bottom: f32,
    width: f32,
    height: f32,
    x_top: f64,
    y_top: f64,
}

impl Plot {
    /// The page position of (x, y) in the axes' units.
    fn at(&self, x: f64, y: f64) -> (f32, f32) {
        (
            self.left + (x / self.x_top) as f32 * self.width,
            self.bottom + (y / self.y_top) as f32 * self.height,
        )
    }

    /// The frame, numbered ticks (the colour bars' steps) and the axis titles.
    fn axes(&self, doc: &mut Document, x_title: &str, y_title: &str) {
        let c = doc.content();
        c.set_stroke_rgb(0.0, 0.0, 0.0);
        c.set_line_width(0.6);
        c.rect(self.left, self.bottom, self.width, self.height);
        c.stroke();
        let x_labels = colour_bar_labels(self.x_top, self.width as u32);
        let y_labels = colour_bar_labels(self.y_top, self.height as u32);
        for l in &x_labels {
            let (x, _) = self.at(l.order, 0.0);
            c.move_to(x, self.bottom);
            c.line_to(x, self.bottom - 3.0);
        }
        for l in &y_labels {
            let (_, y) = self.at(0.0, l.order);
            c.move_to(self.left, y);
            c.line_to(self.left - 3.0, y);
        }
        c.stroke();
        // Numbers from the top down, each at least 24 points from the last one written.
        let mut last = f32::INFINITY;
        for l in x_labels.iter().rev() {
            let (x, _) = self.at(l.order, 0.0);
            if last - x >= 24.0 {
                doc.text_at(x - 6.0, self.bottom - 12.0, 7.5, &l.text);
                last = x;
            }
        }
        for l in &y_labels {
            let (_, y) = self.at(0.0, l.order);
            doc.text_at(self.left - 34.0, y - 2.5, 7.5, &l.text);
        }
        doc.text_at(self.left, self.bottom - 25.0, 8.5, x_title);
        doc.text_at(self.left, self.bottom + self.height + 6.0, 8.5, y_title);
    }
}

/// Adds a circle of radius `r` about (x, y) to the current path (four Bézier quarters).
fn circle(c: &mut Content, x: f32, y: f32, r: f32) {
    let k = 0.552_284_8 * r;
    c.move_to(x + r, y);
    c.cubic_to(x + r, y + k, x + k, y + r, x, y + r);
    c.cubic_to(x - k, y + r, x - r, y + k, x - r, y);
    c.cubic_to(x - r, y - k, x - k, y - r, x, y - r);
    c.cubic_to(x + k, y - r, x + r, y - k, x + r, y);
}

/// An RGB picture, zlib-compressed for the PDF.
struct Picture {
    width: u32,
    height: u32,
    /// The map's part of the picture, from its top-left corner (a preview's colour bar is
    /// right of it), pixels.
    map_size: (u32, u32),
    deflated: Vec<u8>,
}

impl Picture {
    fn new(width: u32, height: u32, rgb: Vec<u8>) -> CoreResult<Self> {
        let mut z = ZlibEncoder::new(Vec::new(), Compression::default());
        z.write_all(&rgb)
            .map_err(|e| CoreError::Encode(format!("picture: {e}")))?;
        let deflated = z
            .finish()
            .map_err(|e| CoreError::Encode(format!("picture: {e}")))?;
        Ok(Picture {
            width,
            height,
            map_size: (width, height),
            deflated,
        })
    }
}

/// One page being laid out: its drawing and the pictures it shows.
struct PageDraft {
    content: Content,
    pictures: Vec<usize>,
}

impl PageDraft {
    fn new() -> Self {
        PageDraft {
            content: Content::new(),
            pictures: Vec::new(),
        }
    }
}

/// The report as it is laid out: pages top to bottom, a text cursor `y` (points from the
/// page's bottom), the pictures once each.
struct Document {
    pages: Vec<PageDraft>,
    pictures: Vec<Picture>,
    y: f32,
}

impl Default for Document {
    fn default() -> Self {
        Document {
            pages: vec![PageDraft::new()],
            pictures: Vec::new(),
            y: PAGE.1 - MARGIN,
        }
    }
}

/// Font resource names: regular and bold Helvetica.
const REGULAR: Name<'static> = Name(b"F1");
const BOLD: Name<'static> = Name(b"F2");

/// `text` in WinAnsi bytes (Latin-1 for the characters it shares with Unicode; a few common
/// signs spelt in ASCII; anything else `?`).
fn win_ansi(text: &str) -> Vec<u8> {
    let mut out = Vec::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '\u{2212}' | '\u{2013}' | '\u{2014}' => out.push(b'-'),
            '\u{2019}' => out.push(b'\''),
            c if (c as u32) < 0x80 || (0xA0..=0xFF).contains(&(c as u32)) => out.push(c as u8),
            _ => out.push(b'?'),
        }
    }
    out
}

/// `text` cut into lines of at most [`WRAP_CHARS`] characters at spaces.
fn wrapped(text: &str) -> Vec<String> {
    let mut lines = Vec::new();
    let mut line = String::new();
    for word in text.split_whitespace() {
        if !line.is_empty() && line.chars().count() + 1 + word.chars().count() > WRAP_CHARS {
            lines.push(std::mem::take(&mut line));
        }
        if !line.is_empty() {
            line.push(' ');
        }
        line.push_str(word);
    }
    if !line.is_empty() || lines.is_empty() {
        lines.push(line);
    }
    lines
}

impl Document {
    fn content(&mut self) -> &mut Content {
        &mut self
            .pages
            .last_mut()
            .expect("a document has a page")
            .content
    }

    fn new_page(&mut self) {
        self.pages.push(PageDraft::new());
        self.y = PAGE.1 - MARGIN;
    }

    /// Starts a new page unless `space` points are left above the bottom margin.
    fn ensure(&mut self, space: f32) {
        if self.y - space < MARGIN {
            self.new_page();
        }
    }

    fn text_at(&mut self, x: f32, y: f32, size: f32, text: &str) {
        self.text_in(REGULAR, x, y, size, text);
    }

    fn text_in(&mut self, font: Name<'static>, x: f32, y: f32, size: f32, text: &str) {
        let bytes = win_ansi(text);
        let c = self.content();
        c.set_fill_rgb(0.0, 0.0, 0.0);
        c.begin_text();
        c.set_font(font, size);
        c.next_line(x, y);
        c.show(Str(&bytes));
        c.end_text();
    }

    fn title(&mut self, text: &str) {
        self.ensure(30.0);
        self.y -= 16.0;
        self.text_in(BOLD, MARGIN, self.y, 16.0, text);
        self.y -= 10.0;
    }

    fn heading(&mut self, text: &str) {
        self.ensure(40.0);
        self.y -= 22.0;
        self.text_in(BOLD, MARGIN, self.y, 11.5, text);
        self.y -= 4.0;
    }

    fn paragraph(&mut self, text: &str) {
        for line in wrapped(text) {
            self.ensure(LINE_PT);
            self.y -= LINE_PT;
            self.text_at(MARGIN, self.y, TEXT_PT, &line);
        }
    }

    /// Places `picture` across the text width (at most 300 points high), a caption under it;
    /// `ring` (fractions of the picture's map part, from its top-left) is ringed in red.
    fn picture(&mut self, picture: Picture, caption: &str, ring: Option<(f32, f32)>) {
        let max_w = PAGE.0 - 2.0 * MARGIN;
        let scale = (max_w / picture.width as f32).min(300.0 / picture.height as f32);
        let (w, h) = (picture.width as f32 * scale, picture.height as f32 * scale);
        self.ensure(h + 40.0);
        self.y -= h + 4.0;
        let index = self.pictures.len();
        let map_size = picture.map_size;
        self.pictures.push(picture);
        self.pages
            .last_mut()
            .expect("a document has a page")
            .pictures
            .push(index);
        let (x, y) = (MARGIN, self.y);
        let name = format!("Im{index}");
        let c = self.content();
        c.save_state();
        c.transform([w, 0.0, 0.0, h, x, y]);
        c.x_object(Name(name.as_bytes()));
        c.restore_state();
        if let Some((fx, fy)) = ring {
            let (mw, mh) = (map_size.0 as f32 * scale, map_size.1 as f32 * scale);
            let c = self.content();
            c.set_stroke_rgb(0.9, 0.0, 0.0);
            c.set_line_width(1.5);
            circle(c, x + fx * mw, y + h - fy * mh, 7.0);
            c.stroke();
        }
        self.paragraph(caption);
        self.y -= 6.0;
    }

    /// The finished PDF.
    fn finish(self, title: &str) -> CoreResult<Vec<u8>> {
        let mut pdf = Pdf::new();
        let mut next = 1;
        let mut id = || {
            next += 1;
            Ref::new(next - 1)
        };
        let (catalog, tree, regular, bold, info) = (id(), id(), id(), id(), id());
        let picture_ids: Vec<Ref> = self.pictures.iter().map(|_| id()).collect();
        let page_ids: Vec<(Ref, Ref)> = self.pages.iter().map(|_| (id(), id())).collect();
        pdf.catalog(catalog).pages(tree);
        pdf.pages(tree)
            .kids(page_ids.iter().map(|(p, _)| *p))
            .count(page_ids.len() as i32);
        pdf.document_info(info)
            .title(TextStr(title))
            .producer(TextStr("isotint"));
        for (font, base) in [
            (regular, Name(b"Helvetica")),
            (bold, Name(b"Helvetica-Bold")),
        ] {
            pdf.type1_font(font)
                .base_font(base)
                .encoding_predefined(Name(b"WinAnsiEncoding"));
        }
        for (picture, id) in self.pictures.iter().zip(&picture_ids) {
            let mut image = pdf.image_xobject(*id, &picture.deflated);
            image.filter(Filter::FlateDecode);
            image.width(picture.width as i32);
            image.height(picture.height as i32);
            image.color_space().device_rgb();
            image.bits_per_component(8);
            image.finish();
        }
        for (draft, (page_id, content_id)) in self.pages.into_iter().zip(page_ids) {
            let mut page = pdf.page(page_id);
            page.media_box(Rect::new(0.0, 0.0, PAGE.0, PAGE.1));
            page.parent(tree);
            page.contents(content_id);
            let mut resources = page.resources();
            resources.fonts().pair(REGULAR, regular).pair(BOLD, bold);
            let names: Vec<String> = draft.pictures.iter().map(|i| format!("Im{i}")).collect();
            let mut objects = resources.x_objects();
            for (name, i) in names.iter().zip(&draft.pictures) {
                objects.pair(Name(name.as_bytes()), picture_ids[*i]);
            }
            objects.finish();
            resources.finish();
            page.finish();
            pdf.stream(content_id, &draft.content.finish());
        }
        Ok(pdf.finish())
    }
}
