//! Free-edge stress along a specimen's edge: the outline of its mask or a polyline the user
//! draws along part of it.
//!
//! At an unloaded free edge one principal stress is zero, so the tangential stress is
//! |σ_t| = N · f_σ / h. The orders right at the edge are not read: within 3 px of the mask's
//! edge the photo's colours mix with the background and the solver treats that band
//! specially. Each edge point is sampled instead along its inward normal at
//! [`SAMPLE_INSET_PX`] and [`SECOND_INSET_PX`] (bilinear between pixel centres), and the order
//! is carried to the edge by the straight line through the two samples. That is exact for
//! orders that change linearly towards the edge (a beam in bending) and reads a little low
//! where the gradient steepens towards the edge (next to a hole of 150 px radius under
//! tension, about 0.6 % low; of 70 px, about 2.5 %).
//!
//! Pixel convention: x right, y down, pixel (x, y) covers [x, x+1) × [y, y+1); every position
//! here is in these edge coordinates. Stresses in MPa.

use std::io::Write;

use serde::Serialize;

use crate::error::{CoreError, CoreResult};
use crate::geometry::{PixelPoint, Scale};
use crate::order_map::{OrderMap, PixelFlags};
use crate::stress::{positive, stress_concentration_factor, StressOpticLaw, STRESS_CAUTION};

/// Distance of the first sample from the edge along the inward normal, px: past the 3-px band
/// at the mask's edge whose colours mix with the background.
pub const SAMPLE_INSET_PX: f64 = 4.0;
/// Distance of the second sample from the edge, px; the order is carried to the edge along the
/// line through both samples.
pub const SECOND_INSET_PX: f64 = 7.0;
/// Radius of the neighbourhood whose specimen pixels give an outline pixel its inward normal,
/// px (the direction to their centroid).
const NORMAL_RADIUS_PX: i64 = 6;
/// Spacing of the points a polyline is sampled at, px.
const POLYLINE_STEP_PX: f64 = 1.0;

/// What to sample along.
#[derive(Debug, Clone, PartialEq)]
pub enum EdgePath {
    /// Every edge of the specimen's mask (holes included); where the mask meets the photo's
    /// border there is no edge, since the specimen goes on past the picture.
    Outline,
    /// A polyline along part of the edge, at least two points in pixel-edge coordinates inside
    /// the photo. The specimen must lie on one side of it (the side whose points at
    /// [`SAMPLE_INSET_PX`] fall on the specimen more often is taken as inside).
    Polyline(Vec<PixelPoint>),
}

impl EdgePath {
    /// The field a bad edge is reported under: `polyline`, or `mask` for the outline.
    fn field(&self) -> &'static str {
        match self {
            EdgePath::Outline => "mask",
            EdgePath::Polyline(_) => "polyline",
        }
    }
}

/// One point of the edge and what was read there.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct EdgeSample {
    /// Position on the edge, pixel-edge coordinates.
    pub x: f64,
    /// See `x`.
    pub y: f64,
    /// Inward unit normal (towards the specimen), x component.
    pub normal_x: f64,
    /// Inward unit normal, y component (y down).
    pub normal_y: f64,
    /// Fringe order carried to the edge; `None` when a sample had no value.
    pub order: Option<f64>,
    /// |σ_t| = N · f_σ / h at the edge, MPa; `None` with `order`.
    pub stress_mpa: Option<f64>,
    /// Whether a beyond-range pixel lies between the edge and the second sample.
    pub beyond_range: bool,
    /// Which stretch of edge the point lies on: each closed outline (or open one, where the
    /// mask meets the photo's border) in the order walked; 0 along a polyline.
    pub contour: usize,
    /// Distance along the edge from its first point, px: summed between neighbouring points
    /// of one contour, each contour going on where the one before ended.
    pub along_px: f64,
}

