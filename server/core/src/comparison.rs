//! Comparison of a measured σ1 − σ2 map with a predicted one (a finite-element model's nodes).
//!
//! The prediction is a CSV of scattered nodes: three numeric columns x, y (model
//! coordinates, mm) and σ1 − σ2 (MPa, ≥ 0); one header row is allowed. It is interpolated
//! linearly on the Delaunay triangulation of the nodes (the `spade` crate); outside their
//! convex hull there is no prediction.
//!
//! The model is registered to the photo by point pairs, each a pixel (pixel-edge coordinates,
//! x right, y down) and the model point (mm) it shows: two pairs give a similarity (rotation,
//! uniform scale, shift — the model's axes must turn the photo's way, x right and y down),
//! three or more a least-squares affine map, which may mirror, so a model whose y axis points
//! up registers correctly from three pairs.
//!
//! Every specimen pixel with a measured value whose centre falls inside the model is
//! compared: difference = measured − predicted, MPa.

use std::io::Write;

use nalgebra::{Matrix3, Vector3};
use num_complex::Complex64;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use spade::{DelaunayTriangulation, FloatTriangulation, HasPosition, Point2, Triangulation};

use crate::error::{CoreError, CoreResult};
use crate::order_map::{OrderMap, PixelFlags};
use crate::stress::{StressOpticLaw, STRESS_CAUTION};

/// Most nodes a prediction may have.
pub const MAX_PREDICTION_NODES: usize = 2_000_000;
/// Point sets whose spread across their main direction is below this share of the spread
/// along it count as collinear.
const COLLINEAR_RATIO: f64 = 1e-3;

/// A pixel of the photo and the model point it shows.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PointPair {
    /// Pixel position, pixel-edge coordinates (x right).
    pub x_px: f64,
    /// Pixel position, y down.
    pub y_px: f64,
    /// Model position, mm.
    pub x_mm: f64,
    /// See `x_mm`.
    pub y_mm: f64,
}

impl PointPair {
    /// Parses `XPX,YPX,XMM,YMM` (four finite numbers).
    pub fn parse(text: &str) -> CoreResult<PointPair> {
        let numbers: Vec<f64> = text
            .split(',')
            .map(|s| s.trim().parse::<f64>().ok().filter(|v| v.is_finite()))
            .collect::<Option<_>>()
            .unwrap_or_default();
        let [x_px, y_px, x_mm, y_mm] = numbers[..] else {
            return Err(CoreError::invalid(
                "pairs",
                format!("expected four numbers XPX,YPX,XMM,YMM, got {text:?}"),
            ));
        };
        Ok(PointPair {
            x_px,
            y_px,
            x_mm,
            y_mm,
        })
    }
}

/// How the model was registered to the photo.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum RegistrationKind {
    /// Two pairs: rotation, uniform scale and shift.
    Similarity,
    /// Three or more pairs: least-squares affine map.
    Affine,
}

/// A map from pixel-edge coordinates to model coordinates (mm):
/// model = M · (x, y, 1).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Registration {
    /// Similarity or affine.
    pub kind: RegistrationKind,
    /// Pairs it was fitted to.
    pub pairs: usize,
    /// Rms distance between the pairs' model points and where the map puts their pixels, mm
    /// (0 when the pairs determine the map exactly).
    pub rms_mm: f64,
    /// Model length of one pixel, mm (square root of the map's area scale).
    pub mm_per_px: f64,
    /// Whether the map mirrors (the model's y axis points up when its x points right).
    pub mirrored: bool,
    /// Rows (x_mm, y_mm) of the 2 × 3 matrix M.
    pub matrix: [[f64; 3]; 2],
}

