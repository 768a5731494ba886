//! Calibration tables from a photo of a beam in four-point bending.
//!
//! Between the inner loads the moment is constant, so the fringe order varies linearly through
//! the depth: 0 on the mid-line, ±N_edge at the edges, with N_edge = 6M / (f_σ · d²). When
//! neither the edge order nor the load is known, [`estimate`] reads N_edge off the beam's own
//! colour sequence.

pub mod estimate;

use serde::{Deserialize, Serialize};

use crate::calibration::{
    CalibrationMetadata, CalibrationTable, TableEntry, TableSource, MAX_TABLE_ORDER,
    ORDER_STEP_RANGE,
};
use crate::colour::Photo;
use crate::colour::{ciede2000, lab_from_linear, Lab};
use crate::error::{CoreError, CoreResult};
use crate::geometry::PixelRect;
use estimate::{estimate_from_rows, DepthColour, EdgeOrderEstimate, FoldedRows};

/// How the order at the beam edges is known.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum EdgeLoad {
    /// The edge order was read off directly (fringes).
    EdgeOrder(f64),
    /// From the load: N_edge = 6M / (f_σ · d²).
    Load {
        /// Bending moment in the constant-moment zone, N·mm.
        moment_n_mm: f64,
        /// Beam depth, mm.
        depth_mm: f64,
        /// Material fringe value, N/mm per fringe.
        fringe_value_n_per_mm: f64,
    },
    /// Edge order and load both known: the fringe value is reported, f_σ = 6M / (N_edge · d²).
    EdgeOrderAndLoad {
        /// Edge order, fringes.
        edge_order: f64,
        /// Bending moment, N·mm.
        moment_n_mm: f64,
        /// Beam depth, mm.
        depth_mm: f64,
    },
    /// Edge order read off and the material fringe value given beside it (N/mm per fringe),
    /// stored with the table for the stress inputs; it plays no part in the table itself.
    EdgeOrderAndFringeValue {
        /// Edge order, fringes.
        edge_order: f64,
        /// Material fringe value, N/mm per fringe.
        fringe_value_n_per_mm: f64,
    },
    /// Neither is known: the edge order is estimated from the beam's own colour sequence
    /// ([`estimate::estimate_edge_order`], default references). An estimate, to be confirmed
    /// against a known load where possible.
    Estimate,
}

/// Raw, unvalidated load fields as a caller sends them (CLI flags, JSON). Parse with
/// [`EdgeLoad::from_fields`].
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize)]
pub struct EdgeLoadFields {
    /// Fringe order at the edges.
    pub edge_order: Option<f64>,
    /// Bending moment, N·mm.
    pub moment_n_mm: Option<f64>,
    /// Beam depth, mm.
    pub depth_mm: Option<f64>,
    /// Material fringe value, N/mm per fringe.
    pub fringe_value_n_per_mm: Option<f64>,
    /// Estimate the edge order from the photo's colour sequence (no other field may be given).
    #[serde(default)]
    pub estimate_edge_order: bool,
}

fn positive(field: &'static str, v: f64) -> CoreResult<f64> {
    if v.is_finite() && v > 0.0 {
        Ok(v)
    } else {
        Err(CoreError::invalid(
            field,
            format!("must be a positive number, got {v}"),
        ))
    }
}

