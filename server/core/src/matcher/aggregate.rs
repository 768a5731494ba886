//! Semi-global aggregation over each pixel's candidates, with a transition cost built for
//! smooth ramps.

use super::*;

/// Cost per fringe of a change of order within the maximum gradient: small, so that ramps pass
/// freely but, of two equally good candidates, the one closer to the neighbours wins.
pub(super) const RAMP_COST: f32 = 6.0;
/// Cost of a change of order between one and two maximum gradients.
pub(super) const SLOPE_PENALTY: f32 = 3.0;
/// Cost of a larger change of order (a jump between candidate chains).
pub(super) const JUMP_PENALTY: f32 = 24.0;
/// Number of scan directions summed by the aggregation.
pub(super) const DIRECTIONS: f32 = 8.0;
/// Transition cost between label orders `a` and `b` of neighbouring pixels, both already
/// capped at `top + step_gradient` (orders at the top of the table may continue into *beyond
/// range*, and back, freely).
#[inline(always)]
fn transition(a: f32, b: f32, step_gradient: f32) -> f32 {
    let change = (a - b).abs();
    let steep = if change <= 2.0 * step_gradient {
        SLOPE_PENALTY
    } else {
        JUMP_PENALTY
    };
    if change <= step_gradient {
        RAMP_COST * change
    } else {
        steep
    }
}

/// One step along a scan path: the path cost of each label at a pixel, given the path costs
/// at its predecessor on the path (none at the start of a path).
///
/// Empty label slots (order NaN) carry an infinite data cost, so their path cost is infinite
/// whatever their transition costs; no NaN test is needed here.
#[inline]
pub(super) fn path_step(
    here: &Labels,
    previous: Option<(&[f32; LABELS], &Labels)>,
    step_gradient: f32,
    top: f32,
) -> [f32; LABELS] {
    let mut path = here.cost;
    if let Some((lp, before)) = previous {
        let cap = top + step_gradient;
        let floor = lp.iter().copied().fold(f32::INFINITY, f32::min);
        // Lanes padded to eight, a whole number of vector registers: for each predecessor
        // label the transition to all labels here is one vectorised pass.
        let mut orders = [cap; 8];
        for (lane, order) in orders.iter_mut().zip(here.order) {
            *lane = order.min(cap);
        }
        let mut best = [floor + JUMP_PENALTY; 8];
        for (cost, order) in lp.iter().zip(before.order) {
            let order = order.min(cap);
            for (b, o) in best.iter_mut().zip(orders) {
                let candidate = cost + transition(o, order, step_gradient);
                *b = if candidate < *b { candidate } else { *b };
            }
        }
        for (slot, b) in path.iter_mut().zip(best) {
            *slot += b - floor;
        }
    }
    path
}

/// Sums, for every pixel and label, the path costs along eight scan directions: left and
/// right along each row (rows in parallel), and down and up the image in two row sweeps
/// that carry the vertical and both diagonal directions (pixels of a row in parallel).
pub(super) fn aggregate(
    labels: &[Labels],
    inside: &[bool],
    width: usize,
    height: usize,
    gradient: f32,
    top: f32,
) -> Vec<[f32; LABELS]> {
    let mut total = par_filled(labels.len(), [0f32; LABELS]);
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
    // Pixels of a row per parallel task: a row split in a few pieces, each enough work to
    // outweigh handing it to a thread.
    const PIECE: usize = 256;
    let mut previous: Vec<[[f32; LABELS]; 3]> = vec![[NO_PATH; 3]; width];
    let mut current = previous.clone();
    for downward in [true, false] {
        previous.fill([NO_PATH; 3]);
        for k in 0..height {
            let y = if downward { k } else { height - 1 - k };
            let before_y = if downward { y.wrapping_sub(1) } else { y + 1 };
            let last = &previous;
            current
                .par_chunks_mut(PIECE)
                .zip(total[y * width..(y + 1) * width].par_chunks_mut(PIECE))
                .enumerate()
                .for_each(|(piece, (out, sums))| {
                    for (j, (out, sum)) in out.iter_mut().zip(sums).enumerate() {
                        let x = piece * PIECE + j;
                        let p = y * width + x;
                        *out = [NO_PATH; 3];
                        if !inside[p] {
                            continue;
                        }
                        for (d, &(dx, step_gradient)) in sweeps.iter().enumerate() {
                            let px = x as i64 - dx;
                            let before = (k > 0
                                && px >= 0
                                && (px as usize) < width
                                && !last[px as usize][d][0].is_nan())
                            .then(|| {
                                (
                                    &last[px as usize][d],
                                    &labels[before_y * width + px as usize],
                                )
                            });
                            out[d] = path_step(&labels[p], before, step_gradient, top);
                            if !out[d][0].is_nan() {
                                for (t, v) in sum.iter_mut().zip(&out[d]) {
                                    *t += v;
                                }
                            }
                        }
                    }
                });
            std::mem::swap(&mut previous, &mut current);
        }
    }
    total
}