/// The free-edge stress of a map along an edge.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BoundaryStress {
    /// Largest |σ_t| along the edge, MPa; only a lower bound when `beyond_range`.
    pub max_stress_mpa: f64,
    /// Where it is, pixel-edge coordinates.
    pub x: f64,
    /// See `x`.
    pub y: f64,
    /// Fringe order carried to the edge there.
    pub order: f64,
    /// K_t = σ_max / σ_nom when a nominal stress was given (a lower bound with `beyond_range`).
    pub kt: Option<f64>,
    /// The nominal stress given, MPa.
    pub nominal_stress_mpa: Option<f64>,
    /// True when beyond-range pixels touch the sampled edge: the maximum may be higher there.
    pub beyond_range: bool,
    /// Same as `beyond_range`: `max_stress_mpa` and `kt` are at least, not exactly, the peak.
    pub max_is_lower_bound: bool,
    /// Edge points sampled, and how many of them gave a value.
    pub edge_points: usize,
    /// See `edge_points`.
    pub valued_points: usize,
    /// Material fringe value used, N/mm per fringe.
    pub fringe_value_n_per_mm: f64,
    /// Model thickness used, mm.
    pub thickness_mm: f64,
    /// Insets of the two samples, px ([`SAMPLE_INSET_PX`], [`SECOND_INSET_PX`]).
    pub sample_insets_px: [f64; 2],
    /// Results support, and do not replace, engineering judgement.
    pub caution: String,
    /// The photo's scale, mm per pixel, when one was given ([`BoundaryStress::with_scale`]).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub mm_per_px: Option<f64>,
    /// `x` in mm from the photo's left edge, with a scale.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub x_mm: Option<f64>,
    /// `y` in mm from the photo's top edge, with a scale.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub y_mm: Option<f64>,
    /// Every edge point, in order along each contour of the outline or along the polyline.
    #[serde(skip)]
    pub samples: Vec<EdgeSample>,
}

impl BoundaryStress {
    /// The same result with positions also in millimetres (`mm_per_px`, `x_mm`, `y_mm`; the
    /// edge CSV gains `x_mm,y_mm,along_mm`).
    pub fn with_scale(self, scale: Scale) -> BoundaryStress {
        BoundaryStress {
            mm_per_px: Some(scale.mm_per_px()),
            x_mm: Some(scale.mm(self.x)),
            y_mm: Some(scale.mm(self.y)),
            ..self
        }
    }
}

/// Samples the free-edge stress of `map` along `path` through `law`; with a nominal stress
/// (MPa, positive) also K_t. Refused naming `nominal_stress_mpa`, `polyline` (fewer than two
/// points, a point off the photo, no specimen on one side) or the edge's field when no edge
/// point has a value.
pub fn boundary_stress(
    map: &OrderMap,
    law: &StressOpticLaw,
    nominal_stress_mpa: Option<f64>,
    path: &EdgePath,
) -> CoreResult<BoundaryStress> {
    let nominal = nominal_stress_mpa
        .map(|s| positive("nominal_stress_mpa", s))
        .transpose()?;
    let grid = Grid { map };
    let edge = match path {
        EdgePath::Outline => grid.outline(),
        EdgePath::Polyline(points) => grid.polyline(points)?,
    };
    let mut samples: Vec<EdgeSample> = edge
        .into_iter()
        .map(|(at, normal, contour)| grid.sample(at, normal, contour, law))
        .collect();
    for i in 1..samples.len() {
        let (before, this) = (samples[i - 1], samples[i]);
        let step = if before.contour == this.contour {
            (this.x - before.x).hypot(this.y - before.y)
        } else {
            0.0
        };
        samples[i].along_px = before.along_px + step;
    }
    let peak = samples
        .iter()
        .filter_map(|s| Some((s, s.stress_mpa?)))
        .fold(
            None,
            |best: Option<(&EdgeSample, f64)>, (s, v)| match best {
                Some((_, b)) if b >= v => best,
                _ => Some((s, v)),
            },
        );
    let Some((at, max_stress_mpa)) = peak else {
        return Err(CoreError::invalid(
            path.field(),
            format!(
                "no valued pixels along the edge ({} edge points sampled {SAMPLE_INSET_PX} and \
                 {SECOND_INSET_PX} px inside it)",
                samples.len()
            ),
        ));
    };
    let beyond_range = samples.iter().any(|s| s.beyond_range);
    Ok(BoundaryStress {
        max_stress_mpa,
        x: at.x,
        y: at.y,
        order: at.order.unwrap_or(f64::NAN),
        kt: nominal
            .map(|s| stress_concentration_factor(max_stress_mpa, s))
            .transpose()?,
        nominal_stress_mpa: nominal,
        beyond_range,
        max_is_lower_bound: beyond_range,
        edge_points: samples.len(),
        valued_points: samples.iter().filter(|s| s.order.is_some()).count(),
        fringe_value_n_per_mm: law.fringe_value_n_per_mm,
        thickness_mm: law.thickness_mm,
        sample_insets_px: [SAMPLE_INSET_PX, SECOND_INSET_PX],
        caution: STRESS_CAUTION.to_string(),
        mm_per_px: None,
        x_mm: None,
        y_mm: None,
        samples,
    })
}