impl Registration {
    /// Fits the map to `pairs` (field `pairs`): two give a similarity, more a least-squares
    /// affine map. Refused with fewer than two, coincident points or, from three on, pixel or
    /// model points on one line.
    pub fn fit(pairs: &[PointPair]) -> CoreResult<Registration> {
        if let Some(p) = pairs.iter().find(|p| {
            ![p.x_px, p.y_px, p.x_mm, p.y_mm]
                .iter()
                .all(|v| v.is_finite())
        }) {
            return Err(CoreError::invalid(
                "pairs",
                format!("every coordinate must be a finite number, got {p:?}"),
            ));
        }
        let matrix = match pairs {
            [] | [_] => {
                return Err(CoreError::invalid(
                    "pairs",
                    format!(
                        "needs at least two point pairs (pixel ↔ model), got {}",
                        pairs.len()
                    ),
                ))
            }
            [a, b] => similarity(a, b)?,
            _ => affine(pairs)?,
        };
        let kind = if pairs.len() == 2 {
            RegistrationKind::Similarity
        } else {
            RegistrationKind::Affine
        };
        let det = matrix[0][0] * matrix[1][1] - matrix[0][1] * matrix[1][0];
        let mut registration = Registration {
            kind,
            pairs: pairs.len(),
            rms_mm: 0.0,
            mm_per_px: det.abs().sqrt(),
            mirrored: det < 0.0,
            matrix,
        };
        let sq: f64 = pairs
            .iter()
            .map(|p| {
                let [x, y] = registration.model_of(p.x_px, p.y_px);
                (x - p.x_mm).powi(2) + (y - p.y_mm).powi(2)
            })
            .sum();
        registration.rms_mm = (sq / pairs.len() as f64).sqrt();
        Ok(registration)
    }

    /// The model point (mm) shown at pixel-edge position (x, y).
    pub fn model_of(&self, x_px: f64, y_px: f64) -> [f64; 2] {
        let m = &self.matrix;
        [
            m[0][0] * x_px + m[0][1] * y_px + m[0][2],
            m[1][0] * x_px + m[1][1] * y_px + m[1][2],
        ]
    }
}

/// The similarity z_model = a · z_px + b (complex numbers x + iy) through two pairs.
fn similarity(p: &PointPair, q: &PointPair) -> CoreResult<[[f64; 3]; 2]> {
    let (p_px, q_px) = (
        Complex64::new(p.x_px, p.y_px),
        Complex64::new(q.x_px, q.y_px),
    );
    let (p_mm, q_mm) = (
        Complex64::new(p.x_mm, p.y_mm),
        Complex64::new(q.x_mm, q.y_mm),
    );
    if (q_px - p_px).norm() < 1e-9 {
        return Err(CoreError::invalid(
            "pairs",
            "the two pixel points coincide; pick points far apart on the specimen",
        ));
    }
    if (q_mm - p_mm).norm() < 1e-12 {
        return Err(CoreError::invalid(
            "pairs",
            "the two model points coincide; pick points far apart on the model",
        ));
    }
    let a = (q_mm - p_mm) / (q_px - p_px);
    let b = p_mm - a * p_px;
    Ok([[a.re, -a.im, b.re], [a.im, a.re, b.im]])
}

/// Whether `points` lie on one line (or on one point): the smaller principal spread is below
/// [`COLLINEAR_RATIO`] of the larger.
fn collinear(points: impl Iterator<Item = [f64; 2]> + Clone) -> bool {
    let n = points.clone().count() as f64;
    let (mx, my) = points
        .clone()
        .fold((0.0, 0.0), |(a, b), [x, y]| (a + x / n, b + y / n));
    let (sxx, syy, sxy) = points.fold((0.0, 0.0, 0.0), |(a, b, c), [x, y]| {
        let (dx, dy) = (x - mx, y - my);
        (a + dx * dx, b + dy * dy, c + dx * dy)
    });
    let mean = 0.5 * (sxx + syy);
    let half = (0.25 * (sxx - syy).powi(2) + sxy * sxy).sqrt();
    let (large, small) = (mean + half, (mean - half).max(0.0));
    large <= 0.0 || small.sqrt() < COLLINEAR_RATIO * large.sqrt()
}

