//! The solver behind [`crate::order_map::map_orders`].
//!
//! 1. **Candidates.** Each specimen pixel's CIELAB colour is compared with the table on a
//!    0.02-fringe grid; the local minima of that distance curve are the pixel's candidate
//!    orders (colours repeat, so there are several), each refined to sub-step precision.
//!    One extra label, *beyond range*, stands for orders past the end of the table.
//! 2. **Semi-global aggregation over candidates.** Costs are aggregated along eight scan
//!    directions, as in semi-global matching, but over each pixel's few candidates rather
//!    than a dense label range, and with a transition cost built for smooth ramps: a change of
//!    order up to the maximum gradient per pixel is free, up to twice that costs a little, and
//!    anything larger is a jump. Evidence from far away (unambiguous low orders, the dark
//!    zero-order regions inside the specimen, hints) travels along every path, so no single
//!    seed decides a region.
//! 3. **Local refinement** of the winning candidate on the table's own grid, then flags:
//!    poor colour match, too steep a field, isolated jumps, or too small an ambiguity margin
//!    make a pixel *unreliable*; the winning label *beyond range* flags it as such.
//! 4. **Exposure compensation** (optional): a per-channel gain and a radial vignetting term on
//!    linear light are fitted on confident pixels of a first pass, and the pass is repeated.
//!
//! Distances inside the search are ΔE\*ab with the lightness difference weighted by
//! [`LIGHTNESS_WEIGHT`] (exposure drift moves L\* most); reported residuals are plain ΔE\*ab.
//! The preliminary pass that feeds the exposure fit weights lightness even less and has no
//! *beyond range* label, so that a photo much darker than the calibration still finds its
//! orders.

use palette::LinSrgb;
use rayon::prelude::*;

use crate::calibration::CalibrationTable;
use crate::colour::{delta_e_ab, lab_from_linear, linear_from_lab, Lab, LabImage, Photo};
use crate::error::{CoreError, CoreResult};
use crate::exposure::{radius_sq, ExposureCorrection};
use crate::geometry::Mask;
use crate::geometry::PixelPoint;
use crate::order_map::{MapOptions, MapStatistics, OrderHint, OrderMap, PixelFlags};

/// Colour candidates kept per pixel.
const CANDIDATES: usize = 4;
/// Labels per pixel: the candidates plus *beyond range*.
const LABELS: usize = CANDIDATES + 1;
/// Index of the *beyond range* label.
const BEYOND: usize = CANDIDATES;
/// Order spacing of the candidate search, fringes.
const SEARCH_STEP: f64 = 0.02;
/// Weight of ΔL\* in the search distance (a\* and b\* have weight 1).
const LIGHTNESS_WEIGHT: f32 = 0.6;
/// Weight of ΔL\* in the local refinement of the chosen candidate.
const REFINE_LIGHTNESS_WEIGHT: f32 = 2.5;
/// Least CIELAB chroma of the table colour of a pixel used in the exposure fit.
const FIT_MIN_CHROMA: f32 = 20.0;
/// Weight of ΔL\* in the preliminary pass that feeds the exposure fit.
const PRELIMINARY_LIGHTNESS_WEIGHT: f32 = 0.25;

/// Which solver pass: the preliminary one feeding the exposure fit, or the final one.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Stage {
    Preliminary,
    Final,
}
/// Data costs are capped here (ΔE units) so that one bad pixel cannot dominate a path.
const COST_CAP: f32 = 25.0;
/// Data cost of the *beyond range* label (ΔE units): past the table colours wash out to pale
/// tints that match some high table order only loosely; a region whose best match is worse
/// than this, and that continues the top of the table, is taken as beyond range.
const BEYOND_COST: f32 = 6.0;
/// Cost per fringe of a change of order within the maximum gradient: small, so that ramps pass
/// freely but, of two equally good candidates, the one closer to the neighbours wins.
const RAMP_COST: f32 = 6.0;
/// The *beyond range* cost is at least this multiple of the photo's median best match.
const BEYOND_TO_TYPICAL: f32 = 4.0;
/// Cost of a change of order between one and two maximum gradients.
const SLOPE_PENALTY: f32 = 3.0;
/// Cost of a larger change of order (a jump between candidate chains).
const JUMP_PENALTY: f32 = 24.0;
/// Extra cost of a label that disagrees with a hint by more than [`HINT_TOLERANCE`] fringes.
const HINT_PENALTY: f32 = 400.0;
/// How far a label may lie from a hint's order without penalty, fringes.
const HINT_TOLERANCE: f64 = 0.2;
/// Layers grown by the repair of flagged pixels next to valued ones.
const REPAIR_LAYERS: usize = 12;
/// Steepest field the repair accepts, fringes per pixel.
const REPAIR_MAX_GRADIENT: f64 = 0.35;
/// Largest ΔE\*ab between a repaired pixel and its footprint-averaged table colour.
const REPAIR_RESIDUAL: f32 = 6.0;
/// Orders this close to the top of the table (fringes) next to *beyond range* pixels are
/// taken as beyond range too.
const TOP_GUARD: f32 = 0.25;
/// Orders within this many fringes of the table's top may be aliases of orders beyond it.
const ALIAS_RANGE: f32 = 1.0;
/// Half-width of the window over which residuals are averaged for the alias check, pixels.
const ALIAS_WINDOW: usize = 4;
/// A local mean residual above this multiple of the photo's median marks a possible alias.
const ALIAS_RESIDUAL_RATIO: f32 = 2.5;
/// ... and never below this many ΔE*ab.
const ALIAS_RESIDUAL_MIN: f32 = 2.5;
/// How many pixel layers that rule may spread.
const TOP_GUARD_LAYERS: usize = 4;
/// Largest maximum gradient used on block means, fringes per working pixel: steeper would
/// let a chain jump to the next colour repeat unpenalised.
const COARSE_MAX_GRADIENT: f64 = 0.45;
/// Radius of the final order smoothing window, pixels.
const SMOOTH_RADIUS: usize = 2;
/// Number of scan directions summed by the aggregation.
const DIRECTIONS: f32 = 8.0;
/// A pixel whose best colour match is worse than this (ΔE\*ab) is unreliable.
const RESIDUAL_LIMIT: f32 = 10.0;
/// Valued regions (connected without jumps) smaller than this share of the specimen are
/// taken as wrong islands and flagged unreliable.
const ISLAND_SHARE: f64 = 0.005;
/// ... but never smaller than this many pixels.
const ISLAND_MIN_PIXELS: usize = 50;
/// Aggregated ambiguity margin (ΔE units per direction) below which a pixel is unreliable.
const MARGIN_LIMIT: f32 = 0.35;

