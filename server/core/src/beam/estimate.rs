//! The edge order of a beam in four-point bending, estimated from its own colour sequence.
//!
//! Between the inner loads the order grows linearly from 0 on the mid-line to N_edge at both
//! edges, so the folded row colours, read from the mid-line outwards, are the isochromatic
//! colour sequence from 0 to N_edge stretched over the half-depth. For each reference setup
//! (light source × camera model, ideal plates) the spectral renderer gives the theoretical
//! sequence. A candidate N_edge predicts the row at relative depth s (0 on the mid-line, 1 at
//! the edges) to show the reference colour of order N_edge · s, averaged over the orders the
//! row covers, times a per-channel gain on linear light that absorbs exposure and white balance
//! (least squares per candidate over the channels that are not clipped, each gain within a
//! factor [`MAX_CHANNEL_RATIO`] of their geometric mean). The cost of a candidate is the mean
//! ΔE\*ab of the best-fitting 1 − [`TRIMMED_SHARE`] of rows (a metric, cheap, as inside the
//! map's search); what people read, the residual of the estimate and its runner-up, is the same
//! trimmed mean in CIEDE2000. Candidates run over a geometric
//! grid (1 % steps) across [`SEARCH_RANGE`]; the best is refined by golden-section search, and
//! the runner-up is the best candidate in another minimum of the cost curve.
//!
//! Honesty: the result is an estimate. It assumes the photo's colours follow a rendered
//! sequence up to a per-channel gain, so a light or camera unlike every reference, strongly
//! non-achromatic quarter-wave plates or a beam that is not in pure bending can mislead it.
//! It refuses (naming `estimate_edge_order`): fewer than [`MIN_ESTIMATE_ROWS`] rows; rows next
//! to the mid-line that are not dark ([`MAX_MID_LINE_CONTRAST`]); a sequence too short to carry
//! hue (best N_edge below [`MIN_EDGE_ORDER`]); a best fit at the top of the range
//! ([`TOP_REFUSED`]); a runner-up that fits almost as well ([`MIN_COST_RATIO`]). A poor fit
//! ([`POOR_FIT_DE2000`]) is not refused — its minimum can still be the right one — but it is
//! never called clear, and the statement says that no reference matches the colours well.

use std::sync::{Arc, Mutex, OnceLock};

use palette::LinSrgb;
use serde::{Deserialize, Serialize};

use super::sample_rows;
use crate::calibration::{MAX_NOTES_CHARS, MAX_TABLE_ORDER};
use crate::colour::{ciede2000, delta_e_ab, lab_from_linear, linear_from_lab, Lab, Photo};
use crate::error::{CoreError, CoreResult};
use crate::geometry::PixelRect;
use crate::render::{CameraModel, LightSource, QuarterWavePlates, RenderSetup, Renderer};

/// What every estimate must be read with (ends the [`EdgeOrderEstimate::statement`]).
pub const ESTIMATE_CAUTION: &str = "an estimate from the colours alone, not a measurement: \
     confirm it against a known load (N_edge = 6M/(f_σ·d²)) where possible";

/// Smallest and largest edge order searched, fringes.
pub const SEARCH_RANGE: (f64, f64) = (0.3, MAX_TABLE_ORDER);

/// Below this edge order (fringes) the sequence runs black → grey → white only: its hue says
/// too little to tell the order from an exposure change, and the estimate is refused.
pub const MIN_EDGE_ORDER: f64 = 0.5;

/// The runner-up's cost must be at least this multiple of the estimate's, or the estimate is
/// refused as ambiguous.
pub const MIN_COST_RATIO: f64 = 1.5;

/// From this cost ratio on the estimate is called clear (below it, fair).
pub const CLEAR_COST_RATIO: f64 = 2.5;

/// Above this residual, trimmed mean ΔE00, no reference sequence matches the rows well (a
/// light, camera or plates unlike every reference, or a region that is not a beam in pure
/// bending): the estimate is at most `fair` and says so. The former limit of 20 in the search's
/// cost (trimmed mean ΔE\*ab) restated: on the 40 drawn beams of the generated scenes the
/// CIEDE2000 residual was 0.43–0.60 of that cost, median 0.53 (docs/validation.md, "Edge order
/// from the colours").
pub const POOR_FIT_DE2000: f64 = 10.0;