/// The least-squares affine map through three or more pairs.
fn affine(pairs: &[PointPair]) -> CoreResult<[[f64; 3]; 2]> {
    if collinear(pairs.iter().map(|p| [p.x_px, p.y_px])) {
        return Err(CoreError::invalid(
            "pairs",
            "the pixel points lie on one line; an affine registration needs points that span \
             the specimen",
        ));
    }
    if collinear(pairs.iter().map(|p| [p.x_mm, p.y_mm])) {
        return Err(CoreError::invalid(
            "pairs",
            "the model points lie on one line; an affine registration needs points that span \
             the model",
        ));
    }
    // Normal equations in coordinates centred on the pixel points' mean (well conditioned).
    let n = pairs.len() as f64;
    let (cx, cy) = pairs
        .iter()
        .fold((0.0, 0.0), |(a, b), p| (a + p.x_px / n, b + p.y_px / n));
    let mut normal = Matrix3::zeros();
    let (mut rx, mut ry) = (Vector3::zeros(), Vector3::zeros());
    for p in pairs {
        let row = Vector3::new(p.x_px - cx, p.y_px - cy, 1.0);
        normal += row * row.transpose();
        rx += row * p.x_mm;
        ry += row * p.y_mm;
    }
    let lu = normal.lu();
    let (Some(ax), Some(ay)) = (lu.solve(&rx), lu.solve(&ry)) else {
        return Err(CoreError::invalid(
            "pairs",
            "the point pairs do not determine an affine map",
        ));
    };
    let row = |a: Vector3<f64>| [a[0], a[1], a[2] - a[0] * cx - a[1] * cy];
    Ok([row(ax), row(ay)])
}

/// One node of a prediction.
#[derive(Debug, Clone, Copy)]
struct Node {
    at: Point2<f64>,
    stress_mpa: f64,
}

impl HasPosition for Node {
    type Scalar = f64;
    fn position(&self) -> Point2<f64> {
        self.at
    }
}

/// A predicted σ1 − σ2 field: nodes in model coordinates (mm), linear between them.
#[derive(Debug)]
pub struct Prediction {
    triangulation: DelaunayTriangulation<Node>,
    nodes: usize,
}

impl Prediction {
    /// Parses the CSV described in the module documentation (field `prediction`; errors give
    /// the line). Refused: a non-numeric line after the first, a row without three columns, a
    /// value that is not finite, a negative σ1 − σ2, fewer than three nodes, more than
    /// [`MAX_PREDICTION_NODES`], or nodes on one line.
    pub fn from_csv(text: &str) -> CoreResult<Prediction> {
        let mut nodes = Vec::new();
        for (i, line) in text.lines().enumerate() {
            let line = line.trim();
            if line.is_empty() {
                continue;
            }
            let cells: Vec<&str> = line.split(',').map(str::trim).collect();
            let numbers: Option<Vec<f64>> = cells.iter().map(|c| c.parse::<f64>().ok()).collect();
            let Some(numbers) = numbers else {
                if i == 0 {
                    continue; // the header row
                }
                return Err(CoreError::invalid(
                    "prediction",
                    format!(
                        "line {}: expected three numbers x_mm,y_mm,stress_mpa, got {:?}",
                        i + 1,
                        line.chars().take(60).collect::<String>()
                    ),
                ));
            };
            let [x, y, s] = numbers[..] else {
                return Err(CoreError::invalid(
                    "prediction",
                    format!(
                        "line {}: expected three columns x_mm,y_mm,stress_mpa, got {}",
                        i + 1,
                        numbers.len()
                    ),
                ));
            };
            if ![x, y, s].iter().all(|v| v.is_finite()) {
                return Err(CoreError::invalid(
                    "prediction",
                    format!(
                        "line {}: every value must be a finite number (no NaN)",
                        i + 1
                    ),
                ));
            }
            if s < 0.0 {
                return Err(CoreError::invalid(
                    "prediction",
                    format!(
                        "line {}: σ1 − σ2 must not be negative, got {s} (give the principal \
                         stress difference, not a signed stress)",
                        i + 1
                    ),
                ));
            }
            if nodes.len() == MAX_PREDICTION_NODES {
                return Err(CoreError::invalid(
                    "prediction",
                    format!("has more than {MAX_PREDICTION_NODES} nodes"),
                ));
            }
            nodes.push(Node {
                at: Point2::new(x, y),
                stress_mpa: s,
            });
        }
        if nodes.len() < 3 {
            return Err(CoreError::invalid(
                "prediction",
                format!(
                    "needs at least three nodes (x_mm,y_mm,stress_mpa rows), got {}",
                    nodes.len()
                ),
            ));
        }
        let count = nodes.len();
        let triangulation = DelaunayTriangulation::<Node>::bulk_load(nodes)
            .map_err(|e| CoreError::invalid("prediction", format!("unusable node: {e}")))?;
        if triangulation.num_inner_faces() == 0 {
            return Err(CoreError::invalid(
                "prediction",
                "its nodes lie on one line; it covers no area",
            ));
        }
        Ok(Prediction {
            triangulation,
            nodes: count,
        })
    }