/// The table flattened for fast search: CIELAB components in separate arrays.
struct SearchTable {
    step: f64,
    lightness_weight: f32,
    l: Vec<f32>,
    a: Vec<f32>,
    b: Vec<f32>,
}

impl SearchTable {
    /// Samples `table` every `step` fringes up to `max_order`.
    fn new(table: &CalibrationTable, step: f64, max_order: f64, lightness_weight: f32) -> Self {
        let n = (max_order / step + 1e-9).floor() as usize + 1;
        let mut t = SearchTable {
            step,
            lightness_weight,
            l: Vec::with_capacity(n),
            a: Vec::with_capacity(n),
            b: Vec::with_capacity(n),
        };
        for i in 0..n {
            let c = table.colour_at(i as f64 * step);
            t.l.push(c.l);
            t.a.push(c.a);
            t.b.push(c.b);
        }
        t
    }

    fn len(&self) -> usize {
        self.l.len()
    }

    fn max_order(&self) -> f64 {
        (self.len() - 1) as f64 * self.step
    }

    /// Search distance between `c` and entry `i`.
    #[inline]
    fn distance(&self, c: Lab, i: usize) -> f32 {
        self.distance_sq(c, i).sqrt()
    }

    /// Squared search distance (cheaper for scanning; same minima).
    #[inline]
    fn distance_sq(&self, c: Lab, i: usize) -> f32 {
        let dl = self.lightness_weight * (c.l - self.l[i]);
        let (da, db) = (c.a - self.a[i], c.b - self.b[i]);
        dl * dl + da * da + db * db
    }

    /// Best order in entries `lo..=hi` with a parabolic sub-step fit: (order, distance).
    fn best_in(&self, c: Lab, lo: usize, hi: usize) -> (f64, f32) {
        let hi = hi.min(self.len() - 1);
        let (mut best, mut best_d) = (lo, f32::INFINITY);
        for i in lo..=hi {
            let d = self.distance_sq(c, i);
            if d < best_d {
                best = i;
                best_d = d;
            }
        }
        self.parabolic(c, best, best_d.sqrt())
    }

    /// Refines a discrete minimum at entry `i` with a parabola through its neighbours.
    fn parabolic(&self, c: Lab, i: usize, d: f32) -> (f64, f32) {
        if i == 0 || i + 1 >= self.len() {
            return (i as f64 * self.step, d);
        }
        let (dm, dp) = (self.distance(c, i - 1), self.distance(c, i + 1));
        let denom = dm - 2.0 * d + dp;
        if denom <= 1e-6 {
            return (i as f64 * self.step, d);
        }
        let shift = (0.5 * (dm - dp) / denom).clamp(-0.5, 0.5);
        let value = d - 0.25 * (dm - dp) * shift;
        ((i as f64 + f64::from(shift)) * self.step, value.max(0.0))
    }
}

/// Per-pixel labels: candidate orders (the last slot is *beyond range*) and their data costs.
#[derive(Clone, Copy)]
struct Labels {
    order: [f32; LABELS],
    cost: [f32; LABELS],
}

const NO_LABELS: Labels = Labels {
    order: [f32::NAN; LABELS],
    cost: [f32::INFINITY; LABELS],
};

/// Candidate orders of one colour: the local minima of its distance curve.
fn candidates(search: &SearchTable, c: Lab, beyond_order: f32, beyond_cost: f32) -> Labels {
    let n = search.len();
    let mut d = vec![0f32; n];
    for (i, slot) in d.iter_mut().enumerate() {
        *slot = search.distance_sq(c, i);
    }
    let mut best: [(f32, usize); CANDIDATES] = [(f32::INFINITY, usize::MAX); CANDIDATES];
    for i in 0..n {
        let left = if i == 0 { f32::INFINITY } else { d[i - 1] };
        let right = if i + 1 == n { f32::INFINITY } else { d[i + 1] };
        if d[i] <= left && d[i] < right && d[i] < best[CANDIDATES - 1].0 {
            best[CANDIDATES - 1] = (d[i], i);
            best.sort_by(|x, y| x.0.total_cmp(&y.0));
        }
    }
    let mut labels = NO_LABELS;
    for (slot, (dist, i)) in best.iter().enumerate() {
        if *i != usize::MAX {
            let (order, value) = search.parabolic(c, *i, dist.sqrt());
            labels.order[slot] = order as f32;
            labels.cost[slot] = value.min(COST_CAP);
        }
    }
    labels.order[BEYOND] = beyond_order;
    labels.cost[BEYOND] = beyond_cost;
    labels
}

/// Transition cost between label orders `a` and `b` of neighbouring pixels.
#[inline]
fn transition(a: f32, b: f32, step_gradient: f32, top: f32) -> f32 {
    if a.is_nan() || b.is_nan() {
        return f32::INFINITY;
    }
    // Orders at the top of the table may continue into *beyond range* (and back) freely.
    let (a, b) = (a.min(top + step_gradient), b.min(top + step_gradient));
    let change = (a - b).abs();
    if change <= step_gradient {
        RAMP_COST * change
    } else if change <= 2.0 * step_gradient {
        SLOPE_PENALTY
    } else {
        JUMP_PENALTY
    }
}

/// One step along a scan path: the path cost of each label at a pixel, given the path costs
/// at its predecessor on the path (none at the start of a path).
#[inline]
fn path_step(
    here: &Labels,
    previous: Option<(&[f32; LABELS], &Labels)>,
    step_gradient: f32,
    top: f32,
) -> [f32; LABELS] {
    let mut path = here.cost;
    if let Some((lp, before)) = previous {
        let floor = lp.iter().copied().fold(f32::INFINITY, f32::min);
        for (k, slot) in path.iter_mut().enumerate() {
            let best = lp
                .iter()
                .zip(&before.order)
                .map(|(cost, order)| cost + transition(here.order[k], *order, step_gradient, top))
                .fold(f32::INFINITY, f32::min);
            *slot += best.min(floor + JUMP_PENALTY) - floor;
        }
    }
    path
}