/// An estimate above this share of [`SEARCH_RANGE`]`.1` is refused: the cost is still falling
/// at the end of the range, so the true minimum may lie beyond it.
pub const TOP_REFUSED: f64 = 0.98;

/// Largest luminance of the rows next to the mid-line (order 0, dark in a dark-field
/// polariscope) relative to the 90th percentile of all rows. Rendered beams resolved well enough
/// to estimate stay below 0.27; uniform regions give 1.
pub const MAX_MID_LINE_CONTRAST: f64 = 0.5;

/// Rows (inside the skipped edge rows) that an estimate needs at least.
pub const MIN_ESTIMATE_ROWS: usize = 24;

/// Share of rows with the largest colour differences left out of a candidate's cost.
pub const TRIMMED_SHARE: f64 = 0.1;

/// Largest ratio between one channel's gain and the geometric mean of the three.
pub const MAX_CHANNEL_RATIO: f64 = 1.5;

/// Ratio between neighbouring candidates of the search grid.
const GRID_RATIO: f64 = 1.01;

/// Rows are averaged into at most this many depth bins before the search.
const MAX_BINS: usize = 240;

/// Linear channel values from this level on count as clipped and stay out of the gain fit.
const CLIPPED: f32 = 0.98;

/// Two minima of the cost curve are separate alternatives when the curve between them rises
/// above the higher one by this share of its cost …
const SEPARATING_RISE: f64 = 0.15;

/// … and by at least this much, ΔE\*ab.
const SEPARATING_RISE_MIN: f64 = 0.3;

/// An alternative edge order must differ from the estimate by at least this many fringes and
/// this share of the estimate; closer minima are the same answer within the estimate's
/// accuracy.
const ALTERNATIVE_DISTANCE: (f64, f64) = (0.1, 0.05);

/// Golden-section iterations of the refinement (the bracket shrinks by 0.618 each).
const REFINE_ITERATIONS: usize = 30;

/// Renderers kept for reference setups (the default references take 8).
const CACHED_RENDERERS: usize = 16;

/// Sub-samples across a row's height when predicting its colour (a row averages the orders it
/// covers).
const FOOTPRINT_SAMPLES: usize = 4;

/// Colour of one folded row at its relative depth.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct DepthColour {
    /// Distance of the row centre from the mid-line over the half-depth: 0 on the mid-line, 1 at
    /// the edges.
    pub depth: f64,
    /// Mean row colour, CIELAB (D65) as [L*, a*, b*].
    pub lab: [f64; 3],
}

/// The folded rows of a beam and the relative depth one row covers (1 / half-depth in px).
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct FoldedRows {
    /// The rows.
    pub rows: Vec<DepthColour>,
    /// Relative depth covered by one row.
    pub row_span: f64,
}

/// How decisively the estimate beat its runner-up.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum EstimateConfidence {
    /// No separate minimum, or the runner-up costs at least [`CLEAR_COST_RATIO`] times as much.
    Clear,
    /// The runner-up costs [`MIN_COST_RATIO`]–[`CLEAR_COST_RATIO`] times as much: check against
    /// a known load before relying on the table.
    Fair,
}

/// An alternative edge order: the best candidate in a separate minimum of the cost curve.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct AlternativeEdgeOrder {
    /// Edge order, fringes.
    pub edge_order: f64,
    /// Its residual: trimmed mean CIEDE2000 between row colours and its reference's colours
    /// after the gain fit.
    pub residual_de2000: f64,
}