impl EdgeLoad {
    /// Parses the caller's fields: an edge order, or moment + depth + fringe value, or an edge
    /// order with moment + depth (then the fringe value is reported), or an edge order with the
    /// fringe value (stored with the table), or `estimate_edge_order` alone.
    pub fn from_fields(f: EdgeLoadFields) -> CoreResult<EdgeLoad> {
        if f.estimate_edge_order {
            let given = [
                ("edge_order", f.edge_order),
                ("moment_n_mm", f.moment_n_mm),
                ("depth_mm", f.depth_mm),
                ("fringe_value_n_per_mm", f.fringe_value_n_per_mm),
            ];
            return match given.iter().find(|(_, v)| v.is_some()) {
                None => Ok(EdgeLoad::Estimate),
                Some((field, _)) => Err(CoreError::invalid(
                    "estimate_edge_order",
                    format!(
                        "estimates the edge order from the photo alone and cannot be combined \
                         with {field}; drop one of the two"
                    ),
                )),
            };
        }
        match (
            f.edge_order,
            f.moment_n_mm,
            f.depth_mm,
            f.fringe_value_n_per_mm,
        ) {
            (Some(n), None, None, None) => Ok(EdgeLoad::EdgeOrder(positive("edge_order", n)?)),
            (None, Some(m), Some(d), Some(fs)) => Ok(EdgeLoad::Load {
                moment_n_mm: positive("moment_n_mm", m)?,
                depth_mm: positive("depth_mm", d)?,
                fringe_value_n_per_mm: positive("fringe_value_n_per_mm", fs)?,
            }),
            (Some(n), Some(m), Some(d), None) => Ok(EdgeLoad::EdgeOrderAndLoad {
                edge_order: positive("edge_order", n)?,
                moment_n_mm: positive("moment_n_mm", m)?,
                depth_mm: positive("depth_mm", d)?,
            }),
            (Some(n), None, None, Some(fs)) => Ok(EdgeLoad::EdgeOrderAndFringeValue {
                edge_order: positive("edge_order", n)?,
                fringe_value_n_per_mm: positive("fringe_value_n_per_mm", fs)?,
            }),
            _ => Err(CoreError::invalid(
                "edge_order",
                "give edge_order, or moment_n_mm + depth_mm + fringe_value_n_per_mm, \
                 or edge_order + moment_n_mm + depth_mm, or edge_order + \
                 fringe_value_n_per_mm, or estimate_edge_order",
            )),
        }
    }

    /// The order at the beam edges, fringes, when it is known before the photo is looked at
    /// (`None` for [`EdgeLoad::Estimate`]).
    pub fn edge_order(&self) -> Option<f64> {
        match *self {
            EdgeLoad::EdgeOrder(n)
            | EdgeLoad::EdgeOrderAndLoad { edge_order: n, .. }
            | EdgeLoad::EdgeOrderAndFringeValue { edge_order: n, .. } => Some(n),
            EdgeLoad::Load {
                moment_n_mm,
                depth_mm,
                fringe_value_n_per_mm,
            } => Some(crate::stress::pure_bending_edge_order(
                moment_n_mm,
                depth_mm,
                fringe_value_n_per_mm,
            )),
            EdgeLoad::Estimate => None,
        }
    }

    /// The material fringe value implied by edge order and load, N/mm per fringe, when both are
    /// known.
    pub fn implied_fringe_value(&self) -> Option<f64> {
        match *self {
            EdgeLoad::EdgeOrderAndLoad {
                edge_order,
                moment_n_mm,
                depth_mm,
            } => Some(6.0 * moment_n_mm / (edge_order * depth_mm * depth_mm)),
            _ => None,
        }
    }

    /// The material fringe value the calibration is made for, N/mm per fringe: given (with
    /// the load or beside the edge order) or implied by edge order and load; `None` when
    /// nothing says it.
    pub fn fringe_value(&self) -> Option<f64> {
        match *self {
            EdgeLoad::Load {
                fringe_value_n_per_mm,
                ..
            }
            | EdgeLoad::EdgeOrderAndFringeValue {
                fringe_value_n_per_mm,
                ..
            } => Some(fringe_value_n_per_mm),
            _ => self.implied_fringe_value(),
        }
    }
}