/// Sums, for every pixel and label, the path costs along eight scan directions: left and
/// right along each row (rows in parallel), and down and up the image in two row sweeps
/// that carry the vertical and both diagonal directions (pixels of a row in parallel).
fn aggregate(
    labels: &[Labels],
    inside: &[bool],
    width: usize,
    height: usize,
    gradient: f32,
    top: f32,
) -> Vec<[f32; LABELS]> {
    let mut total = vec![[0f32; LABELS]; labels.len()];
    total
        .par_chunks_mut(width)
        .enumerate()
        .for_each(|(y, row)| {
            let base = y * width;
            for forward in [true, false] {
                let mut previous: Option<([f32; LABELS], usize)> = None;
                for i in 0..width {
                    let x = if forward { i } else { width - 1 - i };
                    let p = base + x;
                    if !inside[p] {
                        previous = None;
                        continue;
                    }
                    let path = path_step(
                        &labels[p],
                        previous.as_ref().map(|(lp, q)| (lp, &labels[*q])),
                        gradient,
                        top,
                    );
                    for (t, v) in row[x].iter_mut().zip(&path) {
                        *t += v;
                    }
                    previous = Some((path, p));
                }
            }
        });
    // Predecessor column offsets of the three sweep directions and their step gradients.
    let sweeps: [(i64, f32); 3] = [
        (0, gradient),
        (1, gradient * std::f32::consts::SQRT_2),
        (-1, gradient * std::f32::consts::SQRT_2),
    ];
    const NO_PATH: [f32; LABELS] = [f32::NAN; LABELS];
    for downward in [true, false] {
        let mut previous: Vec<[[f32; LABELS]; 3]> = vec![[NO_PATH; 3]; width];
        for k in 0..height {
            let y = if downward { k } else { height - 1 - k };
            let before_y = if downward { y.wrapping_sub(1) } else { y + 1 };
            let current: Vec<[[f32; LABELS]; 3]> = (0..width)
                .into_par_iter()
                .map(|x| {
                    let p = y * width + x;
                    if !inside[p] {
                        return [NO_PATH; 3];
                    }
                    let mut out = [NO_PATH; 3];
                    for (d, &(dx, step_gradient)) in sweeps.iter().enumerate() {
                        let px = x as i64 - dx;
                        let before = (k > 0
                            && px >= 0
                            && (px as usize) < width
                            && !previous[px as usize][d][0].is_nan())
                        .then(|| {
                            (
                                &previous[px as usize][d],
                                &labels[before_y * width + px as usize],
                            )
                        });
                        out[d] = path_step(&labels[p], before, step_gradient, top);
                    }
                    out
                })
                .collect();
            for (slot, paths) in total[y * width..(y + 1) * width].iter_mut().zip(&current) {
                for path in paths.iter().filter(|path| !path[0].is_nan()) {
                    for (t, v) in slot.iter_mut().zip(path) {
                        *t += v;
                    }
                }
            }
            previous = current;
        }
    }
    total
}

/// One solver pass on a CIELAB image.
struct Pass {
    order: Vec<f32>,
    residual: Vec<f32>,
    margin: Vec<f32>,
    flags: Vec<PixelFlags>,
}

fn solve_pass(
    lab: &LabImage,
    inside: &[bool],
    table: &CalibrationTable,
    max_order: f64,
    options: &MapOptions,
    stage: Stage,
) -> Pass {
    let (width, height) = (lab.width as usize, lab.height as usize);
    let (lightness_weight, beyond_cost) = match stage {
        Stage::Preliminary => (PRELIMINARY_LIGHTNESS_WEIGHT, f32::INFINITY),
        Stage::Final => (LIGHTNESS_WEIGHT, BEYOND_COST),
    };
    let search = SearchTable::new(table, SEARCH_STEP, max_order, lightness_weight);
    let fine = SearchTable::new(
        table,
        table.order_step,
        max_order,
        REFINE_LIGHTNESS_WEIGHT.max(lightness_weight),
    );
    let top = search.max_order() as f32;
    let gradient = options.max_gradient as f32;
    let beyond_order = top + 2.0 * gradient;

    let mut labels: Vec<Labels> = lab
        .data
        .par_iter()
        .zip(inside.par_iter())
        .map(|(c, &ins)| {
            if ins {
                candidates(&search, *c, beyond_order, beyond_cost)
            } else {
                NO_LABELS
            }
        })
        .collect();
    if beyond_cost.is_finite() {
        // Noisy or compressed photos match the table less well everywhere: scale the cost of
        // *beyond range* with the photo's typical best match.
        let mut best: Vec<f32> = labels
            .iter()
            .step_by((labels.len() / 20_000).max(1))
            .map(|l| l.cost[0])
            .filter(|c| c.is_finite())
            .collect();
        if !best.is_empty() {
            let typical = median_f32(&mut best);
            let scaled = beyond_cost.max(BEYOND_TO_TYPICAL * typical);
            labels
                .par_iter_mut()
                .filter(|l| l.cost[BEYOND].is_finite())
                .for_each(|l| l.cost[BEYOND] = scaled);
        }
    }
    for hint in &options.hints {
        if let Some((x, y)) = hint.at.pixel(lab.width, lab.height) {
            let p = y as usize * width + x as usize;
            if !inside[p] {
                continue;
            }
            let l = &mut labels[p];
            // Make sure the hinted order is a candidate, then penalise every label far from it.
            let (hint_order, hint_cost) = {
                let centre = (hint.order / search.step).round() as usize;
                let reach = (HINT_TOLERANCE / search.step).ceil() as usize;
                search.best_in(lab.data[p], centre.saturating_sub(reach), centre + reach)
            };
            if hint.order <= search.max_order() {
                l.order[CANDIDATES - 1] = hint_order as f32;
                l.cost[CANDIDATES - 1] = hint_cost.min(COST_CAP);
            }
            for k in 0..LABELS {
                if (f64::from(l.order[k].min(beyond_order)) - hint.order).abs() > HINT_TOLERANCE {
                    l.cost[k] += HINT_PENALTY;
                }
            }
        }
    }

    let total = aggregate(&labels, inside, width, height, gradient, top);

    let n = lab.data.len();
    let mut pass = Pass {
        order: vec![f32::NAN; n],
        residual: vec![f32::NAN; n],
        margin: vec![f32::NAN; n],
        flags: vec![PixelFlags::default(); n],
    };
    let fine_reach = (2.0 * SEARCH_STEP / fine.step).ceil() as usize;
    let directions = DIRECTIONS;
    pass.order
        .par_iter_mut()
        .zip(pass.residual.par_iter_mut())
        .zip(pass.margin.par_iter_mut())
        .zip(pass.flags.par_iter_mut())
        .enumerate()
        .for_each(|(p, (((order, residual), margin), flags))| {
            if !inside[p] {
                flags.0 |= PixelFlags::OUTSIDE_MASK;
                return;
            }
            let s = &total[p];
            let l = &labels[p];
            let best = (0..LABELS)
                .filter(|k| s[*k].is_finite())
                .min_by(|a, b| s[*a].total_cmp(&s[*b]))
                .unwrap_or(BEYOND);
            let chosen = l.order[best];
            let rival = (0..LABELS)
                .filter(|k| {
                    s[*k].is_finite()
                        && (l.order[*k].min(beyond_order) - chosen.min(beyond_order)).abs() > 0.5
                })
                .map(|k| s[k])
                .fold(f32::INFINITY, f32::min);
            *margin = ((rival - s[best]) / directions).min(COST_CAP);
            if best == BEYOND {
                flags.0 |= PixelFlags::BEYOND_RANGE;
                return;
            }
            let centre = (f64::from(chosen) / fine.step).round() as usize;
            let (refined, _) = fine.best_in(
                lab.data[p],
                centre.saturating_sub(fine_reach),
                centre + fine_reach,
            );
            *order = refined as f32;
            *residual = delta_e_ab(lab.data[p], table.colour_at(refined));
            if *residual > RESIDUAL_LIMIT || *margin < MARGIN_LIMIT {
                flags.0 |= PixelFlags::UNRELIABLE;
            }
        });
    flag_steep_and_isolated(&mut pass, width, height, gradient);
    if stage == Stage::Final {
        repair_steep_edges(&mut pass, lab, table, max_order, width, height);
        flag_poor_high_matches(&mut pass, top, width, height);
        extend_beyond_range(&mut pass, top, width, height);
    }
    smooth(&mut pass, width, height, gradient);
    for (o, f) in pass.order.iter_mut().zip(&pass.flags) {
        if f.0 != 0 {
            *o = f32::NAN;
        }
    }
    pass
}