/// An edge order estimated from a beam's colour sequence.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EdgeOrderEstimate {
    /// Estimated order at the beam edges, fringes.
    pub edge_order: f64,
    /// Residual of the estimate: mean CIEDE2000 between row colours and the best reference's
    /// colours at N_edge · s after the gain fit, over the best-fitting 90 % of rows.
    pub residual_de2000: f64,
    /// Light source of the reference that fitted best.
    pub light: LightSource,
    /// Camera model of the reference that fitted best.
    pub camera: CameraModel,
    /// Gains on linear light (red, green, blue) that take the best reference to the photo:
    /// its exposure and white balance relative to the reference.
    pub channel_gains: [f64; 3],
    /// The best edge order in a separate minimum of the cost, if there is one.
    pub runner_up: Option<AlternativeEdgeOrder>,
    /// Runner-up cost over estimate cost (≥ [`MIN_COST_RATIO`]; the search's cost, trimmed
    /// mean ΔE\*ab); `None` without a runner-up.
    pub cost_ratio: Option<f64>,
    /// Clear or fair (see [`EstimateConfidence`]).
    pub confidence: EstimateConfidence,
    /// One paragraph for people: the estimate, how decisively it won, and that it should be
    /// confirmed against a known load.
    pub statement: String,
}

impl EdgeOrderEstimate {
    /// `notes` with a sentence appended that records the estimate (for the table's metadata,
    /// so the file says where its edge order came from). Fails when the result would exceed the
    /// [`MAX_NOTES_CHARS`] characters notes may hold.
    pub fn annotate(&self, notes: &str) -> CoreResult<String> {
        let note = format!(
            "Edge order {:.3} estimated from the beam's colour sequence by isotint \
             (best reference {} / {}, confidence {}); not measured from a load.",
            self.edge_order,
            self.light.description(),
            self.camera.description(),
            self.confidence.name()
        );
        let note_chars = note.chars().count();
        let out = if notes.trim().is_empty() {
            note
        } else {
            format!("{}\n\n{note}", notes.trim_end())
        };
        if out.chars().count() > MAX_NOTES_CHARS {
            return Err(CoreError::invalid(
                "notes",
                format!(
                    "is too long to take the {}-character sentence that records the edge-order \
                     estimate (notes hold at most {MAX_NOTES_CHARS} characters)",
                    note_chars + 2
                ),
            ));
        }
        Ok(out)
    }
}

impl EstimateConfidence {
    /// `clear` or `fair`.
    pub fn name(self) -> &'static str {
        match self {
            EstimateConfidence::Clear => "clear",
            EstimateConfidence::Fair => "fair",
        }
    }
}

/// Birefringence dispersions of the reference setups (see
/// [`crate::render::SpectralSetup::dispersion`]): none, and the range polymers show. On the
/// drawn calibration beams of the generated scenes (dispersion 0–0.12), references without
/// dispersion read the edge order up to 3 % high (33 of 40 within 2 %); with none drawn, all
/// 40 lay within 2 %.
const REFERENCE_DISPERSIONS: [f64; 3] = [0.0, 0.05, 0.1];

/// The reference setups used unless told otherwise: every light source × every camera model
/// × every dispersion of [`REFERENCE_DISPERSIONS`], ideal plates, exposure 1.
pub fn default_references() -> Vec<RenderSetup> {
    LightSource::ALL
        .iter()
        .flat_map(|&light| CameraModel::ALL.iter().map(move |&camera| (light, camera)))
        .flat_map(|(light, camera)| {
            REFERENCE_DISPERSIONS
                .iter()
                .map(move |&dispersion| RenderSetup {
                    light,
                    camera,
                    plates: QuarterWavePlates::Ideal,
                    dispersion,
                    exposure: 1.0,
                })
        })
        .collect()
}

/// Estimates the edge order of a beam photo from its colour sequence alone, against the
/// `references` (e.g. [`default_references`]). `region` is the constant-moment zone in
/// pixel-edge coordinates with `top` and `bottom` on the beam's edges (no refinement here);
/// rows within [`super::EDGE_SKIP_PX`] of an edge are skipped, as in
/// [`super::calibrate_beam`]. Refuses, naming `estimate_edge_order`, in the cases the module
/// documentation lists (too few rows, mid-line not dark, too short, at the top of the range,
/// no fit, ambiguous).
pub fn estimate_edge_order(
    photo: &Photo,
    region: &PixelRect,
    references: &[RenderSetup],
) -> CoreResult<EdgeOrderEstimate> {
    estimate_from_rows(&sample_rows(photo, region)?.folded(), references)
}