    /// Nodes read (before duplicate positions are merged).
    pub fn nodes(&self) -> usize {
        self.nodes
    }

    /// The predicted σ1 − σ2 at a model point (mm), MPa; `None` outside the nodes' hull.
    pub fn at(&self, x_mm: f64, y_mm: f64) -> Option<f64> {
        self.triangulation
            .barycentric()
            .interpolate(|v| v.data().stress_mpa, Point2::new(x_mm, y_mm))
    }
}

/// The comparison of a measured map with a prediction.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Comparison {
    /// Mean |measured − predicted| over the compared pixels, MPa.
    pub mean_abs_difference_mpa: f64,
    /// Rms of measured − predicted, MPa.
    pub rms_difference_mpa: f64,
    /// Largest |measured − predicted|, MPa.
    pub max_abs_difference_mpa: f64,
    /// Where it is, pixel-edge coordinates (the pixel's centre).
    pub max_x: f64,
    /// See `max_x`.
    pub max_y: f64,
    /// The model point shown there, mm, in the prediction's coordinates (through the
    /// registration).
    pub max_x_mm: f64,
    /// See `max_x_mm`.
    pub max_y_mm: f64,
    /// Mean measured − predicted (positive: the photo reads higher), MPa.
    pub mean_difference_mpa: f64,
    /// Specimen pixels with a measured value inside the model: those compared.
    pub compared_pixels: usize,
    /// Specimen pixels.
    pub specimen_pixels: usize,
    /// Share of the specimen's pixels whose centres fall inside the model.
    pub model_coverage: f64,
    /// Beyond-range pixels inside the model, left out: their differences are unknown.
    pub beyond_range_pixels: usize,
    /// True when `beyond_range_pixels` > 0: larger differences may hide there.
    pub max_is_lower_bound: bool,
    /// Nodes of the prediction.
    pub prediction_nodes: usize,
    /// The registration used.
    pub registration: Registration,
    /// Material fringe value used, N/mm per fringe.
    pub fringe_value_n_per_mm: f64,
    /// Model thickness used, mm.
    pub thickness_mm: f64,
    /// Results support, and do not replace, engineering judgement.
    pub caution: String,
    /// Width of the map, pixels.
    #[serde(skip)]
    pub width: u32,
    /// Height of the map, pixels.
    #[serde(skip)]
    pub height: u32,
    /// measured − predicted per pixel, MPa, row-major; NaN where not compared.
    #[serde(skip)]
    pub difference: Vec<f32>,
}

/// Per-row sums of a comparison.
#[derive(Debug, Default, Clone, Copy)]
struct RowSums {
    compared: usize,
    specimen: usize,
    covered: usize,
    beyond_range: usize,
    abs: f64,
    signed: f64,
    sq: f64,
    max: (f64, f64, f64),
}

impl RowSums {
    fn plus(self, o: RowSums) -> RowSums {
        RowSums {
            compared: self.compared + o.compared,
            specimen: self.specimen + o.specimen,
            covered: self.covered + o.covered,
            beyond_range: self.beyond_range + o.beyond_range,
            abs: self.abs + o.abs,
            signed: self.signed + o.signed,
            sq: self.sq + o.sq,
            max: if o.max.0 > self.max.0 {
                o.max
            } else {
                self.max
            },
        }
    }
}