/// Flags pixels where the field is steeper than the maximum gradient and both sides of every
/// jump between neighbours, then flags small islands cut off by jumps or flags.
fn flag_steep_and_isolated(pass: &mut Pass, width: usize, height: usize, gradient: f32) {
    let order = &pass.order;
    let jump = 2.5 * gradient;
    let flags_before = pass.flags.clone();
    let valued = |p: usize| flags_before[p].0 == 0 && order[p].is_finite();
    pass.flags
        .par_chunks_mut(width)
        .enumerate()
        .for_each(|(y, row)| {
            for x in 0..width {
                let p = y * width + x;
                if !valued(p) {
                    continue;
                }
                let steepest = neighbours4(x, y, width, height)
                    .filter(|&q| valued(q))
                    .map(|q| (order[q] - order[p]).abs())
                    .fold(0f32, f32::max);
                if steepest > 1.5 * gradient {
                    row[x].0 |= PixelFlags::UNRELIABLE;
                }
            }
        });
    // Islands: 4-connected valued pixels joined where the change is below a jump.
    let specimen = pass
        .flags
        .iter()
        .filter(|f| !f.has(PixelFlags::OUTSIDE_MASK))
        .count();
    let min_size = ((specimen as f64 * ISLAND_SHARE) as usize).max(ISLAND_MIN_PIXELS);
    let mut seen = vec![false; order.len()];
    let mut stack = Vec::new();
    let mut island = Vec::new();
    for start in 0..order.len() {
        if seen[start] || pass.flags[start].0 != 0 {
            continue;
        }
        seen[start] = true;
        stack.push(start);
        island.clear();
        while let Some(p) = stack.pop() {
            island.push(p);
            for q in neighbours4(p % width, p / width, width, height) {
                if !seen[q] && pass.flags[q].0 == 0 && (order[q] - order[p]).abs() <= jump {
                    seen[q] = true;
                    stack.push(q);
                }
            }
        }
        if island.len() < min_size {
            for &p in &island {
                pass.flags[p].0 |= PixelFlags::UNRELIABLE;
            }
        }
    }
}