/// The estimate from folded row colours (see the module documentation).
pub(crate) fn estimate_from_rows(
    folded: &FoldedRows,
    references: &[RenderSetup],
) -> CoreResult<EdgeOrderEstimate> {
    if folded.rows.len() < MIN_ESTIMATE_ROWS {
        return Err(refusal(format!(
            "the region has {} rows inside its edge rows; an estimate needs at least \
             {MIN_ESTIMATE_ROWS}",
            folded.rows.len()
        )));
    }
    if references.is_empty() {
        return Err(CoreError::invalid(
            "references",
            "at least one reference setup is needed",
        ));
    }
    let observed = Observed::binned(folded);
    let contrast = observed.mid_line_contrast(folded.row_span);
    if contrast > MAX_MID_LINE_CONTRAST {
        return Err(refusal(format!(
            "the rows next to the mid-line are not dark (luminance {:.0} % of the bright rows', \
             at most {:.0} % expected at order 0): the region is not the constant-moment zone of \
             a beam in four-point bending edge to edge, or its orders change too steeply or are \
             too blurred to be resolved near the mid-line",
            100.0 * contrast,
            100.0 * MAX_MID_LINE_CONTRAST
        )));
    }
    let renderers = references
        .iter()
        .map(|r| renderer(*r))
        .collect::<CoreResult<Vec<_>>>()?;

    let (lo, hi) = SEARCH_RANGE;
    let count = ((hi / lo).ln() / GRID_RATIO.ln()).ceil() as usize;
    let grid: Vec<f64> = (0..=count)
        .map(|i| (lo * GRID_RATIO.powi(i as i32)).min(hi))
        .collect();
    // Lowest cost over the references at each grid point, and which reference gave it.
    let envelope: Vec<(f64, usize)> = grid
        .iter()
        .map(|&n| {
            renderers
                .iter()
                .enumerate()
                .map(|(k, r)| (fit(&observed, r, n).cost, k))
                .min_by(|a, b| a.0.total_cmp(&b.0))
                .expect("at least one reference")
        })
        .collect();
    let costs: Vec<f64> = envelope.iter().map(|e| e.0).collect();
    let best_j = argmin(&costs);
    let best = refine(&observed, &renderers, &grid, best_j);
    let runner_up = separate_minima(&grid, &costs, best_j)
        .into_iter()
        .min_by(|&a, &b| costs[a].total_cmp(&costs[b]))
        .map(|j| {
            let r = refine(&observed, &renderers, &grid, j);
            let residual_de2000 = r.residual_de2000(&observed, &renderers[r.reference]);
            (
                AlternativeEdgeOrder {
                    edge_order: r.edge_order,
                    residual_de2000,
                },
                r.fit.cost,
            )
        });

    if best.edge_order < MIN_EDGE_ORDER {
        return Err(refusal(format!(
            "the colour sequence is too short: it fits best at N_edge ≈ {:.3}, below \
             {MIN_EDGE_ORDER}, where black, grey and white carry too little hue to tell the order \
             from the exposure",
            best.edge_order
        )));
    }
    if best.edge_order > TOP_REFUSED * hi {
        return Err(refusal(format!(
            "the rows fit best at the top of the searched range (N_edge ≈ {:.2} of {hi}): the \
             edge order is beyond what a table can hold, or the region is not a beam in \
             four-point bending with its mid-line dark",
            best.edge_order
        )));
    }
    let residual = best.residual_de2000(&observed, &renderers[best.reference]);
    // A perfect fit (zero cost) beats any runner-up with a positive cost.
    let cost_ratio = runner_up.map(|(_, cost)| cost / best.fit.cost.max(1e-9));
    let runner_up = runner_up.map(|(r, _)| r);
    if let (Some(r), Some(ratio)) = (runner_up, cost_ratio) {
        if ratio < MIN_COST_RATIO {
            return Err(refusal(format!(
                "the colour sequence is ambiguous: N_edge ≈ {:.2} (mean ΔE00 {:.2}) and \
                 ≈ {:.2} (ΔE00 {:.2}) fit almost equally well (cost ratio {ratio:.2}, at least \
                 {MIN_COST_RATIO} needed)",
                best.edge_order, residual, r.edge_order, r.residual_de2000
            )));
        }
    }
    let poor_fit = residual > POOR_FIT_DE2000;
    let confidence = match cost_ratio {
        _ if poor_fit => EstimateConfidence::Fair,
        Some(ratio) if ratio < CLEAR_COST_RATIO => EstimateConfidence::Fair,
        _ => EstimateConfidence::Clear,
    };
    let setup = references[best.reference];
    let rival = match (runner_up, cost_ratio) {
        (Some(r), Some(ratio)) => format!(
            "the best alternative, N_edge ≈ {:.2}, fits {ratio:.1} times worse",
            r.edge_order
        ),
        _ => "no other edge order fits in a separate minimum".to_string(),
    };
    let fit = if poor_fit {
        format!(
            "; no reference matches the colours well (above {POOR_FIT_DE2000} ΔE00: a light, \
             camera or plates unlike the references, or a region not in pure bending)"
        )
    } else {
        String::new()
    };
    let statement = format!(
        "Edge order {:.2} estimated from the beam's colour sequence (best match: {}, {}, mean \
         ΔE00 {:.2}{fit}); {rival}; confidence {}. This is {ESTIMATE_CAUTION}.",
        best.edge_order,
        setup.light.description(),
        setup.camera.description(),
        residual,
        confidence.name()
    );
    Ok(EdgeOrderEstimate {
        edge_order: best.edge_order,
        residual_de2000: residual,
        light: setup.light,
        camera: setup.camera,
        channel_gains: best.fit.gains,
        runner_up,
        cost_ratio,
        confidence,
        statement,
    })
}