/// What to calibrate from a beam photo.
#[derive(Debug, Clone, PartialEq)]
pub struct BeamSpec {
    /// Constant-moment zone, pixel-edge coordinates; `top` and `bottom` are the beam's edges.
    pub region: PixelRect,
    /// Edge order or load data.
    pub load: EdgeLoad,
    /// Move `top` and `bottom` to the edges found in the photo (sub-pixel) before calibrating.
    pub refine_edges: bool,
    /// Grid spacing of the table, fringes (default 0.01).
    pub order_step: f64,
    /// Metadata stored with the table.
    pub metadata: CalibrationMetadata,
}

/// How the refined edges differ from the given ones, pixels (positive = downwards).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct EdgeShift {
    /// Shift of the upper edge.
    pub top_px: f64,
    /// Shift of the lower edge.
    pub bottom_px: f64,
}

/// Quality report of a beam calibration.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BeamReport {
    /// Order at the edges used, fringes.
    pub edge_order: f64,
    /// Largest order in the table (edge rows are skipped), fringes.
    pub max_order: f64,
    /// Mean CIEDE2000 between row colours and the smoothed table.
    pub residual_mean_de2000: f64,
    /// 95th percentile of the same.
    pub residual_p95_de2000: f64,
    /// Rows that entered the table.
    pub rows_used: u32,
    /// Rows skipped as blurred edge rows.
    pub edge_rows_skipped: u32,
    /// Rows dropped as outliers.
    pub outlier_rows: u32,
    /// Share of pixels dropped as outliers within rows.
    pub outlier_pixel_share: f64,
    /// Edge refinement result, if asked for.
    pub edge_shift: Option<EdgeShift>,
    /// Fringe value implied by edge order and load, N/mm per fringe, if both were given.
    pub fringe_value_n_per_mm: Option<f64>,
    /// How the edge order was estimated from the photo's colour sequence, if it was
    /// ([`EdgeLoad::Estimate`]); `None` when it was given or computed from the load.
    pub edge_order_estimate: Option<EdgeOrderEstimate>,
}

/// A table and its report.
#[derive(Debug, Clone)]
pub struct BeamCalibration {
    /// The new table.
    pub table: CalibrationTable,
    /// How well it was measured.
    pub report: BeamReport,
}

/// Rows whose centre lies closer than this to a beam edge are skipped (blurred edge rows), px.
pub const EDGE_SKIP_PX: f64 = 2.0;

/// How far from the given edge the refinement looks for the real one, px.
pub const EDGE_SEARCH_PX: f64 = 6.0;

/// One row of the constant-moment zone, averaged along the beam axis.
#[derive(Debug, Clone, Copy)]
struct RowSample {
    /// Distance of the row centre from the mid-line over the half-depth: 0 on the mid-line,
    /// 1 at the edges.
    depth: f64,
    /// Fringe order at the row centre (edge order × `depth`, once the edge order is known).
    order: f64,
    /// Robust mean colour (CIELAB D65).
    mean: [f64; 3],
    /// Standard deviation of the kept pixels per channel.
    spread: [f64; 3],
    /// Pixels kept.
    kept: u32,
}

/// The rows of a constant-moment zone, folded about the mid-line.
#[derive(Debug, Clone)]
struct RowProfile {
    /// Rows whose centre lies at least [`EDGE_SKIP_PX`] inside the edges, top to bottom.
    rows: Vec<RowSample>,
    /// Rows skipped as blurred edge rows.
    edge_rows_skipped: u32,
    /// Pixels looked at in the kept rows.
    pixels_seen: u64,
    /// Pixels kept after outlier rejection within rows.
    pixels_kept: u64,
    /// Half the beam depth, px.
    half_depth: f64,
}

impl RowProfile {
    /// Row depths and colours, as the edge-order estimate reads them.
    fn folded(&self) -> FoldedRows {
        FoldedRows {
            rows: self
                .rows
                .iter()
                .map(|r| DepthColour {
                    depth: r.depth,
                    lab: r.mean,
                })
                .collect(),
            row_span: 1.0 / self.half_depth,
        }
    }
}