/// Grows values into flagged pixels next to valued ones, layer by layer: a plane fitted to the
/// valued pixels around predicts the order and its gradient G; the pixel's colour must then
/// match the table *averaged over the pixel footprint* (± G/2 around the order), since steep
/// fringes blur within a pixel, within a window of the prediction. What does not match stays
/// flagged.
fn repair_steep_edges(
    pass: &mut Pass,
    lab: &LabImage,
    table: &CalibrationTable,
    max_order: f64,
    width: usize,
    height: usize,
) {
    let r = 2i64;
    for _ in 0..REPAIR_LAYERS {
        let order = pass.order.clone();
        let flags = pass.flags.clone();
        let valued = |q: usize| flags[q].0 == 0;
        let updates: Vec<(usize, f32, f32)> = (0..order.len())
            .into_par_iter()
            .filter(|&p| !flags[p].has(PixelFlags::OUTSIDE_MASK) && !valued(p))
            .filter_map(|p| {
                let (x, y) = ((p % width) as i64, (p / width) as i64);
                // Least-squares plane n = a + bx·dx + by·dy through valued pixels around.
                let (mut s1, mut sx, mut sy, mut sxx, mut syy, mut sxy) =
                    (0.0f64, 0.0, 0.0, 0.0, 0.0, 0.0);
                let (mut sn, mut sxn, mut syn) = (0.0f64, 0.0, 0.0);
                for dy in -r..=r {
                    for dx in -r..=r {
                        let (nx, ny) = (x + dx, y + dy);
                        if nx < 0 || ny < 0 || nx >= width as i64 || ny >= height as i64 {
                            continue;
                        }
                        let q = ny as usize * width + nx as usize;
                        if !valued(q) {
                            continue;
                        }
                        let (fx, fy, n) = (dx as f64, dy as f64, f64::from(order[q]));
                        s1 += 1.0;
                        sx += fx;
                        sy += fy;
                        sxx += fx * fx;
                        syy += fy * fy;
                        sxy += fx * fy;
                        sn += n;
                        sxn += fx * n;
                        syn += fy * n;
                    }
                }
                if s1 < 4.0 {
                    return None;
                }
                let (a, bx, by) = solve3(
                    [[s1, sx, sy], [sx, sxx, sxy], [sy, sxy, syy]],
                    [sn, sxn, syn],
                )?;
                let g = bx.hypot(by);
                if g > REPAIR_MAX_GRADIENT || a < 0.0 || a > max_order - 0.05 {
                    return None;
                }
                let reach = 0.05 + 0.5 * g;
                let colour = lab.data[p];
                let lo = ((a - reach).max(0.0) / table.order_step).floor() as usize;
                let hi = ((a + reach).min(max_order) / table.order_step).ceil() as usize;
                let footprint = |n: f64| {
                    let mut acc = [0f32; 3];
                    for u in [-0.5, -0.25, 0.0, 0.25, 0.5] {
                        let c = table.colour_at((n + g * u).clamp(0.0, max_order));
                        acc[0] += c.l / 5.0;
                        acc[1] += c.a / 5.0;
                        acc[2] += c.b / 5.0;
                    }
                    Lab::new(acc[0], acc[1], acc[2])
                };
                let (best_n, best_d) = (lo..=hi)
                    .map(|i| {
                        let n = i as f64 * table.order_step;
                        (n, delta_e_ab(colour, footprint(n)))
                    })
                    .min_by(|u, v| u.1.total_cmp(&v.1))?;
                (best_d < REPAIR_RESIDUAL).then_some((p, best_n as f32, best_d))
            })
            .collect();
        if updates.is_empty() {
            break;
        }
        for (p, n, d) in updates {
            pass.order[p] = n;
            pass.residual[p] = d;
            pass.flags[p] = PixelFlags::default();
        }
    }
}

/// Past the end of the table colours repeat in paler form, so a region of orders near the
/// table's top whose colours match it markedly worse than the photo does elsewhere is more
/// likely an alias of orders beyond the table than a true value: such pixels (order within
/// [`ALIAS_RANGE`] of the top, mean residual over a (2·[`ALIAS_WINDOW`]+1)² window above
/// [`ALIAS_RESIDUAL_RATIO`] × the photo's median residual) are flagged beyond range — the
/// cautious reading, since beyond range means higher stress.
fn flag_poor_high_matches(pass: &mut Pass, top: f32, width: usize, height: usize) {
    let valued = |p: usize| pass.flags[p].0 == 0 && pass.residual[p].is_finite();
    let mut sample: Vec<f32> = (0..pass.order.len())
        .step_by((pass.order.len() / 50_000).max(1))
        .filter(|&p| valued(p))
        .map(|p| pass.residual[p])
        .collect();
    if sample.is_empty() {
        return;
    }
    let limit = (ALIAS_RESIDUAL_RATIO * median_f32(&mut sample)).max(ALIAS_RESIDUAL_MIN);
    // Integral images of the residual and of the count of valued pixels.
    let (w1, h1) = (width + 1, height + 1);
    let mut sum = vec![0f64; w1 * h1];
    let mut count = vec![0u32; w1 * h1];
    for y in 0..height {
        let (mut row_sum, mut row_count) = (0f64, 0u32);
        for x in 0..width {
            let p = y * width + x;
            if valued(p) {
                row_sum += f64::from(pass.residual[p]);
                row_count += 1;
            }
            sum[(y + 1) * w1 + x + 1] = sum[y * w1 + x + 1] + row_sum;
            count[(y + 1) * w1 + x + 1] = count[y * w1 + x + 1] + row_count;
        }
    }
    let r = ALIAS_WINDOW;
    let flagged: Vec<usize> = (0..pass.order.len())
        .into_par_iter()
        .filter(|&p| valued(p) && pass.order[p] >= top - ALIAS_RANGE)
        .filter(|&p| {
            let (x, y) = (p % width, p / width);
            let (x0, y0, x1, y1) = (
                x.saturating_sub(r),
                y.saturating_sub(r),
                (x + r + 1).min(width),
                (y + r + 1).min(height),
            );
            let at = |xx: usize, yy: usize| yy * w1 + xx;
            let s = sum[at(x1, y1)] - sum[at(x0, y1)] - sum[at(x1, y0)] + sum[at(x0, y0)];
            let n = count[at(x1, y1)] + count[at(x0, y0)] - count[at(x0, y1)] - count[at(x1, y0)];
            n > 0 && s / f64::from(n) > f64::from(limit)
        })
        .collect();
    for p in flagged {
        pass.flags[p].0 |= PixelFlags::BEYOND_RANGE;
    }
}

/// Near the end of the table colours cannot tell whether the order still rises: valued pixels
/// within [`TOP_GUARD`] fringes of the table's top that lie next to a *beyond range* pixel are
/// flagged beyond range too, a few layers deep.
fn extend_beyond_range(pass: &mut Pass, top: f32, width: usize, height: usize) {
    for _ in 0..TOP_GUARD_LAYERS {
        let flags = pass.flags.clone();
        let grown: Vec<usize> = (0..pass.order.len())
            .into_par_iter()
            .filter(|&p| {
                flags[p].0 == 0
                    && pass.order[p] >= top - TOP_GUARD
                    && neighbours8(p % width, p / width, width, height)
                        .any(|q| flags[q].has(PixelFlags::BEYOND_RANGE))
            })
            .collect();
        if grown.is_empty() {
            break;
        }
        for p in grown {
            pass.flags[p].0 |= PixelFlags::BEYOND_RANGE;
        }
    }
}

/// Row-major indices of the 8-neighbours of (x, y) inside a `width` × `height` image.
fn neighbours8(x: usize, y: usize, width: usize, height: usize) -> impl Iterator<Item = usize> {
    (-1i64..=1)
        .flat_map(|dy| (-1i64..=1).map(move |dx| (dx, dy)))
        .filter(|&(dx, dy)| dx != 0 || dy != 0)
        .map(move |(dx, dy)| (x as i64 + dx, y as i64 + dy))
        .filter(move |&(nx, ny)| {
            nx >= 0 && ny >= 0 && (nx as usize) < width && (ny as usize) < height
        })
        .map(move |(nx, ny)| ny as usize * width + nx as usize)
}