/// Compares `map` (σ1 − σ2 through `law`) with `prediction` registered by `registration`.
/// Refused naming `pairs` when no specimen pixel falls inside the model, `photo` when none of
/// those inside has a measured value.
pub fn compare(
    map: &OrderMap,
    law: &StressOpticLaw,
    prediction: &Prediction,
    registration: &Registration,
) -> CoreResult<Comparison> {
    let w = map.width as usize;
    let mut difference = vec![f32::NAN; map.order.len()];
    let sums = difference
        .par_chunks_mut(w.max(1))
        .enumerate()
        .map(|(y, row)| {
            let interpolation = prediction.triangulation.barycentric();
            let mut sums = RowSums::default();
            for (x, out) in row.iter_mut().enumerate() {
                let i = y * w + x;
                let flags = map.flags[i];
                if flags.has(PixelFlags::OUTSIDE_MASK) {
                    continue;
                }
                sums.specimen += 1;
                let (cx, cy) = (x as f64 + 0.5, y as f64 + 0.5);
                let [mx, my] = registration.model_of(cx, cy);
                let Some(predicted) =
                    interpolation.interpolate(|v| v.data().stress_mpa, Point2::new(mx, my))
                else {
                    continue;
                };
                sums.covered += 1;
                let order = map.order[i];
                if !order.is_finite() {
                    sums.beyond_range += usize::from(flags.has(PixelFlags::BEYOND_RANGE));
                    continue;
                }
                let d = law.stress_difference_mpa(f64::from(order)) - predicted;
                *out = d as f32;
                sums.compared += 1;
                sums.abs += d.abs();
                sums.signed += d;
                sums.sq += d * d;
                if d.abs() > sums.max.0 {
                    sums.max = (d.abs(), cx, cy);
                }
            }
            sums
        })
        .reduce(RowSums::default, RowSums::plus);
    if sums.covered == 0 {
        return Err(CoreError::invalid(
            "pairs",
            format!(
                "the registration leaves the specimen outside the model: none of its {} pixels \
                 falls inside the prediction's nodes (check the pairs' pixel and model points)",
                sums.specimen
            ),
        ));
    }
    if sums.compared == 0 {
        return Err(CoreError::invalid(
            "photo",
            format!(
                "none of the {} specimen pixels inside the model has a measured value",
                sums.covered
            ),
        ));
    }
    let n = sums.compared as f64;
    let [max_x_mm, max_y_mm] = registration.model_of(sums.max.1, sums.max.2);
    Ok(Comparison {
        mean_abs_difference_mpa: sums.abs / n,
        rms_difference_mpa: (sums.sq / n).sqrt(),
        max_abs_difference_mpa: sums.max.0,
        max_x: sums.max.1,
        max_y: sums.max.2,
        max_x_mm,
        max_y_mm,
        mean_difference_mpa: sums.signed / n,
        compared_pixels: sums.compared,
        specimen_pixels: sums.specimen,
        model_coverage: sums.covered as f64 / sums.specimen as f64,
        beyond_range_pixels: sums.beyond_range,
        max_is_lower_bound: sums.beyond_range > 0,
        prediction_nodes: prediction.nodes,
        registration: *registration,
        fringe_value_n_per_mm: law.fringe_value_n_per_mm,
        thickness_mm: law.thickness_mm,
        caution: STRESS_CAUTION.to_string(),
        width: map.width,
        height: map.height,
        difference,
    })
}