/// Checks that `region` lies inside the photo and is large enough, then averages its rows
/// (with outlier rejection) and folds them about the mid-line.
fn sample_rows(photo: &Photo, region: &PixelRect) -> CoreResult<RowProfile> {
    region.check_inside(photo.width(), photo.height())?;
    if region.height() < 4.0 * EDGE_SKIP_PX + 4.0 || region.column_range().len() < 3 {
        return Err(CoreError::invalid(
            "region",
            format!(
                "{:.1}×{:.1} px is too small for a calibration: it needs at least 3 columns and {} rows",
                region.width(),
                region.height(),
                4.0 * EDGE_SKIP_PX + 4.0
            ),
        ));
    }
    let mid = 0.5 * (region.top + region.bottom);
    let half_depth = 0.5 * region.height();
    let mut profile = RowProfile {
        rows: Vec::new(),
        edge_rows_skipped: 0,
        pixels_seen: 0,
        pixels_kept: 0,
        half_depth,
    };
    for y in region.row_range() {
        let centre = f64::from(y) + 0.5;
        if centre - region.top < EDGE_SKIP_PX || region.bottom - centre < EDGE_SKIP_PX {
            profile.edge_rows_skipped += 1;
            continue;
        }
        let labs: Vec<[f64; 3]> = region
            .column_range()
            .map(|x| {
                let c = lab_from_linear(photo.linear((y * photo.width() + x) as usize));
                [f64::from(c.l), f64::from(c.a), f64::from(c.b)]
            })
            .collect();
        profile.pixels_seen += labs.len() as u64;
        let row = robust_row_mean(&labs, (centre - mid).abs() / half_depth);
        profile.pixels_kept += u64::from(row.kept);
        profile.rows.push(row);
    }
    Ok(profile)
}