/// Solves a 3×3 linear system by Cramer's rule; `None` if it is (nearly) singular.
fn solve3(m: [[f64; 3]; 3], v: [f64; 3]) -> Option<(f64, f64, f64)> {
    let det = |m: [[f64; 3]; 3]| {
        m[0][0] * (m[1][1] * m[2][2] - m[1][2] * m[2][1])
            - m[0][1] * (m[1][0] * m[2][2] - m[1][2] * m[2][0])
            + m[0][2] * (m[1][0] * m[2][1] - m[1][1] * m[2][0])
    };
    let d = det(m);
    if d.abs() < 1e-9 {
        return None;
    }
    let column = |k: usize| {
        let mut c = m;
        for row in 0..3 {
            c[row][k] = v[row];
        }
        det(c) / d
    };
    Some((column(0), column(1), column(2)))
}

/// Row-major indices of the 4-neighbours of (x, y) inside a `width` × `height` image.
fn neighbours4(x: usize, y: usize, width: usize, height: usize) -> impl Iterator<Item = usize> {
    [
        (x.wrapping_sub(1), y),
        (x + 1, y),
        (x, y.wrapping_sub(1)),
        (x, y + 1),
    ]
    .into_iter()
    .filter(move |&(nx, ny)| nx < width && ny < height)
    .map(move |(nx, ny)| ny * width + nx)
}

/// Averages each valued pixel with its (2r+1)² neighbourhood, r = [`SMOOTH_RADIUS`], where all
/// of it is valued and lies within a few gradients of the centre (a symmetric mean keeps
/// linear ramps exact and leaves edges of the valued area alone).
fn smooth(pass: &mut Pass, width: usize, height: usize, gradient: f32) {
    let r = SMOOTH_RADIUS;
    let limit = 2.0 * gradient * r as f32;
    let order = pass.order.clone();
    let flags = &pass.flags;
    let count = ((2 * r + 1) * (2 * r + 1)) as f32;
    pass.order
        .par_chunks_mut(width)
        .enumerate()
        .for_each(|(y, row)| {
            if y < r || y + r >= height {
                return;
            }
            for x in r..width.saturating_sub(r) {
                let p = y * width + x;
                if flags[p].0 != 0 {
                    continue;
                }
                let mut sum = 0.0;
                let mut ok = true;
                'window: for ny in y - r..=y + r {
                    for nx in x - r..=x + r {
                        let q = ny * width + nx;
                        if flags[q].0 != 0 || (order[q] - order[p]).abs() > limit {
                            ok = false;
                            break 'window;
                        }
                        sum += order[q];
                    }
                }
                if ok {
                    row[x] = sum / count;
                }
            }
        });
}

/// Fits the exposure correction on confident pixels of a first pass.
fn fit_exposure(
    working: &Working,
    table: &CalibrationTable,
    pass: &Pass,
) -> Option<ExposureCorrection> {
    let (w, h) = (working.width, working.height);
    let confident: Vec<usize> = (0..pass.order.len())
        .filter(|&p| {
            // Vivid colours only: their order follows from hue, whatever the exposure; greys
            // would tie the order to lightness, which is what is being fitted.
            pass.flags[p].0 == 0
                && pass.margin[p] > 2.0 * MARGIN_LIMIT
                && table
                    .colour_at(f64::from(pass.order[p]))
                    .into_components()
                    .1
                    .hypot(
                        table
                            .colour_at(f64::from(pass.order[p]))
                            .into_components()
                            .2,
                    )
                    > FIT_MIN_CHROMA
        })
        .collect();
    if confident.len() < 200 {
        return None;
    }
    let stride = (confident.len() / 40_000).max(1);
    let samples: Vec<(LinSrgb<f32>, LinSrgb<f32>, f32)> = confident
        .iter()
        .step_by(stride)
        .map(|&p| {
            let observed = working.linear[p];
            let expected = linear_from_lab(table.colour_at(f64::from(pass.order[p])));
            (
                observed,
                expected,
                radius_sq(p % w as usize, p / w as usize, w, h),
            )
        })
        .filter(|(o, e, _)| {
            let (so, se) = (o.red + o.green + o.blue, e.red + e.green + e.blue);
            so > 0.03 && se > 0.03
        })
        .collect();
    if samples.len() < 100 {
        return None;
    }
    // Radial term: least squares of the brightness ratio against ρ², t = a + b·ρ².
    let ratios: Vec<(f32, f32)> = samples
        .iter()
        .map(|(o, e, r2)| ((e.red + e.green + e.blue) / (o.red + o.green + o.blue), *r2))
        .collect();
    let mut ratio_values: Vec<f32> = ratios.iter().map(|r| r.0).collect();
    let centre = median_f32(&mut ratio_values);
    let inliers: Vec<&(f32, f32)> = ratios
        .iter()
        .filter(|r| (r.0 / centre - 1.0).abs() < 0.25)
        .collect();
    let n = inliers.len() as f32;
    let (sx, sy) = inliers
        .iter()
        .fold((0.0, 0.0), |acc, r| (acc.0 + r.1, acc.1 + r.0));
    let (mx, my) = (sx / n, sy / n);
    let (sxx, sxy) = inliers.iter().fold((0.0, 0.0), |acc, r| {
        (acc.0 + (r.1 - mx).powi(2), acc.1 + (r.1 - mx) * (r.0 - my))
    });
    let slope = if sxx > 1e-4 * n { sxy / sxx } else { 0.0 };
    let intercept = my - slope * mx;
    let vignetting = if intercept > 0.0 {
        // Lenses darken corners, never brighten them.
        (slope / intercept).clamp(0.0, 1.0)
    } else {
        0.0
    };
    // Channel gains: ratio of sums over the pixels whose ratio lies near the median, leaving
    // out dark and nearly clipped channel values, after removing the radial term.
    let mut gain = [1f32; 3];
    for (c, g) in gain.iter_mut().enumerate() {
        let pairs: Vec<(f32, f32)> = samples
            .iter()
            .filter_map(|(o, e, r2)| {
                let (ov, ev) = ([o.red, o.green, o.blue][c], [e.red, e.green, e.blue][c]);
                let ov = ov * (1.0 + vignetting * r2);
                (ov > 0.02 && ov < 0.9 && ev > 0.02 && ev < 0.95).then_some((ov, ev))
            })
            .collect();
        if pairs.len() < 50 {
            return None;
        }
        let mut ratios: Vec<f32> = pairs.iter().map(|(o, e)| e / o).collect();
        let centre = median_f32(&mut ratios);
        let (so, se) = pairs
            .iter()
            .filter(|(o, e)| (e / o / centre - 1.0).abs() < 0.15)
            .fold((0.0, 0.0), |acc, (o, e)| (acc.0 + o, acc.1 + e));
        *g = (se / so).clamp(0.5, 2.0);
    }
    Some(ExposureCorrection { gain, vignetting })
}