fn refusal(reason: String) -> CoreError {
    CoreError::invalid(
        "estimate_edge_order",
        format!("{reason}; give edge_order, or the load (moment, depth, fringe value), instead"),
    )
}

/// The rows as the cost reads them: bins of neighbouring rows.
#[derive(Debug, Clone)]
struct Observed {
    bins: Vec<Bin>,
    /// Relative depths, about the bin centre, at which the footprint is sampled.
    footprint: [f64; FOOTPRINT_SAMPLES],
}

/// One bin of rows.
#[derive(Debug, Clone, Copy)]
struct Bin {
    depth: f64,
    linear: [f32; 3],
    lab: Lab,
}

impl Observed {
    /// Sorts rows by depth and averages runs of neighbours into at most [`MAX_BINS`] bins (in
    /// CIELAB, as the rows were averaged).
    fn binned(folded: &FoldedRows) -> Observed {
        let mut sorted = folded.rows.clone();
        sorted.sort_by(|a, b| a.depth.total_cmp(&b.depth));
        let per_bin = sorted.len().div_ceil(MAX_BINS);
        let bins = sorted
            .chunks(per_bin)
            .map(|chunk| {
                let n = chunk.len() as f64;
                let depth = chunk.iter().map(|r| r.depth).sum::<f64>() / n;
                let mean: [f64; 3] =
                    std::array::from_fn(|c| chunk.iter().map(|r| r.lab[c]).sum::<f64>() / n);
                let lab = Lab::new(mean[0] as f32, mean[1] as f32, mean[2] as f32);
                let lin = linear_from_lab(lab);
                Bin {
                    depth,
                    linear: [lin.red, lin.green, lin.blue],
                    lab,
                }
            })
            .collect();
        let footprint = std::array::from_fn(|k| {
            folded.row_span * ((k as f64 + 0.5) / FOOTPRINT_SAMPLES as f64 - 0.5)
        });
        Observed { bins, footprint }
    }

    /// Luminance (linear, Rec. 709 weights) of the rows within one row of the mid-line over the
    /// 90th percentile of the bins' luminance.
    fn mid_line_contrast(&self, row_span: f64) -> f64 {
        let luminance = |b: &Bin| {
            0.2126 * f64::from(b.linear[0])
                + 0.7152 * f64::from(b.linear[1])
                + 0.0722 * f64::from(b.linear[2])
        };
        let near: Vec<f64> = self
            .bins
            .iter()
            .take_while(|b| b.depth <= row_span)
            .map(luminance)
            .collect();
        let mid = if near.is_empty() {
            luminance(&self.bins[0])
        } else {
            near.iter().sum::<f64>() / near.len() as f64
        };
        let mut all: Vec<f64> = self.bins.iter().map(luminance).collect();
        all.sort_by(f64::total_cmp);
        let bright = all[((all.len() - 1) as f64 * 0.9).round() as usize];
        mid / bright.max(1e-6)
    }