/// Builds a calibration table from a beam photo.
///
/// Rows of the constant-moment zone are averaged along the beam axis with outlier rejection,
/// the two halves are folded (tension and compression give the same colours), rows within
/// [`EDGE_SKIP_PX`] of an edge are skipped, outlier rows are dropped, and the colours are
/// smoothed onto the order grid by a local linear fit. With [`EdgeLoad::Estimate`] the edge
/// order is first estimated from the folded rows ([`estimate`]) and the estimate is reported;
/// a note saying so is added to the table's `notes`.
pub fn calibrate_beam(photo: &Photo, spec: &BeamSpec) -> CoreResult<BeamCalibration> {
    spec.region.check_inside(photo.width(), photo.height())?;
    let (lo, hi) = ORDER_STEP_RANGE;
    if !(spec.order_step.is_finite() && spec.order_step >= lo && spec.order_step <= hi) {
        return Err(CoreError::invalid(
            "order_step",
            format!("must lie in [{lo}, {hi}] fringes, got {}", spec.order_step),
        ));
    }
    if let Some(edge_order) = spec.load.edge_order() {
        check_edge_order(edge_order)?;
    }
    let mut region = spec.region;
    let edge_shift = if spec.refine_edges {
        let top = find_edge(photo, &region, Edge::Top)?;
        let bottom = find_edge(photo, &region, Edge::Bottom)?;
        let shift = EdgeShift {
            top_px: top - region.top,
            bottom_px: bottom - region.bottom,
        };
        region = PixelRect::new(region.left, top, region.right, bottom)?;
        Some(shift)
    } else {
        None
    };
    let profile = sample_rows(photo, &region)?;
    let mut metadata = spec.metadata.clone();
    let (edge_order, edge_order_estimate) = match spec.load.edge_order() {
        Some(n) => (n, None),
        None => {
            let estimate = estimate_from_rows(&profile.folded(), &estimate::default_references())?;
            check_edge_order(estimate.edge_order)?;
            metadata.notes = estimate.annotate(&metadata.notes)?;
            (estimate.edge_order, Some(estimate))
        }
    };
    let RowProfile {
        mut rows,
        edge_rows_skipped,
        pixels_seen,
        pixels_kept,
        half_depth,
    } = profile;
    for r in &mut rows {
        r.order = edge_order * r.depth;
    }

    let max_order = rows.iter().map(|r| r.order).fold(0.0, f64::max);
    let steps = (max_order / spec.order_step + 1e-9).floor() as usize;
    // Row spacing in orders; the smoothing bandwidth spans about two rows of each half.
    let row_step = edge_order / half_depth;
    // Each half gives a row every `row_step`; folded, the two interleave, so half a row step
    // keeps the fit close to the data where colours turn quickly (near tints of passage).
    let bandwidth = (0.5 * row_step).max(spec.order_step);

    let mut used = vec![true; rows.len()];
    let mut outlier_rows = 0u32;
    for _ in 0..2 {
        let residuals: Vec<f64> = rows
            .iter()
            .map(|r| lab_distance(&r.mean, &local_linear(&rows, &used, r.order, bandwidth).0))
            .collect();
        let mut kept: Vec<f64> = residuals
            .iter()
            .zip(&used)
            .filter(|(_, u)| **u)
            .map(|(r, _)| *r)
            .collect();
        let limit = (5.0 * 1.4826 * median(&mut kept)).max(5.0);
        for (u, r) in used.iter_mut().zip(&residuals) {
            if *u && *r > limit {
                *u = false;
                outlier_rows += 1;
            }
        }
    }
    if used.iter().filter(|u| **u).count() < 6 {
        return Err(CoreError::invalid(
            "region",
            "fewer than 6 usable rows in the region",
        ));
    }

    let entries: Vec<TableEntry> = (0..=steps)
        .map(|k| {
            let order = k as f64 * spec.order_step;
            let (lab, spread, samples) = local_linear(&rows, &used, order, bandwidth);
            TableEntry {
                order,
                lab: [
                    lab[0].clamp(0.0, 100.0) as f32,
                    lab[1] as f32,
                    lab[2] as f32,
                ],
                spread: spread.map(|s| s as f32),
                samples,
            }
        })
        .collect();

    let mut table = CalibrationTable::new(
        metadata,
        spec.order_step,
        TableSource::BeamPhoto {
            photo_width: photo.width(),
            photo_height: photo.height(),
            region,
            edge_order,
            residual_de2000: 0.0,
            fringe_value_n_per_mm: spec.load.fringe_value(),
        },
        entries,
    )?;
    let mut residuals: Vec<f64> = rows
        .iter()
        .zip(&used)
        .filter(|(_, u)| **u)
        .map(|(row, _)| {
            let measured = Lab::new(row.mean[0] as f32, row.mean[1] as f32, row.mean[2] as f32);
            f64::from(ciede2000(measured, table.colour_at(row.order)))
        })
        .collect();
    let residual_mean = residuals.iter().sum::<f64>() / residuals.len() as f64;
    let residual_p95 = percentile(&mut residuals, 0.95);
    if let TableSource::BeamPhoto {
        residual_de2000, ..
    } = &mut table.source
    {
        *residual_de2000 = residual_mean;
    }
    let report = BeamReport {
        edge_order,
        max_order: table.max_order(),
        residual_mean_de2000: residual_mean,
        residual_p95_de2000: residual_p95,
        rows_used: used.iter().filter(|u| **u).count() as u32,
        edge_rows_skipped,
        outlier_rows,
        outlier_pixel_share: 1.0 - pixels_kept as f64 / pixels_seen.max(1) as f64,
        edge_shift,
        fringe_value_n_per_mm: spec.load.implied_fringe_value(),
        edge_order_estimate,
    };
    Ok(BeamCalibration { table, report })
}