fn median_f32(v: &mut [f32]) -> f32 {
    let k = v.len() / 2;
    *v.select_nth_unstable_by(k, f32::total_cmp).1
}

/// Summary figures of a finished pass.
fn statistics(pass: &Pass) -> MapStatistics {
    let specimen = pass
        .flags
        .iter()
        .filter(|f| !f.has(PixelFlags::OUTSIDE_MASK))
        .count() as u64;
    let beyond = pass
        .flags
        .iter()
        .filter(|f| f.has(PixelFlags::BEYOND_RANGE))
        .count() as f64;
    let unreliable = pass
        .flags
        .iter()
        .filter(|f| f.has(PixelFlags::UNRELIABLE))
        .count() as f64;
    let (mut count, mut sum, mut min, mut max, mut res) =
        (0u64, 0f64, f64::INFINITY, f64::NEG_INFINITY, 0f64);
    for (o, r) in pass.order.iter().zip(&pass.residual) {
        if o.is_finite() {
            let v = f64::from(*o);
            count += 1;
            sum += v;
            min = min.min(v);
            max = max.max(v);
            res += f64::from(*r);
        }
    }
    let share = |v: f64| {
        if specimen == 0 {
            0.0
        } else {
            v / specimen as f64
        }
    };
    MapStatistics {
        specimen_pixels: specimen,
        valued_pixels: count,
        beyond_range_share: share(beyond),
        unreliable_share: share(unreliable),
        min_order: if count > 0 { min } else { f64::NAN },
        max_order: if count > 0 { max } else { f64::NAN },
        mean_order: if count > 0 {
            sum / count as f64
        } else {
            f64::NAN
        },
        mean_residual: if count > 0 {
            res / count as f64
        } else {
            f64::NAN
        },
    }
}

/// Runs the whole solver; see the module documentation.
/// Photos up to this many pixels are labelled at full resolution; larger ones on block means.
const FULL_RESOLUTION_LIMIT: u64 = 1_000_000;
/// A first exposure fit this close to no correction needs no second round.
const SETTLED_GAIN: f32 = 0.03;
/// Largest working image of the preliminary passes that feed the exposure fit, pixels.
const PRELIMINARY_LIMIT: u64 = 500_000;

/// The image the labelling runs on, in linear-light sRGB: the photo itself, or the means of
/// `stride` × `stride` blocks of it when the photo is large. A block belongs to the specimen
/// only if all its pixels do.
struct Working {
    width: u32,
    height: u32,
    stride: u32,
    linear: Vec<LinSrgb<f32>>,
    inside: Vec<bool>,
}

impl Working {
    /// Block means of `photo` with the smallest stride that keeps at most `limit` pixels.
    fn new(photo: &Photo, mask: Option<&Mask>, limit: u64) -> Working {
        let (w, h) = (photo.width(), photo.height());
        let pixels = u64::from(w) * u64::from(h);
        let stride = if pixels <= limit {
            1
        } else {
            ((pixels as f64 / limit as f64).sqrt().ceil() as u32).max(2)
        };
        let (cw, ch) = (w.div_ceil(stride), h.div_ceil(stride));
        let cells: Vec<(LinSrgb<f32>, bool)> = (0..ch as usize * cw as usize)
            .into_par_iter()
            .map(|c| {
                let (cx, cy) = ((c % cw as usize) as u32, (c / cw as usize) as u32);
                let (mut sum, mut n, mut all_inside) = (LinSrgb::new(0.0, 0.0, 0.0), 0.0, true);
                for y in cy * stride..((cy + 1) * stride).min(h) {
                    for x in cx * stride..((cx + 1) * stride).min(w) {
                        let i = (y * w + x) as usize;
                        sum += photo.linear(i);
                        n += 1.0;
                        all_inside &= mask.is_none_or(|m| m.as_slice()[i]);
                    }
                }
                (sum / n, all_inside)
            })
            .collect();
        let (linear, inside) = cells.into_iter().unzip();
        Working {
            width: cw,
            height: ch,
            stride,
            linear,
            inside,
        }
    }

    /// `options` in working pixels: on block means the field changes `stride` times faster
    /// per pixel, and hints move to their block.
    fn scale(&self, options: &MapOptions) -> MapOptions {
        let s = f64::from(self.stride);
        MapOptions {
            max_gradient: (options.max_gradient * s)
                .min(COARSE_MAX_GRADIENT.max(options.max_gradient)),
            hints: options
                .hints
                .iter()
                .map(|h| OrderHint {
                    at: PixelPoint {
                        x: h.at.x / s,
                        y: h.at.y / s,
                    },
                    order: h.order,
                })
                .collect(),
            ..options.clone()
        }
    }

    /// CIELAB (D65) of every working pixel after `correction`.
    fn lab(&self, correction: &ExposureCorrection) -> LabImage {
        let w = self.width as usize;
        let data = self
            .linear
            .par_iter()
            .enumerate()
            .map(|(i, c)| {
                lab_from_linear(correction.apply(*c, i % w, i / w, self.width, self.height))
            })
            .collect();
        LabImage {
            width: self.width,
            height: self.height,
            data,
        }
    }
}