/// A comparison's difference map as CSV `x,y,difference_mpa` (pixel centres, compared pixels
/// only).
pub fn difference_csv(comparison: &Comparison) -> Vec<u8> {
    let w = comparison.width as usize;
    let mut out = b"x,y,difference_mpa\n".to_vec();
    for (i, d) in comparison.difference.iter().enumerate() {
        if d.is_finite() {
            let _ = writeln!(out, "{}.5,{}.5,{d:.4}", i % w.max(1), i / w.max(1));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pair(x_px: f64, y_px: f64, x_mm: f64, y_mm: f64) -> PointPair {
        PointPair {
            x_px,
            y_px,
            x_mm,
            y_mm,
        }
    }

    fn close(a: [f64; 2], b: [f64; 2]) -> bool {
        (a[0] - b[0]).abs() < 1e-9 && (a[1] - b[1]).abs() < 1e-9
    }

    #[test]
    fn two_pairs_give_the_similarity_through_them() {
        // Hand-built: scale 0.5 mm/px, turned +90° (x onto y), shifted by (5, 5) mm.
        let r = Registration::fit(&[pair(0.0, 0.0, 5.0, 5.0), pair(10.0, 0.0, 5.0, 10.0)]).unwrap();
        assert_eq!(r.kind, RegistrationKind::Similarity);
        assert!(close(r.model_of(0.0, 10.0), [0.0, 5.0]), "{r:?}");
        assert!((r.mm_per_px - 0.5).abs() < 1e-12 && !r.mirrored && r.rms_mm < 1e-12);
    }

    #[test]
    fn three_pairs_register_a_model_whose_y_axis_points_up() {
        // Hand-built: x_mm = 0.1·x, y_mm = 30 − 0.1·y.
        let r = Registration::fit(&[
            pair(0.0, 0.0, 0.0, 30.0),
            pair(100.0, 0.0, 10.0, 30.0),
            pair(0.0, 100.0, 0.0, 20.0),
        ])
        .unwrap();
        assert_eq!(r.kind, RegistrationKind::Affine);
        assert!(close(r.model_of(50.0, 50.0), [5.0, 25.0]), "{r:?}");
        assert!(r.mirrored && (r.mm_per_px - 0.1).abs() < 1e-12);
    }

    #[test]
    fn four_pairs_fit_the_affine_map_in_the_least_squares_sense() {
        // Unit square onto itself but one corner moved by d along x. Least squares of a + b·x +
        // c·y on a 2 × 2 design: a = −d/4, b = 1 + d/2, c = d/2, every residual ±d/4 (hand-worked).
        let d = 0.4;
        let r = Registration::fit(&[
            pair(0.0, 0.0, 0.0, 0.0),
            pair(1.0, 0.0, 1.0, 0.0),
            pair(0.0, 1.0, 0.0, 1.0),
            pair(1.0, 1.0, 1.0 + d, 1.0),
        ])
        .unwrap();
        let [[b, c, a], [e, f, g]] = r.matrix;
        assert!((a + d / 4.0).abs() < 1e-12 && (b - 1.0 - d / 2.0).abs() < 1e-12);
        assert!((c - d / 2.0).abs() < 1e-12);
        assert!(e.abs() < 1e-12 && (f - 1.0).abs() < 1e-12 && g.abs() < 1e-12);
        assert!((r.rms_mm - d / 4.0).abs() < 1e-12, "{r:?}");
    }

    #[test]
    fn bad_pairs_are_refused_naming_the_pairs() {
        let refused = |pairs: &[PointPair]| match Registration::fit(pairs) {
            Err(CoreError::Invalid { field, message }) => {
                assert_eq!(field, "pairs");
                message
            }
            other => panic!("{other:?}"),
        };
        refused(&[pair(0.0, 0.0, 0.0, 0.0)]);
        refused(&[pair(1.0, 1.0, 0.0, 0.0), pair(1.0, 1.0, 5.0, 0.0)]);
        let on_a_line = [
            pair(0.0, 0.0, 0.0, 0.0),
            pair(10.0, 10.0, 1.0, 0.0),
            pair(20.0, 20.0, 0.0, 1.0),
        ];
        assert!(refused(&on_a_line).contains("one line"));
        let model_line = [
            pair(0.0, 0.0, 0.0, 0.0),
            pair(10.0, 0.0, 1.0, 1.0),
            pair(0.0, 10.0, 2.0, 2.0),
        ];
        assert!(refused(&model_line).contains("model points"));
        assert!(PointPair::parse("1,2,3").is_err() && PointPair::parse("1,2,3,NaN").is_err());
    }

    #[test]
    fn a_prediction_interpolates_linearly_between_its_nodes() {
        // σ = 2x + 3y + 1 on the unit square's corners: exact inside (linear on any triangles).
        let csv = "x_mm,y_mm,s1_s2_mpa\n0,0,1\n1,0,3\n0,1,4\n1,1,6\n";
        let p = Prediction::from_csv(csv).unwrap();
        assert_eq!(p.nodes(), 4);
        assert!((p.at(0.25, 0.5).unwrap() - 3.0).abs() < 1e-12);
        assert_eq!(p.at(1.5, 0.5), None);
    }

    #[test]
    fn bad_predictions_are_refused_naming_the_prediction_and_the_line() {
        let refused = |csv: &str| match Prediction::from_csv(csv) {
            Err(CoreError::Invalid { field, message }) => {
                assert_eq!(field, "prediction");
                message
            }
            other => panic!("{other:?}"),
        };
        assert!(refused("0,0,1\n1,0,NaN\n0,1,2\n").contains("line 2"));
        assert!(refused("0,0,1\n1,0,2\n").contains("three nodes"));
        assert!(refused("0,0,1\n1,1,2\n2,2,3\n").contains("one line"));
        assert!(refused("0,0,1\n1,0\n0,1,2\n").contains("line 2"));
        assert!(refused("0,0,1\n1,0,-2\n0,1,2\n").contains("negative"));
        assert!(refused("x,y,s\n0,0,1\nfoo,0,1\n").contains("line 3"));
    }
}