/// Checks that an edge order (given, from the load or estimated) fits a calibration table.
fn check_edge_order(edge_order: f64) -> CoreResult<()> {
    if edge_order.is_finite() && edge_order > 0.0 && edge_order <= MAX_TABLE_ORDER {
        Ok(())
    } else {
        Err(CoreError::invalid(
            "edge_order",
            format!("the edge order works out at {edge_order:.3}; it must lie in (0, {MAX_TABLE_ORDER}]"),
        ))
    }
}

/// ΔE*ab between two CIELAB triples.
fn lab_distance(a: &[f64; 3], b: &[f64; 3]) -> f64 {
    ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2) + (a[2] - b[2]).powi(2)).sqrt()
}

/// Median of a slice (reorders it); 0 for an empty slice.
fn median(v: &mut [f64]) -> f64 {
    percentile(v, 0.5)
}

/// Nearest-rank percentile `q` in [0, 1] (reorders the slice); 0 for an empty slice.
fn percentile(v: &mut [f64], q: f64) -> f64 {
    if v.is_empty() {
        return 0.0;
    }
    let k = ((v.len() - 1) as f64 * q).round() as usize;
    *v.select_nth_unstable_by(k, f64::total_cmp).1
}

/// Mean and spread of one row's pixels after dropping those far from the row's median colour;
/// `depth` is the row's relative distance from the mid-line (its order is set later).
fn robust_row_mean(labs: &[[f64; 3]], depth: f64) -> RowSample {
    let mut centre = [0.0; 3];
    for (c, slot) in centre.iter_mut().enumerate() {
        let mut channel: Vec<f64> = labs.iter().map(|l| l[c]).collect();
        *slot = median(&mut channel);
    }
    let distances: Vec<f64> = labs.iter().map(|l| lab_distance(l, &centre)).collect();
    let limit = (3.0 * 1.4826 * median(&mut distances.clone())).max(2.0);
    let kept: Vec<&[f64; 3]> = labs
        .iter()
        .zip(&distances)
        .filter(|(_, d)| **d <= limit)
        .map(|(l, _)| l)
        .collect();
    let n = kept.len().max(1) as f64;
    let mut mean = [0.0; 3];
    for l in &kept {
        for c in 0..3 {
            mean[c] += l[c] / n;
        }
    }
    let mut spread = [0.0; 3];
    for l in &kept {
        for c in 0..3 {
            spread[c] += (l[c] - mean[c]).powi(2) / n;
        }
    }
    RowSample {
        depth,
        order: 0.0,
        mean,
        spread: spread.map(f64::sqrt),
        kept: kept.len() as u32,
    }
}

/// Gaussian-weighted local linear fit of the row colours at `order` (bandwidth in fringes):
/// returns the fitted colour, the weighted mean spread and the pixels within two bandwidths.
fn local_linear(
    rows: &[RowSample],
    used: &[bool],
    order: f64,
    bandwidth: f64,
) -> ([f64; 3], [f64; 3], u32) {
    let (mut sw, mut swx, mut swxx) = (0.0, 0.0, 0.0);
    let (mut swy, mut swxy, mut sws) = ([0.0; 3], [0.0; 3], [0.0; 3]);
    let mut samples = 0u32;
    for (r, _) in rows.iter().zip(used).filter(|(_, u)| **u) {
        let dx = r.order - order;
        if dx.abs() > 3.0 * bandwidth {
            continue;
        }
        if dx.abs() <= 2.0 * bandwidth {
            samples += r.kept;
        }
        let w = (-0.5 * (dx / bandwidth).powi(2)).exp() * f64::from(r.kept.max(1));
        sw += w;
        swx += w * dx;
        swxx += w * dx * dx;
        for c in 0..3 {
            swy[c] += w * r.mean[c];
            swxy[c] += w * dx * r.mean[c];
            sws[c] += w * r.spread[c];
        }
    }
    if sw == 0.0 {
        // No row within reach: fall back to the nearest used row.
        let nearest = rows
            .iter()
            .zip(used)
            .filter(|(_, u)| **u)
            .min_by(|a, b| {
                (a.0.order - order)
                    .abs()
                    .total_cmp(&(b.0.order - order).abs())
            })
            .map(|(r, _)| *r)
            .expect("at least one used row");
        return (nearest.mean, nearest.spread, 0);
    }
    let det = sw * swxx - swx * swx;
    let mut fit = [0.0; 3];
    for c in 0..3 {
        fit[c] = if det.abs() > 1e-12 * sw * sw {
            (swxx * swy[c] - swx * swxy[c]) / det
        } else {
            swy[c] / sw
        };
    }
    (fit, sws.map(|s| s / sw), samples)
}