    /// The reference's colour of every bin for edge order `edge_order`: the mean over the
    /// orders a row covers (negative depths mirror, as the order's magnitude does).
    fn predicted(&self, reference: &Renderer, edge_order: f64) -> Vec<[f32; 3]> {
        self.bins
            .iter()
            .map(|b| {
                let mut sum = [0.0f32; 3];
                for d in self.footprint {
                    let c = reference.linear_isoclinic_mean(edge_order * (b.depth + d));
                    for (s, v) in sum.iter_mut().zip([c.red, c.green, c.blue]) {
                        *s += v / FOOTPRINT_SAMPLES as f32;
                    }
                }
                sum
            })
            .collect()
    }
}

/// Renderers built for reference setups, oldest first (at most [`CACHED_RENDERERS`]).
type RendererCache = Mutex<Vec<(RenderSetup, Arc<Renderer>)>>;

/// The renderer of a reference setup, built once per process and shared.
fn renderer(setup: RenderSetup) -> CoreResult<Arc<Renderer>> {
    static CACHE: OnceLock<RendererCache> = OnceLock::new();
    let cache = CACHE.get_or_init(|| Mutex::new(Vec::new()));
    let found = cache
        .lock()
        .unwrap_or_else(|e| e.into_inner())
        .iter()
        .find(|(s, _)| *s == setup)
        .map(|(_, r)| Arc::clone(r));
    if let Some(r) = found {
        return Ok(r);
    }
    let built = Arc::new(Renderer::new(setup)?);
    let mut cache = cache.lock().unwrap_or_else(|e| e.into_inner());
    if cache.len() >= CACHED_RENDERERS {
        cache.remove(0);
    }
    cache.push((setup, Arc::clone(&built)));
    Ok(built)
}

/// How one candidate fits.
#[derive(Debug, Clone, Copy)]
struct Fit {
    /// Trimmed mean ΔE\*ab (the search's cost).
    cost: f64,
    /// Per-channel gains on linear light.
    gains: [f64; 3],
}

/// Fits the gains for candidate `edge_order` with `reference` and scores the rows.
fn fit(observed: &Observed, reference: &Renderer, edge_order: f64) -> Fit {
    let predicted = observed.predicted(reference, edge_order);
    let (mut op, mut pp) = ([0.0f64; 3], [0.0f64; 3]);
    for (o, p) in observed.bins.iter().zip(&predicted) {
        for c in 0..3 {
            if o.linear[c] < CLIPPED {
                op[c] += f64::from(o.linear[c]) * f64::from(p[c]);
                pp[c] += f64::from(p[c]) * f64::from(p[c]);
            }
        }
    }
    let raw: [f64; 3] = std::array::from_fn(|c| {
        if pp[c] > 1e-12 {
            (op[c] / pp[c]).max(1e-6)
        } else {
            1.0
        }
    });
    let mean = (raw[0] * raw[1] * raw[2]).cbrt();
    let gains = raw.map(|g| g.clamp(mean / MAX_CHANNEL_RATIO, mean * MAX_CHANNEL_RATIO));
    Fit {
        cost: trimmed_mean(observed, &predicted, gains, delta_e_ab),
        gains,
    }
}

/// Mean colour difference `difference` between the rows and `predicted` times `gains`, over the
/// best-fitting 1 − [`TRIMMED_SHARE`] of rows.
fn trimmed_mean(
    observed: &Observed,
    predicted: &[[f32; 3]],
    gains: [f64; 3],
    difference: fn(Lab, Lab) -> f32,
) -> f64 {
    let mut errors: Vec<f64> = observed
        .bins
        .iter()
        .zip(predicted)
        .map(|(o, p)| {
            let scaled = LinSrgb::new(
                (f64::from(p[0]) * gains[0]).clamp(0.0, 1.0) as f32,
                (f64::from(p[1]) * gains[1]).clamp(0.0, 1.0) as f32,
                (f64::from(p[2]) * gains[2]).clamp(0.0, 1.0) as f32,
            );
            f64::from(difference(o.lab, lab_from_linear(scaled)))
        })
        .collect();
    errors.sort_unstable_by(f64::total_cmp);
    let kept = ((1.0 - TRIMMED_SHARE) * errors.len() as f64)
        .ceil()
        .max(1.0) as usize;
    errors[..kept].iter().sum::<f64>() / kept as f64
}