/// Runs the whole solver; see the module documentation.
pub(crate) fn solve(
    photo: &Photo,
    table: &CalibrationTable,
    mask: Option<&Mask>,
    options: &MapOptions,
) -> CoreResult<OrderMap> {
    let max_order = options
        .max_order
        .map_or(table.max_order(), |m| m.min(table.max_order()));
    if max_order < 4.0 * SEARCH_STEP {
        return Err(CoreError::invalid(
            "max_order",
            format!("{max_order} leaves too little of the table to match against"),
        ));
    }
    let mut exposure = ExposureCorrection::NONE;
    if options.exposure_compensation {
        let working = Working::new(photo, mask, PRELIMINARY_LIMIT);
        let scaled = working.scale(options);
        // A second round only where the first found a real drift: a strong drift is only
        // partly corrected by the first fit.
        for _ in 0..2 {
            let preliminary = solve_pass(
                &working.lab(&exposure),
                &working.inside,
                table,
                max_order,
                &scaled,
                Stage::Preliminary,
            );
            match fit_exposure(&working, table, &preliminary) {
                Some(fit) => {
                    let settled = fit.gain.iter().all(|g| (g - 1.0).abs() < SETTLED_GAIN)
                        && fit.vignetting < SETTLED_GAIN;
                    exposure = fit;
                    if settled {
                        break;
                    }
                }
                None => break,
            }
        }
    }
    let working = Working::new(photo, mask, FULL_RESOLUTION_LIMIT);
    let pass = solve_pass(
        &working.lab(&exposure),
        &working.inside,
        table,
        max_order,
        &working.scale(options),
        Stage::Final,
    );
    let pass = if working.stride == 1 {
        pass
    } else {
        drop(working.linear);
        refine_full_resolution(
            photo,
            mask,
            working.stride,
            &pass,
            &exposure,
            table,
            max_order,
            options.max_gradient as f32,
        )
    };
    let statistics = statistics(&pass);
    Ok(OrderMap {
        width: photo.width(),
        height: photo.height(),
        order: pass.order,
        residual: pass.residual,
        margin: pass.margin,
        flags: pass.flags,
        exposure,
        statistics,
    })
}

/// Full-resolution orders from a labelling on block means: each pixel searches the table
/// near the order interpolated from the valued block centres around it, within the change
/// those blocks show; blocks without a value pass their flags on.
#[allow(clippy::too_many_arguments)]
fn refine_full_resolution(
    photo: &Photo,
    mask: Option<&Mask>,
    stride: u32,
    coarse: &Pass,
    exposure: &ExposureCorrection,
    table: &CalibrationTable,
    max_order: f64,
    gradient: f32,
) -> Pass {
    let (w, h) = (photo.width() as usize, photo.height() as usize);
    let s = stride as usize;
    let (cw, ch) = (w.div_ceil(s), h.div_ceil(s));
    let fine = SearchTable::new(table, table.order_step, max_order, REFINE_LIGHTNESS_WEIGHT);
    let n = w * h;
    let mut pass = Pass {
        order: vec![f32::NAN; n],
        residual: vec![f32::NAN; n],
        margin: vec![f32::NAN; n],
        flags: vec![PixelFlags::default(); n],
    };
    let rows = pass
        .order
        .par_chunks_mut(w)
        .zip(pass.residual.par_chunks_mut(w))
        .zip(pass.margin.par_chunks_mut(w))
        .zip(pass.flags.par_chunks_mut(w))
        .enumerate();
    rows.for_each(|(y, (((order, residual), margin), flags))| {
        for x in 0..w {
            let i = y * w + x;
            if mask.is_some_and(|m| !m.as_slice()[i]) {
                flags[x].0 = PixelFlags::OUTSIDE_MASK;
                continue;
            }
            // Position in block-centre coordinates.
            let fx = ((x as f32 + 0.5) / s as f32 - 0.5).clamp(0.0, (cw - 1) as f32);
            let fy = ((y as f32 + 0.5) / s as f32 - 0.5).clamp(0.0, (ch - 1) as f32);
            let (x0, y0) = (fx.floor() as usize, fy.floor() as usize);
            let (x1, y1) = ((x0 + 1).min(cw - 1), (y0 + 1).min(ch - 1));
            let (tx, ty) = (fx - x0 as f32, fy - y0 as f32);
            let corners = [
                (x0, y0, (1.0 - tx) * (1.0 - ty)),
                (x1, y0, tx * (1.0 - ty)),
                (x0, y1, (1.0 - tx) * ty),
                (x1, y1, tx * ty),
            ];
            let (mut sum, mut weight, mut lo, mut hi, mut best_margin) =
                (0.0, 0.0, f32::INFINITY, f32::NEG_INFINITY, f32::NAN);
            for &(cx, cy, wgt) in &corners {
                let c = cy * cw + cx;
                if coarse.flags[c].0 == 0 && coarse.order[c].is_finite() {
                    sum += wgt * coarse.order[c];
                    weight += wgt;
                    lo = lo.min(coarse.order[c]);
                    hi = hi.max(coarse.order[c]);
                    best_margin = if best_margin.is_nan() {
                        coarse.margin[c]
                    } else {
                        best_margin.max(coarse.margin[c])
                    };
                }
            }
            let nearest =
                ((fy.round() as usize).min(ch - 1)) * cw + (fx.round() as usize).min(cw - 1);
            if weight < 0.25 {
                flags[x].0 = if coarse.flags[nearest].has(PixelFlags::BEYOND_RANGE) {
                    PixelFlags::BEYOND_RANGE
                } else {
                    PixelFlags::UNRELIABLE
                };
                continue;
            }
            let predicted = f64::from(sum / weight);
            let reach = 0.05 + f64::from(hi - lo);
            let colour = lab_from_linear(exposure.apply(
                photo.linear(i),
                x,
                y,
                photo.width(),
                photo.height(),
            ));
            let from = ((predicted - reach).max(0.0) / fine.step).floor() as usize;
            let to = ((predicted + reach).min(max_order) / fine.step).ceil() as usize;
            let (value, _) = fine.best_in(colour, from, to);
            let miss = delta_e_ab(colour, table.colour_at(value));
            order[x] = value as f32;
            residual[x] = miss;
            margin[x] = best_margin;
            if miss > RESIDUAL_LIMIT {
                flags[x].0 = PixelFlags::UNRELIABLE;
            }
        }
    });
    smooth(&mut pass, w, h, gradient);
    for (o, f) in pass.order.iter_mut().zip(&pass.flags) {
        if f.0 != 0 {
            *o = f32::NAN;
        }
    }
    pass
}