/// Which beam edge to look for.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Edge {
    Top,
    Bottom,
}

/// Finds a beam edge to sub-pixel precision: the row position where the column-averaged
/// luminance crosses halfway between the dark background outside and the beam inside.
fn find_edge(photo: &Photo, region: &PixelRect, edge: Edge) -> CoreResult<f64> {
    let (given, name) = match edge {
        Edge::Top => (region.top, "top"),
        Edge::Bottom => (region.bottom, "bottom"),
    };
    let columns = region.column_range();
    let luminance = |y: i64| -> Option<(f64, f64)> {
        if y < 0 || y >= i64::from(photo.height()) {
            return None;
        }
        let sum: f64 = columns
            .clone()
            .map(|x| {
                let c = photo.linear((y as u32 * photo.width() + x) as usize);
                f64::from(0.2126 * c.red + 0.7152 * c.green + 0.0722 * c.blue)
            })
            .sum();
        Some((y as f64 + 0.5, sum / columns.len().max(1) as f64))
    };
    let reach = EDGE_SEARCH_PX as i64 + 3;
    let base = given.round() as i64;
    // Row centres and mean linear luminance, from outside (background) to inside (beam).
    let ordered: Vec<(f64, f64)> = match edge {
        Edge::Top => (base - reach..base + reach).filter_map(luminance).collect(),
        Edge::Bottom => (base - reach..base + reach)
            .rev()
            .filter_map(luminance)
            .collect(),
    };
    let not_found = || {
        CoreError::invalid(
            "region",
            format!("the {name} edge was not found within ±{EDGE_SEARCH_PX} px of {given}: no dark background next to the beam"),
        )
    };
    if ordered.len() < 8 {
        return Err(not_found());
    }
    let outside = ordered[..3].iter().map(|p| p.1).sum::<f64>() / 3.0;
    // First estimate against the brightest row of the inner half, then again against the
    // rows just inside that estimate (the beam's own brightness next to its edge).
    let inner = &ordered[ordered.len() / 2..];
    let mut inside = inner.iter().map(|p| p.1).fold(f64::NEG_INFINITY, f64::max);
    let crossing = |inside: f64| {
        let half = 0.5 * (outside + inside);
        ordered.windows(2).find_map(|w| {
            let ((y0, l0), (y1, l1)) = (w[0], w[1]);
            (l0 < half && l1 >= half).then(|| y0 + (half - l0) / (l1 - l0) * (y1 - y0))
        })
    };
    if inside - outside < 0.02 {
        return Err(not_found());
    }
    let mut found = crossing(inside);
    if let Some(first) = found {
        let near: Vec<f64> = ordered
            .iter()
            .filter(|(y, _)| {
                let depth = (y - first).abs();
                depth > 1.0
                    && depth < 4.0
                    && (y - first).signum() == (ordered[ordered.len() - 1].0 - first).signum()
            })
            .map(|p| p.1)
            .collect();
        if !near.is_empty() {
            inside = near.iter().sum::<f64>() / near.len() as f64;
            found = crossing(inside).or(found);
        }
    }
    match found {
        Some(y) if (y - given).abs() <= EDGE_SEARCH_PX => Ok(y),
        _ => Err(not_found()),
    }
}