/// A refined candidate.
#[derive(Debug, Clone, Copy)]
struct Refined {
    edge_order: f64,
    reference: usize,
    fit: Fit,
}

impl Refined {
    /// Its residual for people: the trimmed mean CIEDE2000 of its fit (`reference`: the
    /// renderer of its reference setup).
    fn residual_de2000(&self, observed: &Observed, reference: &Renderer) -> f64 {
        let predicted = observed.predicted(reference, self.edge_order);
        trimmed_mean(observed, &predicted, self.fit.gains, ciede2000)
    }
}

/// Golden-section search for the lowest cost between the grid neighbours of `j`, for every
/// reference; the best of them.
fn refine(observed: &Observed, renderers: &[Arc<Renderer>], grid: &[f64], j: usize) -> Refined {
    let (a0, b0) = (grid[j.saturating_sub(1)], grid[(j + 1).min(grid.len() - 1)]);
    let golden = 0.5 * (5f64.sqrt() - 1.0);
    renderers
        .iter()
        .enumerate()
        .map(|(k, r)| {
            let cost = |n: f64| fit(observed, r, n).cost;
            let (mut a, mut b) = (a0, b0);
            let (mut x1, mut x2) = (b - golden * (b - a), a + golden * (b - a));
            let (mut f1, mut f2) = (cost(x1), cost(x2));
            for _ in 0..REFINE_ITERATIONS {
                if f1 <= f2 {
                    b = x2;
                    (x2, f2) = (x1, f1);
                    x1 = b - golden * (b - a);
                    f1 = cost(x1);
                } else {
                    a = x1;
                    (x1, f1) = (x2, f2);
                    x2 = a + golden * (b - a);
                    f2 = cost(x2);
                }
            }
            // The grid point itself, in case the bracket held no interior minimum.
            let n = if f1 <= f2 { x1 } else { x2 };
            [n, grid[j]]
                .map(|n| Refined {
                    edge_order: n,
                    reference: k,
                    fit: fit(observed, r, n),
                })
                .into_iter()
                .min_by(|p, q| p.fit.cost.total_cmp(&q.fit.cost))
                .expect("two candidates")
        })
        .min_by(|p, q| p.fit.cost.total_cmp(&q.fit.cost))
        .expect("at least one reference")
}

fn argmin(v: &[f64]) -> usize {
    (0..v.len())
        .min_by(|&a, &b| v[a].total_cmp(&v[b]))
        .expect("a non-empty curve")
}

/// Grid indices of the local minima of `costs` that are separated from the global minimum at
/// `best` by a rise of at least [`SEPARATING_RISE`] of their own cost (and
/// [`SEPARATING_RISE_MIN`]), and lie at least [`ALTERNATIVE_DISTANCE`] away: minima of their
/// own, not wiggles in the best one's valley.
fn separate_minima(grid: &[f64], costs: &[f64], best: usize) -> Vec<usize> {
    let n = costs.len();
    let (fringes, share) = ALTERNATIVE_DISTANCE;
    let distance = fringes.max(share * grid[best]);
    (0..n)
        .filter(|&j| (grid[j] - grid[best]).abs() >= distance)
        .filter(|&j| {
            let left = j == 0 || costs[j] <= costs[j - 1];
            let right = j + 1 == n || costs[j] <= costs[j + 1];
            left && right
        })
        .filter(|&j| {
            let between = if j < best { j..=best } else { best..=j };
            let ridge = costs[between].iter().copied().fold(f64::MIN, f64::max);
            ridge - costs[j] >= (SEPARATING_RISE * costs[j]).max(SEPARATING_RISE_MIN)
        })
        .collect()
}