/// The edge as CSV: header `x,y,normal_x,normal_y,order,stress_mpa,beyond_range,contour,along_px`
/// and, with a scale, `x_mm,y_mm,along_mm`; one line per edge point in order along the edge
/// (empty order and stress where it has no value; beyond_range 0 or 1).
pub fn edge_csv(result: &BoundaryStress) -> Vec<u8> {
    let mut out = Vec::with_capacity(64 * (result.samples.len() + 1));
    out.extend_from_slice(b"x,y,normal_x,normal_y,order,stress_mpa,beyond_range,contour,along_px");
    if result.mm_per_px.is_some() {
        out.extend_from_slice(b",x_mm,y_mm,along_mm");
    }
    out.push(b'\n');
    for s in &result.samples {
        let number = |v: Option<f64>| v.map_or(String::new(), |v| format!("{v:.4}"));
        let _ = write!(
            out,
            "{:.2},{:.2},{:.4},{:.4},{},{},{},{},{:.2}",
            s.x,
            s.y,
            s.normal_x,
            s.normal_y,
            number(s.order),
            number(s.stress_mpa),
            u8::from(s.beyond_range),
            s.contour,
            s.along_px
        );
        if let Some(mm) = result.mm_per_px {
            let _ = write!(
                out,
                ",{:.4},{:.4},{:.4}",
                s.x * mm,
                s.y * mm,
                s.along_px * mm
            );
        }
        out.push(b'\n');
    }
    out
}

/// Pixel access to a map for edge sampling.
struct Grid<'a> {
    map: &'a OrderMap,
}

