//! Calibration tables from a photo of a beam in four-point bending.
//!
//! Between the inner loads the moment is constant, so the fringe order varies linearly through
//! the depth: 0 on the mid-line, ±N_edge at the edges, with N_edge = 6M / (f_σ · d²).

use serde::{Deserialize, Serialize};

use crate::calibration::{CalibrationMetadata, CalibrationTable};
use crate::colour::Photo;
use crate::error::{CoreError, CoreResult};
use crate::geometry::PixelRect;

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
}

fn positive(field: &'static str, v: f64) -> CoreResult<f64> {
    if v.is_finite() && v > 0.0 {
        Ok(v)
    } else {
        Err(CoreError::invalid(field, format!("must be a positive number, got {v}")))
    }
}

impl EdgeLoad {
    /// Parses the caller's fields: an edge order, or moment + depth + fringe value, or an edge
    /// order with moment + depth (then the fringe value is reported).
    pub fn from_fields(f: EdgeLoadFields) -> CoreResult<EdgeLoad> {
        match (f.edge_order, f.moment_n_mm, f.depth_mm, f.fringe_value_n_per_mm) {
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
            _ => Err(CoreError::invalid(
                "edge_order",
                "give edge_order, or moment_n_mm + depth_mm + fringe_value_n_per_mm, \
                 or edge_order + moment_n_mm + depth_mm",
            )),
        }
    }

    /// The order at the beam edges, fringes.
    pub fn edge_order(&self) -> f64 {
        match *self {
            EdgeLoad::EdgeOrder(n) | EdgeLoad::EdgeOrderAndLoad { edge_order: n, .. } => n,
            EdgeLoad::Load {
                moment_n_mm,
                depth_mm,
                fringe_value_n_per_mm,
            } => crate::stress::pure_bending_edge_order(moment_n_mm, depth_mm, fringe_value_n_per_mm),
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
}

/// A table and its report.
#[derive(Debug, Clone)]
pub struct BeamCalibration {
    /// The new table.
    pub table: CalibrationTable,
    /// How well it was measured.
    pub report: BeamReport,
}

/// Builds a calibration table from a beam photo.
pub fn calibrate_beam(photo: &Photo, spec: &BeamSpec) -> CoreResult<BeamCalibration> {
    spec.region.check_inside(photo.width(), photo.height())?;
    Err(CoreError::invalid("beam", "not built yet"))
}