impl Grid<'_> {
    fn flags(&self, x: i64, y: i64) -> Option<PixelFlags> {
        let (w, h) = (i64::from(self.map.width), i64::from(self.map.height));
        ((0..w).contains(&x) && (0..h).contains(&y)).then(|| self.map.flags[(y * w + x) as usize])
    }

    /// Whether pixel (x, y) is specimen; `None` off the photo.
    fn specimen(&self, x: i64, y: i64) -> Option<bool> {
        self.flags(x, y).map(|f| !f.has(PixelFlags::OUTSIDE_MASK))
    }

    /// Points on the mask's edges with their inward normals and contour numbers, in order
    /// along each edge: every specimen pixel with a non-specimen 4-neighbour on the photo,
    /// moved half a pixel outwards from its centre. The edges are walked along the cracks
    /// between specimen and other pixels, the specimen on the right (outer edges run clockwise
    /// on screen, holes the other way; where two specimen pixels touch only at a corner the
    /// walk turns right, keeping to one of them). Open stretches, which end where the mask meets
    /// the photo's border, are walked first, from the border. A pixel is taken where the walk
    /// first meets it. Memory: one byte a pixel besides the points.
    fn outline(&self) -> Vec<(PixelPoint, [f64; 2], usize)> {
        /// Unit steps of the four directions a crack runs in: east, south, west, north (y down).
        const FORWARD: [(i64, i64); 4] = [(1, 0), (0, 1), (-1, 0), (0, -1)];
        /// Where a crack of each direction starts, from its pixel's top-left corner.
        const START: [(i64, i64); 4] = [(0, 0), (1, 0), (1, 1), (0, 1)];
        /// The bit of `state` that marks a pixel taken.
        const TAKEN: u8 = 1 << 4;
        let (w, h) = (i64::from(self.map.width), i64::from(self.map.height));
        let is = |x: i64, y: i64, specimen: bool| self.specimen(x, y) == Some(specimen);
        // Crack (x, y, d): pixel (x, y) is specimen and its neighbour on the crack's left (the
        // side away from the specimen) is a non-specimen pixel on the photo.
        let crack = |x: i64, y: i64, d: usize| {
            let (rx, ry) = FORWARD[(d + 1) % 4];
            is(x, y, true) && is(x - rx, y - ry, false)
        };
        let from_border = |x: i64, y: i64, d: usize| {
            let (sx, sy) = (x + START[d].0, y + START[d].1);
            sx == 0 || sy == 0 || sx == w || sy == h
        };
        // Per pixel: bits 0–3, its crack of that direction walked; TAKEN.
        let mut state = vec![0u8; (w * h) as usize];
        let mut edge = Vec::new();
        let mut contour = 0;
        // First the open stretches, which start at the photo's border (only the pixels of its
        // outer rows and columns have cracks starting there), then every closed one.
        let border_pixels: Vec<(i64, i64)> = (0..h)
            .flat_map(|y| {
                let xs: Vec<i64> = if y == 0 || y == h - 1 {
                    (0..w).collect()
                } else {
                    vec![0, w - 1]
                };
                xs.into_iter().map(move |x| (x, y))
            })
            .collect();
        let every_pixel = (0..h).flat_map(|y| (0..w).map(move |x| (x, y)));
        let open_starts = border_pixels.into_iter().map(|p| (p, true));
        for ((x0, y0), open_only) in open_starts.chain(every_pixel.map(|p| (p, false))) {
            for d0 in 0..4 {
                let walked = state[(y0 * w + x0) as usize] & (1 << d0) != 0;
                if walked || !crack(x0, y0, d0) || (open_only && !from_border(x0, y0, d0)) {
                    continue;
                }
                let before = edge.len();
                let (mut x, mut y, mut d) = (x0, y0, d0);
                loop {
                    let i = (y * w + x) as usize;
                    state[i] |= 1 << d;
                    if state[i] & TAKEN == 0 {
                        state[i] |= TAKEN;
                        if let Some(n) = self.inward_normal(x, y) {
                            let point = PixelPoint {
                                x: x as f64 + 0.5 - 0.5 * n[0],
                                y: y as f64 + 0.5 - 0.5 * n[1],
                            };
                            edge.push((point, n, contour));
                        }
                    }
                    // The pixels ahead of the crack's end: on the specimen's side, and beyond
                    // it on the other. Right turn first, then straight on, then left.
                    let (fx, fy) = FORWARD[d];
                    let (rx, ry) = FORWARD[(d + 1) % 4];
                    let ahead = (x + fx, y + fy);
                    let across = (ahead.0 - rx, ahead.1 - ry);
                    let next = if is(ahead.0, ahead.1, false) {
                        (x, y, (d + 1) % 4)
                    } else if is(ahead.0, ahead.1, true) && is(across.0, across.1, false) {
                        (ahead.0, ahead.1, d)
                    } else if is(across.0, across.1, true) {
                        (across.0, across.1, (d + 3) % 4)
                    } else {
                        break; // the photo's border
                    };
                    if state[(next.1 * w + next.0) as usize] & (1 << next.2) != 0 {
                        break; // round
                    }
                    (x, y, d) = next;
                }
                if edge.len() > before {
                    contour += 1;
                }
            }
        }
        edge
    }

    /// Direction from pixel (x, y) to the centroid of the specimen pixels within
    /// [`NORMAL_RADIUS_PX`]; positions off the photo count as their nearest pixel on it, so
    /// the photo's border bends no normal. `None` when the centroid is the pixel itself.
    fn inward_normal(&self, x: i64, y: i64) -> Option<[f64; 2]> {
        let (w, h) = (i64::from(self.map.width), i64::from(self.map.height));
        let r = NORMAL_RADIUS_PX;
        let (mut sx, mut sy) = (0.0, 0.0);
        for dy in -r..=r {
            for dx in -r..=r {
                let inside = dx * dx + dy * dy <= r * r
                    && self.specimen((x + dx).clamp(0, w - 1), (y + dy).clamp(0, h - 1))
                        == Some(true);
                if inside {
                    sx += dx as f64;
                    sy += dy as f64;
                }
            }
        }
        let len = sx.hypot(sy);
        (len > 1e-9).then(|| [sx / len, sy / len])
    }

    /// Points every [`POLYLINE_STEP_PX`] along `points`, with the normal of their segment
    /// turned to the side the specimen lies on.
    fn polyline(&self, points: &[PixelPoint]) -> CoreResult<Vec<(PixelPoint, [f64; 2], usize)>> {
        let (w, h) = (f64::from(self.map.width), f64::from(self.map.height));
        if points.len() < 2 {
            return Err(CoreError::invalid(
                "polyline",
                format!("needs at least two points, got {}", points.len()),
            ));
        }
        if let Some((i, p)) = points
            .iter()
            .enumerate()
            .find(|(_, p)| !((0.0..=w).contains(&p.x) && (0.0..=h).contains(&p.y)))
        {
            return Err(CoreError::invalid(
                "polyline",
                format!(
                    "point {i} at ({}, {}) lies outside the {w}×{h} photo",
                    p.x, p.y
                ),
            ));
        }
        let mut edge = Vec::new();
        for pair in points.windows(2) {
            let (a, b) = (pair[0], pair[1]);
            let len = (b.x - a.x).hypot(b.y - a.y);
            if len == 0.0 {
                continue;
            }
            // The left-hand normal as seen on screen (y down) while walking from a to b.
            let normal = [(b.y - a.y) / len, -(b.x - a.x) / len];
            let steps = (len / POLYLINE_STEP_PX).ceil() as usize;
            edge.extend((0..steps).map(|k| {
                let t = k as f64 / steps as f64;
                let at = PixelPoint {
                    x: a.x + t * (b.x - a.x),
                    y: a.y + t * (b.y - a.y),
                };
                (at, normal)
            }));
        }
        let last = points[points.len() - 1];
        if let Some(&(_, normal)) = edge.last() {
            edge.push((last, normal));
        }
        let on_specimen = |side: f64| {
            edge.iter()
                .filter(|(at, n)| {
                    let (x, y) = (
                        at.x + side * SAMPLE_INSET_PX * n[0],
                        at.y + side * SAMPLE_INSET_PX * n[1],
                    );
                    self.specimen(x.floor() as i64, y.floor() as i64) == Some(true)
                })
                .count()
        };
        let (left, right) = (on_specimen(1.0), on_specimen(-1.0));
        if left == right {
            return Err(CoreError::invalid(
                "polyline",
                "has as much specimen on one side as on the other; draw it along the \
                 specimen's edge, with the specimen (the mask) on one side",
            ));
        }
        let side = if left > right { 1.0 } else { -1.0 };
        Ok(edge
            .into_iter()
            .map(|(at, n)| (at, [side * n[0], side * n[1]], 0))
            .collect())
    }

    /// The order at `at` (pixel-edge coordinates), bilinear between the four nearest pixel
    /// centres; `None` if one of them is off the photo or has no value.
    fn order_at(&self, at: [f64; 2]) -> Option<f64> {
        let (fx, fy) = (at[0] - 0.5, at[1] - 0.5);
        let (x0, y0) = (fx.floor(), fy.floor());
        let (tx, ty) = (fx - x0, fy - y0);
        let mut sum = 0.0;
        for (dx, dy, weight) in [
            (0, 0, (1.0 - tx) * (1.0 - ty)),
            (1, 0, tx * (1.0 - ty)),
            (0, 1, (1.0 - tx) * ty),
            (1, 1, tx * ty),
        ] {
            let (x, y) = (x0 as i64 + dx, y0 as i64 + dy);
            self.flags(x, y)?;
            let order = self.map.order[(y * i64::from(self.map.width) + x) as usize];
            if !order.is_finite() {
                return None;
            }
            sum += weight * f64::from(order);
        }
        Some(sum)
    }

    /// Reads the edge point `at` with inward normal `n` on contour `contour` (`along_px` is
    /// left 0 for the caller).
    fn sample(
        &self,
        at: PixelPoint,
        n: [f64; 2],
        contour: usize,
        law: &StressOpticLaw,
    ) -> EdgeSample {
        let along = |d: f64| [at.x + d * n[0], at.y + d * n[1]];
        let beyond_range = (0..=(2.0 * SECOND_INSET_PX) as usize).any(|k| {
            let p = along(0.5 * k as f64);
            self.flags(p[0].floor() as i64, p[1].floor() as i64)
                .is_some_and(|f| f.has(PixelFlags::BEYOND_RANGE))
        });
        let order = self
            .order_at(along(SAMPLE_INSET_PX))
            .zip(self.order_at(along(SECOND_INSET_PX)))
            .map(|(near, far)| {
                let slope = (near - far) / (SECOND_INSET_PX - SAMPLE_INSET_PX);
                (near + slope * SAMPLE_INSET_PX).max(0.0)
            });
        EdgeSample {
            x: at.x,
            y: at.y,
            normal_x: n[0],
            normal_y: n[1],
            order,
            stress_mpa: order.map(|n| law.stress_difference_mpa(n)),
            beyond_range,
            contour,
            along_px: 0.0,
        }
    }
}
