//! After the labelling: flags for steep fields, jumps and islands, repair of steep edges,
//! the beyond-range guards at the table's top, and the final ramp-preserving smoothing.

use super::*;

/// Layers grown by the repair of flagged pixels next to valued ones.
pub(super) const REPAIR_LAYERS: usize = 12;
/// Steepest field the repair accepts, fringes per pixel.
pub(super) const REPAIR_MAX_GRADIENT: f64 = 0.35;
/// How wide a stretch of the field (pixels, across the fringes) a pixel's colour averages:
/// its lightness over one width, its chroma (a\*, b\*) over another.
#[derive(Clone, Copy)]
pub(super) struct Footprint {
    pub(super) lightness: f32,
    pub(super) chroma: f32,
}

/// Footprints every repair tries: one pixel, and two for the 2 × 2 colour blocks of JPEG's
/// 4:2:0 chroma subsampling.
pub(super) const PIXEL_FOOTPRINTS: [Footprint; 2] = [
    Footprint {
        lightness: 1.0,
        chroma: 1.0,
    },
    Footprint {
        lightness: 2.0,
        chroma: 2.0,
    },
];
/// JPEG's 4:2:0 chroma, stored on 2 × 2 blocks and interpolated back when decoded, averages
/// the colour over about three pixels, while lightness keeps full resolution (two pixels with
/// the lens blur). Tried by the second repair only, where orders are at least
/// [`SUBSAMPLED_CHROMA_MIN_ORDER`] (below that colours are greys and chroma tells nothing)
/// and the chroma footprint spans at most [`SUBSAMPLED_CHROMA_MAX_SPAN`].
pub(super) const SUBSAMPLED_CHROMA: Footprint = Footprint {
    lightness: 2.0,
    chroma: 3.0,
};
/// Lowest predicted order (fringes) at which the subsampled-chroma footprint is tried.
pub(super) const SUBSAMPLED_CHROMA_MIN_ORDER: f64 = 0.5;
/// Widest stretch of the field (fringes) the subsampled-chroma footprint may average: wider
/// mixes say too little about the order.
pub(super) const SUBSAMPLED_CHROMA_MAX_SPAN: f32 = 0.6;

/// How far the steep-edge repair may go.
#[derive(Clone, Copy)]
pub(super) struct RepairLimits {
    /// Highest order grown, fringes.
    pub(super) ceiling: f64,
    /// Largest ΔE\*ab between a repaired pixel and its footprint-averaged table colour.
    pub(super) residual: f32,
    /// Whether [`SUBSAMPLED_CHROMA`] is tried besides the [`PIXEL_FOOTPRINTS`].
    pub(super) subsampled_chroma: bool,
}

/// Largest ΔE\*ab of the first repair, before the beyond-range guards.
pub(super) const REPAIR_RESIDUAL: f32 = 6.0;
/// Largest ΔE\*ab of the second repair, after the guards: it grows only from valued
/// neighbours and well below the table's top, where aliases cannot come from, so it may accept
/// the poorer matches of compressed steep fringes.
pub(super) const SECOND_REPAIR_RESIDUAL: f32 = 12.0;
/// Orders this close to the top of the table (fringes) next to *beyond range* pixels are
/// taken as beyond range too.
pub(super) const TOP_GUARD: f32 = 0.25;
/// Orders within this many fringes of the table's top may be aliases of orders beyond it.
pub(super) const ALIAS_RANGE: f32 = 0.6;
/// Half-width of the window over which residuals are averaged for the alias check, pixels.
pub(super) const ALIAS_WINDOW: usize = 4;
/// A local mean residual above this multiple of the photo's median marks a possible alias.
pub(super) const ALIAS_RESIDUAL_RATIO: f32 = 2.5;
/// ... and never below this many ΔE*ab.
pub(super) const ALIAS_RESIDUAL_MIN: f32 = 2.5;
/// Half-width of the window of the washed-out test, pixels.
pub(super) const WASHED_OUT_WINDOW: usize = 3;
/// Largest ΔE\*ab between a washed-out neighbourhood's mean colour and that of high orders.
pub(super) const WASHED_OUT_DISTANCE: f32 = 4.0;
/// Largest mean ΔE\*ab of the single colours of a washed-out neighbourhood from that colour.
pub(super) const WASHED_OUT_SPREAD: f32 = 10.0;
/// Orders below this are not taken for washed-out high orders (fringes).
pub(super) const WASHED_OUT_FROM_ORDER: f32 = 2.0;
/// The photo's typical residual is taken over orders at least this high (fringes): dark
/// zero-order areas, and black background when no mask is given, match the table's black only
/// loosely and would raise it until no alias is ever flagged.
pub(super) const ALIAS_REFERENCE_MIN_ORDER: f32 = 0.5;
/// How many pixel layers that rule may spread.
pub(super) const TOP_GUARD_LAYERS: usize = 4;
/// A region bordering on beyond-range pixels whose orders all lie within this many fringes of
/// the table's top is taken as an alias of orders past the table.
pub(super) const UNANCHORED_DEPTH: f32 = 1.5;
/// Radius of the final order smoothing window, pixels.
pub(super) const SMOOTH_RADIUS: usize = 2;
/// Valued regions (connected without jumps) smaller than this share of the specimen are
/// taken as wrong islands and flagged unreliable.
pub(super) const ISLAND_SHARE: f64 = 0.005;
/// ... but never smaller than this many pixels.
pub(super) const ISLAND_MIN_PIXELS: usize = 50;
/// Flags pixels where the field is steeper than the maximum gradient and both sides of every
/// jump between neighbours, then flags small islands cut off by jumps or flags.
pub(super) fn flag_steep_and_isolated(pass: &mut Pass, width: usize, height: usize, gradient: f32) {
    let order = &pass.order;
    let jump = 2.5 * gradient;
    let flags_before = pass.flags.clone();
    let valued = |p: usize| flags_before[p].0 == 0 && order[p].is_finite();
    pass.flags
        .par_chunks_mut(width)
        .enumerate()
        .for_each(|(y, row)| {
            for (x, flags) in row.iter_mut().enumerate() {
                let p = y * width + x;
                if !valued(p) {
                    continue;
                }
                let steepest = neighbours4(x, y, width, height)
                    .filter(|&q| valued(q))
                    .map(|q| (order[q] - order[p]).abs())
                    .fold(0f32, f32::max);
                if steepest > 1.5 * gradient {
                    flags.0 |= PixelFlags::UNRELIABLE;
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
    let small: Vec<usize> = valued_regions(pass, width, height, jump)
        .into_iter()
        .filter(|region| region.len() < min_size)
        .flatten()
        .collect();
    for p in small {
        pass.flags[p].0 |= PixelFlags::UNRELIABLE;
    }
}

/// The valued regions of a pass: 4-connected valued pixels, joined where neighbours differ by
/// at most `jump` fringes.
pub(super) fn valued_regions(
    pass: &Pass,
    width: usize,
    height: usize,
    jump: f32,
) -> Vec<Vec<usize>> {
    let order = &pass.order;
    let valued = |p: usize| pass.flags[p].0 == 0;
    let mut seen = vec![false; order.len()];
    let mut stack = Vec::new();
    let mut regions = Vec::new();
    for start in 0..order.len() {
        if seen[start] || !valued(start) {
            continue;
        }
        seen[start] = true;
        stack.push(start);
        let mut region = Vec::new();
        while let Some(p) = stack.pop() {
            region.push(p);
            for q in neighbours4(p % width, p / width, width, height) {
                if !seen[q] && valued(q) && (order[q] - order[p]).abs() <= jump {
                    seen[q] = true;
                    stack.push(q);
                }
            }
        }
        regions.push(region);
    }
    regions
}

/// A valued region that never comes down to the lower orders of the table and borders on
/// *beyond range* pixels has nothing to anchor it: orders past the table alias into the
/// table's upper fringes, and within closed loops of higher orders (a disc's centre, a contact
/// zone) whole regions can read so. Regions whose lowest order lies within
/// [`UNANCHORED_DEPTH`] fringes of the table's top and that touch beyond-range pixels are
/// flagged beyond range too — the cautious reading — unless they hold a hinted pixel
/// (`hinted`, row-major indices): a hint of known order anchors its region.
pub(super) fn flag_unanchored_high_regions(
    pass: &mut Pass,
    top: f32,
    hinted: &[usize],
    width: usize,
    height: usize,
    gradient: f32,
) {
    let flagged: Vec<usize> = valued_regions(pass, width, height, 2.5 * gradient)
        .into_iter()
        .filter(|region| {
            region
                .iter()
                .all(|&p| pass.order[p] >= top - UNANCHORED_DEPTH && !hinted.contains(&p))
                && region.iter().any(|&p| {
                    neighbours4(p % width, p / width, width, height)
                        .any(|q| pass.flags[q].has(PixelFlags::BEYOND_RANGE))
                })
        })
        .flatten()
        .collect();
    for p in flagged {
        pass.flags[p].0 |= PixelFlags::BEYOND_RANGE;
    }
}

/// Orders are continuous, and every specimen meets its edge (the mask's boundary, holes
/// included, or the image border) at orders the table reads well: an edge is free or loaded,
/// never enclosed by orders past the table. A valued region — valued pixels joined where
/// 4-neighbours differ by at most `jump` fringes — that holds no pixel on the edge and no
/// hinted pixel (`hinted`, row-major indices) is cut off from everything that anchors its
/// orders: in closed loops past the table (a disc's contact zone, a notch root) colours
/// repeat and whole regions match the table's upper fringes, reached from the edge only
/// across *beyond range*, unreliable pixels or jumps. Such a region is flagged beyond range
/// when it touches a beyond-range pixel (the cautious reading), unreliable otherwise.
/// The rule needs the specimen's edge, which only a mask gives: without one (no pixel outside
/// the mask) the specimen meets the black background with a jump the rule would read as a
/// cut (a 12-megapixel disc lost all its values), so nothing is flagged.
pub(super) fn flag_cut_off_regions(
    pass: &mut Pass,
    hinted: &[usize],
    width: usize,
    height: usize,
    jump: f32,
) {
    if !pass.flags.iter().any(|f| f.has(PixelFlags::OUTSIDE_MASK)) {
        return;
    }
    let regions = valued_regions(pass, width, height, jump);
    let flags = &pass.flags;
    let mut is_hint = vec![false; flags.len()];
    for &p in hinted {
        is_hint[p] = true;
    }
    let touches = |p: usize, bits: u8| {
        neighbours4(p % width, p / width, width, height).any(|q| flags[q].has(bits))
    };
    let on_edge = |p: usize| {
        let (x, y) = (p % width, p / width);
        x == 0
            || y == 0
            || x + 1 == width
            || y + 1 == height
            || touches(p, PixelFlags::OUTSIDE_MASK)
    };
    let cut_off: Vec<(Vec<usize>, u8)> = regions
        .into_iter()
        .filter(|region| !region.iter().any(|&p| on_edge(p) || is_hint[p]))
        .map(|region| {
            let flag = if region.iter().any(|&p| touches(p, PixelFlags::BEYOND_RANGE)) {
                PixelFlags::BEYOND_RANGE
            } else {
                PixelFlags::UNRELIABLE
            };
            (region, flag)
        })
        .collect();
    for (region, flag) in cut_off {
        for p in region {
            pass.flags[p].0 |= flag;
        }
    }
}

/// Pixels within this many pixels of the mask's edge (0 = touching it) form the edge band of
/// [`flag_edge_band_near_beyond_range`]: three pixels cover about 2.5 σ of the widest blur the
/// generated scenes draw (1.2 px).
pub(super) const EDGE_BAND: usize = 2;

/// In the edge band (pixels within [`EDGE_BAND`] of a pixel outside the mask) the camera mixes
/// the specimen's colour with the dark background, and a mixed colour past the table's top
/// reads as a plausible order of the table's last fringe (a ring's bore, truth 5, read
/// 3.5–4.1). The stress on a free edge is the largest in its neighbourhood more often than
/// not, so where a *beyond range* pixel lies within [`EDGE_BAND`] + 1 pixels of a valued
/// edge-band pixel reading within [`NEAR_TABLE_TOP`] of the table's top `top` — where the
/// map's caution already says values may be aliases — that pixel is flagged beyond range
/// too: the cautious reading. Lower orders are left alone: they are no alias of orders past
/// the table. Runs at full resolution, last.
pub(super) fn flag_edge_band_near_beyond_range(
    pass: &mut Pass,
    top: f32,
    width: usize,
    height: usize,
) {
    let near_top = top - NEAR_TABLE_TOP as f32;
    let flags = &pass.flags;
    // Distance to the mask's outside, in 4-connected steps, up to EDGE_BAND (one byte a pixel).
    let mut depth = par_filled(flags.len(), u8::MAX);
    let mut layer: Vec<usize> = (0..flags.len())
        .into_par_iter()
        .filter(|&p| {
            !flags[p].has(PixelFlags::OUTSIDE_MASK)
                && neighbours4(p % width, p / width, width, height)
                    .any(|q| flags[q].has(PixelFlags::OUTSIDE_MASK))
        })
        .collect();
    for d in 0..=EDGE_BAND as u8 {
        for &p in &layer {
            depth[p] = d;
        }
        layer = layer
            .iter()
            .flat_map(|&p| neighbours4(p % width, p / width, width, height))
            .filter(|&q| depth[q] == u8::MAX && !flags[q].has(PixelFlags::OUTSIDE_MASK))
            .collect();
        layer.sort_unstable();
        layer.dedup();
    }
    let reach = EDGE_BAND as i64 + 1;
    let near_beyond = |p: usize| {
        let (x, y) = ((p % width) as i64, (p / width) as i64);
        (y - reach..=y + reach)
            .filter(|&ny| (0..height as i64).contains(&ny))
            .any(|ny| {
                (x - reach..=x + reach)
                    .filter(|&nx| (0..width as i64).contains(&nx))
                    .any(|nx| {
                        flags[ny as usize * width + nx as usize].has(PixelFlags::BEYOND_RANGE)
                    })
            })
    };
    let flagged: Vec<usize> = (0..flags.len())
        .into_par_iter()
        .filter(|&p| {
            depth[p] != u8::MAX && flags[p].0 == 0 && pass.order[p] >= near_top && near_beyond(p)
        })
        .collect();
    for p in flagged {
        pass.flags[p].0 |= PixelFlags::BEYOND_RANGE;
        pass.order[p] = f32::NAN;
    }
}

/// *Beyond range* says a pixel's order lies past the table's top. Through the material a
/// field no steeper than the maximum gradient (the steepest the solver resolves) climbs from a
/// valued pixel q to at most N_q + gradient · d at a distance of d pixels, so the highest order
/// a pixel can have at resolvable slopes is the least such bound over the valued pixels. Where
/// that bound stays below the top, the pixel lies in a field steeper than the solver resolves —
/// its colour is the washed-out mean of fringes packed within the pixel, which looks like
/// orders past the table but says nothing of its own order — and it is flagged *unreliable*
/// instead (`flag_unreachable_beyond_as_steep`). No pixel gains a value.
///
/// The bound is computed on the labelling's working resolution (blocks of `stride` × `stride`
/// photo pixels, ≤ 1 megapixel) and propagated through specimen blocks only (the field is
/// continuous through the material, not across holes), with chamfer steps of 1 and √2 blocks
/// in two raster passes; both only ever overestimate a distance (paths winding around
/// holes), which keeps *beyond range*: the cautious side.
pub(super) struct ClimbBound {
    /// Highest reachable order per block, fringes: infinite where no valued block reaches,
    /// −∞ outside the specimen (no bound to keep there).
    bound: Vec<f32>,
    width: usize,
    height: usize,
    stride: usize,
}

impl ClimbBound {
    /// The bound over `pass` (`width` × `height` blocks, `gradient` fringes per block); `None`
    /// when no block is beyond range.
    pub(super) fn of(
        pass: &Pass,
        gradient: f32,
        width: usize,
        height: usize,
        stride: usize,
    ) -> Option<ClimbBound> {
        let flags = &pass.flags;
        if !flags.iter().any(|f| f.has(PixelFlags::BEYOND_RANGE)) {
            return None;
        }
        let inside = |p: usize| !flags[p].has(PixelFlags::OUTSIDE_MASK);
        let mut bound: Vec<f32> = pass
            .order
            .iter()
            .zip(flags)
            .map(|(o, f)| {
                if f.0 == 0 && o.is_finite() {
                    *o
                } else {
                    f32::INFINITY
                }
            })
            .collect();
        let diagonal = gradient * std::f32::consts::SQRT_2;
        // Each block takes the bound of a neighbour already visited plus the climb to it:
        // (dx, dy, climb) for the forward raster order; the backward pass mirrors them.
        let earlier = [
            (-1i64, 0i64, gradient),
            (-1, -1, diagonal),
            (0, -1, gradient),
            (1, -1, diagonal),
        ];
        let mut relax = |x: usize, y: usize, sign: i64| {
            let p = y * width + x;
            if !inside(p) {
                return;
            }
            for &(dx, dy, climb) in &earlier {
                let (nx, ny) = (x as i64 + sign * dx, y as i64 + sign * dy);
                if nx < 0 || ny < 0 || nx >= width as i64 || ny >= height as i64 {
                    continue;
                }
                let q = ny as usize * width + nx as usize;
                if inside(q) && bound[q] + climb < bound[p] {
                    bound[p] = bound[q] + climb;
                }
            }
        };
        for y in 0..height {
            for x in 0..width {
                relax(x, y, 1);
            }
        }
        for y in (0..height).rev() {
            for x in (0..width).rev() {
                relax(x, y, -1);
            }
        }
        for (b, f) in bound.iter_mut().zip(flags) {
            if f.has(PixelFlags::OUTSIDE_MASK) {
                *b = f32::NEG_INFINITY;
            }
        }
        Some(ClimbBound {
            bound,
            width,
            height,
            stride,
        })
    }

    /// Flags *unreliable* instead of *beyond range* each pixel of `pass` (full resolution,
    /// `width` pixels a row) whose blocks cannot reach `top`. On block means a pixel took its
    /// flag from the blocks around it, so the highest bound of its own block and the eight
    /// around it decides; at full resolution (stride 1) the pixel's own bound.
    pub(super) fn flag_unreachable_beyond_as_steep(&self, pass: &mut Pass, top: f32, width: usize) {
        let around = usize::from(self.stride > 1);
        pass.flags
            .par_iter_mut()
            .enumerate()
            .filter(|(_, f)| f.has(PixelFlags::BEYOND_RANGE))
            .for_each(|(p, f)| {
                let (bx, by) = ((p % width) / self.stride, (p / width) / self.stride);
                let reachable = (by.saturating_sub(around)..=(by + around).min(self.height - 1))
                    .flat_map(|y| {
                        (bx.saturating_sub(around)..=(bx + around).min(self.width - 1))
                            .map(move |x| y * self.width + x)
                    })
                    .map(|b| self.bound[b])
                    .fold(f32::NEG_INFINITY, f32::max);
                if reachable < top {
                    f.0 = (f.0 & !PixelFlags::BEYOND_RANGE) | PixelFlags::UNRELIABLE;
                }
            });
    }
}

/// Half-width of the window the repairs fit planes of orders in, pixels.
pub(super) const REPAIR_RADIUS: i64 = 2;

/// The pixels of the (2·[`REPAIR_RADIUS`]+1)² window around (x, y) that lie in the image, as
/// `(dx, dy, index)`, row by row.
pub(super) fn repair_window(
    x: i64,
    y: i64,
    width: usize,
    height: usize,
) -> impl Iterator<Item = (i64, i64, usize)> {
    let r = REPAIR_RADIUS;
    (-r..=r)
        .flat_map(move |dy| (-r..=r).map(move |dx| (dx, dy)))
        .filter(move |&(dx, dy)| {
            let (nx, ny) = (x + dx, y + dy);
            nx >= 0 && ny >= 0 && nx < width as i64 && ny < height as i64
        })
        .map(move |(dx, dy)| (dx, dy, (y + dy) as usize * width + (x + dx) as usize))
}

/// Least-squares plane n = a + bx·dx + by·dy (fringes; dx, dy in pixels from (x, y)) through
/// the valued pixels of the (2·[`REPAIR_RADIUS`]+1)² window around (x, y): `(a, bx, by)`, or
/// `None` with fewer than four valued pixels or a degenerate layout.
pub(super) fn fit_plane(
    pass: &Pass,
    x: i64,
    y: i64,
    width: usize,
    height: usize,
) -> Option<(f64, f64, f64)> {
    let (mut s1, mut sx, mut sy, mut sxx, mut syy, mut sxy) = (0.0f64, 0.0, 0.0, 0.0, 0.0, 0.0);
    let (mut sn, mut sxn, mut syn) = (0.0f64, 0.0, 0.0);
    for (dx, dy, q) in repair_window(x, y, width, height) {
        if pass.flags[q].0 != 0 {
            continue;
        }
        let (fx, fy, n) = (dx as f64, dy as f64, f64::from(pass.order[q]));
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
    if s1 < 4.0 {
        return None;
    }
    solve3(
        [[s1, sx, sy], [sx, sxx, sxy], [sy, sxy, syy]],
        [sn, sxn, syn],
    )
}

/// Grows values into flagged specimen pixels next to valued ones, layer by layer (at most
/// [`REPAIR_LAYERS`]): `value(pass, p)` proposes `(order, residual)` for flagged pixel `p`
/// from the pass as the layer found it, and a layer's proposals are applied together. The
/// first layer tries every flagged pixel; later ones only those within [`REPAIR_RADIUS`] of a
/// pixel the layer before gave a value: elsewhere nothing around has changed, nor would the
/// outcome.
pub(super) fn grow_layers(
    pass: &mut Pass,
    width: usize,
    height: usize,
    value: impl Fn(&Pass, usize) -> Option<(f32, f32)> + Sync,
) {
    let r = REPAIR_RADIUS;
    let growable =
        |flags: &[PixelFlags], p: usize| flags[p].0 != 0 && !flags[p].has(PixelFlags::OUTSIDE_MASK);
    let mut candidates: Vec<usize> = (0..pass.order.len())
        .into_par_iter()
        .filter(|&p| growable(&pass.flags, p))
        .collect();
    let mut queued = vec![false; pass.order.len()];
    for _ in 0..REPAIR_LAYERS {
        let current = &*pass;
        let updates: Vec<(usize, f32, f32)> = candidates
            .par_iter()
            .filter_map(|&p| value(current, p).map(|(n, d)| (p, n, d)))
            .collect();
        if updates.is_empty() {
            break;
        }
        for &(p, n, d) in &updates {
            pass.order[p] = n;
            pass.residual[p] = d;
            pass.flags[p] = PixelFlags::default();
        }
        candidates.clear();
        for &(p, _, _) in &updates {
            let (x, y) = ((p % width) as i64, (p / width) as i64);
            for ny in (y - r).max(0)..=(y + r).min(height as i64 - 1) {
                for nx in (x - r).max(0)..=(x + r).min(width as i64 - 1) {
                    let q = ny as usize * width + nx as usize;
                    if !queued[q] && growable(&pass.flags, q) {
                        queued[q] = true;
                        candidates.push(q);
                    }
                }
            }
        }
        for &q in &candidates {
            queued[q] = false;
        }
    }
}

/// Grows values into flagged pixels next to valued ones ([`grow_layers`]): a plane fitted to
/// the valued pixels around predicts the order and its gradient G; the pixel's colour must then
/// match the table *averaged over the pixel footprint* (± G/2 around the order), since steep
/// fringes blur within a pixel, within a window of the prediction. Predictions above
/// `limits.ceiling` are not grown; matches worse than `limits.residual` stay flagged.
pub(super) fn repair_steep_edges(
    pass: &mut Pass,
    lab: &LabImage,
    fine: &SearchTable,
    limits: RepairLimits,
    width: usize,
    height: usize,
) {
    grow_layers(pass, width, height, |pass, p| {
        let (x, y) = ((p % width) as i64, (p / width) as i64);
        let (a, bx, by) = fit_plane(pass, x, y, width, height)?;
        let g = bx.hypot(by);
        if g > REPAIR_MAX_GRADIENT || a < 0.0 || a > limits.ceiling {
            return None;
        }
        let reach = 0.05 + 0.5 * g;
        let colour = lab.data[p];
        let lo = ((a - reach).max(0.0) / fine.step).floor() as usize;
        let hi = (((a + reach) / fine.step).ceil() as usize).min(fine.len() - 1);
        let g = g as f32;
        // Mean table colour over a footprint across the fringes.
        let averaged = |n: f32, footprint: Footprint| {
            let mut acc = [0f32; 3];
            for u in [-0.5, -0.25, 0.0, 0.25, 0.5] {
                let at = |width: f32| fine.colour_at(n + g * width * u);
                let l = at(footprint.lightness);
                let c = if footprint.chroma == footprint.lightness {
                    l
                } else {
                    at(footprint.chroma)
                };
                acc[0] += l.l / 5.0;
                acc[1] += c.a / 5.0;
                acc[2] += c.b / 5.0;
            }
            Lab::new(acc[0], acc[1], acc[2])
        };
        let subsampled = limits.subsampled_chroma
            && a >= SUBSAMPLED_CHROMA_MIN_ORDER
            && g * SUBSAMPLED_CHROMA.chroma <= SUBSAMPLED_CHROMA_MAX_SPAN;
        let footprints = PIXEL_FOOTPRINTS
            .iter()
            .chain(subsampled.then_some(&SUBSAMPLED_CHROMA));
        let (best_n, best_d) = (lo..=hi)
            .flat_map(|i| footprints.clone().map(move |f| (i, *f)))
            .map(|(i, footprint)| {
                let n = (i as f64 * fine.step) as f32;
                (n, delta_e_ab(colour, averaged(n, footprint)))
            })
            .min_by(|u, v| u.1.total_cmp(&v.1))?;
        (best_d < limits.residual).then_some((best_n, best_d))
    });
}

/// Past the end of the table colours repeat in paler form, so a region of orders near the
/// table's top whose colours match it markedly worse than the photo does elsewhere is more
/// likely an alias of orders beyond the table than a true value: such pixels (order within
/// [`ALIAS_RANGE`] of the top, mean residual over a (2·[`ALIAS_WINDOW`]+1)² window above
/// [`ALIAS_RESIDUAL_RATIO`] × the median residual over orders ≥
/// [`ALIAS_REFERENCE_MIN_ORDER`]) are flagged beyond range — the cautious reading, since
/// beyond range means higher stress.
pub(super) fn flag_poor_high_matches(pass: &mut Pass, top: f32, width: usize, height: usize) {
    let valued = |p: usize| pass.flags[p].0 == 0 && pass.residual[p].is_finite();
    let mut sample: Vec<f32> = (0..pass.order.len())
        .step_by((pass.order.len() / 50_000).max(1))
        .filter(|&p| valued(p) && pass.order[p] >= ALIAS_REFERENCE_MIN_ORDER)
        .map(|p| pass.residual[p])
        .collect();
    if sample.is_empty() {
        return;
    }
    let limit = (ALIAS_RESIDUAL_RATIO * median_f32(&mut sample)).max(ALIAS_RESIDUAL_MIN);
    let counted: Vec<bool> = (0..pass.order.len()).map(valued).collect();
    let local = window_means(&pass.residual, &counted, width, height, ALIAS_WINDOW);
    let flagged: Vec<usize> = (0..pass.order.len())
        .into_par_iter()
        .filter(|&p| valued(p) && pass.order[p] >= top - ALIAS_RANGE && local[p] > limit)
        .collect();
    for p in flagged {
        pass.flags[p].0 |= PixelFlags::BEYOND_RANGE;
    }
}

/// Means of `values` over (2r+1)² windows clipped at the image edges, counting only pixels
/// where `counted` holds; NaN where a window counts none. Separable running sums (in `f64`):
/// along each row, then down strips of rows, both in parallel.
pub(super) fn window_means(
    values: &[f32],
    counted: &[bool],
    width: usize,
    height: usize,
    r: usize,
) -> Vec<f32> {
    const STRIP: usize = 64;
    // Row pass: the window [x - r, x + r] slides one pixel at a time.
    let mut row_sums: Vec<(f64, u32)> = par_filled(values.len(), (0.0, 0));
    row_sums
        .par_chunks_mut(width)
        .zip(values.par_chunks(width))
        .zip(counted.par_chunks(width))
        .for_each(|((out, v), k)| {
            let term = |i: usize| if k[i] { (f64::from(v[i]), 1) } else { (0.0, 0) };
            let (mut s, mut n) = (0.0, 0);
            for i in 0..r.min(width) {
                let (tv, tn) = term(i);
                (s, n) = (s + tv, n + tn);
            }
            for (x, o) in out.iter_mut().enumerate() {
                if x + r < width {
                    let (tv, tn) = term(x + r);
                    (s, n) = (s + tv, n + tn);
                }
                if x > r {
                    let (tv, tn) = term(x - r - 1);
                    (s, n) = (s - tv, n - tn);
                }
                *o = (s, n);
            }
        });
    // Column pass: per strip of rows, running sums of whole rows of `row_sums`.
    let mut means = par_filled(values.len(), f32::NAN);
    means
        .par_chunks_mut(width * STRIP)
        .enumerate()
        .for_each(|(k, strip)| {
            let first = k * STRIP;
            let row = |y: usize| &row_sums[y * width..(y + 1) * width];
            // Adds row y's sums and counts to the running column sums (sign 1) or takes them out
            // (sign -1); counts are carried as f64, exact for whole numbers.
            let slide = |acc: &mut [(f64, f64)], y: usize, sign: f64| {
                for (a, (s, n)) in acc.iter_mut().zip(row(y)) {
                    *a = (a.0 + sign * s, a.1 + sign * f64::from(*n));
                }
            };
            let mut acc = vec![(0.0, 0.0); width];
            for (out, y) in strip.chunks_mut(width).zip(first..) {
                if y == first {
                    for yy in first.saturating_sub(r)..(first + r + 1).min(height) {
                        slide(&mut acc, yy, 1.0);
                    }
                } else {
                    if y + r < height {
                        slide(&mut acc, y + r, 1.0);
                    }
                    if y > r {
                        slide(&mut acc, y - r - 1, -1.0);
                    }
                }
                for (o, (s, n)) in out.iter_mut().zip(&acc) {
                    if *n > 0.0 {
                        *o = (s / n) as f32;
                    }
                }
            }
        });
    means
}

/// Colours washed out to the mean colour of high orders (`white`) say little about the order:
/// such a region is as likely far past the table, or a crowd of fringes finer than a pixel, as
/// a true order of the table. Valued pixels of order ≥ [`WASHED_OUT_FROM_ORDER`] are flagged
/// beyond range — the cautious reading — where, over their (2·[`WASHED_OUT_WINDOW`]+1)²
/// neighbourhood, the mean colour lies within [`WASHED_OUT_DISTANCE`] ΔE\*ab of `white` (noise
/// averages out) and the colours themselves stay within [`WASHED_OUT_SPREAD`] of it on average
/// (a ramp through many vivid colours can average to grey; it keeps its values).
pub(super) fn flag_washed_out(
    pass: &mut Pass,
    lab: &LabImage,
    white: Lab,
    inside: &[bool],
    width: usize,
    height: usize,
) {
    let component = |f: fn(&Lab) -> f32| {
        let values: Vec<f32> = lab.data.iter().map(f).collect();
        window_means(&values, inside, width, height, WASHED_OUT_WINDOW)
    };
    let (l, a, b) = (component(|c| c.l), component(|c| c.a), component(|c| c.b));
    let distance: Vec<f32> = lab.data.par_iter().map(|c| delta_e_ab(*c, white)).collect();
    let spread = window_means(&distance, inside, width, height, WASHED_OUT_WINDOW);
    pass.flags
        .par_iter_mut()
        .enumerate()
        .filter(|(p, f)| {
            f.0 == 0
                && pass.order[*p] >= WASHED_OUT_FROM_ORDER
                && spread[*p] <= WASHED_OUT_SPREAD
                && delta_e_ab(Lab::new(l[*p], a[*p], b[*p]), white) <= WASHED_OUT_DISTANCE
        })
        .for_each(|(_, f)| f.0 |= PixelFlags::BEYOND_RANGE);
}

/// Near the end of the table colours cannot tell whether the order still rises: valued pixels
/// within [`TOP_GUARD`] fringes of the table's top that lie next to a *beyond range* pixel are
/// flagged beyond range too, a few layers deep.
pub(super) fn extend_beyond_range(pass: &mut Pass, top: f32, width: usize, height: usize) {
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
pub(super) fn neighbours8(
    x: usize,
    y: usize,
    width: usize,
    height: usize,
) -> impl Iterator<Item = usize> {
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
pub(super) fn solve3(m: [[f64; 3]; 3], v: [f64; 3]) -> Option<(f64, f64, f64)> {
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
pub(super) fn neighbours4(
    x: usize,
    y: usize,
    width: usize,
    height: usize,
) -> impl Iterator<Item = usize> {
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
/// linear ramps exact and leaves edges of the valued area alone). Only pixels where
/// `selected` holds are smoothed (all of them for `None`); rows run in parallel.
pub(super) fn smooth(
    pass: &mut Pass,
    width: usize,
    height: usize,
    gradient: f32,
    selected: Option<&[bool]>,
) {
    let r = SMOOTH_RADIUS;
    if width <= 2 * r || height <= 2 * r {
        return;
    }
    let limit = 2.0 * gradient * r as f32;
    let count = ((2 * r + 1) * (2 * r + 1)) as f32;
    let (order, flags) = (&pass.order, &pass.flags);
    let mut smoothed: Vec<f32> = order.par_iter().copied().collect();
    smoothed
        .par_chunks_mut(width)
        .enumerate()
        .skip(r)
        .take(height - 2 * r)
        .for_each(|(y, out)| {
            for (x, o) in out.iter_mut().enumerate().take(width - r).skip(r) {
                let p = y * width + x;
                if flags[p].0 != 0 || selected.is_some_and(|s| !s[p]) {
                    continue;
                }
                let centre = order[p];
                let mut sum = 0.0;
                let whole = (y - r..=y + r).all(|ny| {
                    let span = ny * width + x - r..=ny * width + x + r;
                    order[span.clone()].iter().zip(&flags[span]).all(|(v, f)| {
                        sum += v;
                        f.0 == 0 && (v - centre).abs() <= limit
                    })
                });
                if whole {
                    *o = sum / count;
                }
            }
        });
    pass.order = smoothed;
}

/// Orders are continuous: a region past the table's top is ringed by orders that climb to
/// that top. A region of pixels whose aggregated winner is *beyond range* (`winners`, label
/// indices) and whose rim of other winners lies more than [`BEYOND_RIM_BELOW_TOP`] below the
/// top — all but at most a share [`BEYOND_RIM_HIGH_SHARE`] of it, so that a few noisy rim
/// pixels do not decide — cannot be past the table: its colours (pale second- and third-order
/// tints under some lights and plates, or tints shifted by chromatic plates where the
/// isoclinic turns) merely resemble the washed-out ones. Measured on working seeds 1–140
/// against "wholly" (share 0): false-beyond misses 44 → 35, coverage 16 → 14, past-table
/// misses 13 → 13 (mean valued share unchanged), jumps 21 → 22. Returns, per pixel, whether
/// *beyond range* is ruled out there. Regions with fewer than [`BEYOND_RIM_MIN_PIXELS`] rim
/// pixels keep the label (the cautious reading).
pub(super) fn beyond_ruled_out(
    winners: &[usize],
    labels: &[Labels],
    top: f32,
    width: usize,
    height: usize,
) -> Vec<bool> {
    let n = winners.len();
    let beyond = |p: usize| winners[p] == BEYOND;
    let mut ruled_out = vec![false; n];
    let mut seen = vec![false; n];
    let mut on_rim = vec![false; n];
    let mut stack = Vec::new();
    for start in 0..n {
        if seen[start] || !beyond(start) {
            continue;
        }
        seen[start] = true;
        stack.push(start);
        let (mut region, mut rim) = (Vec::new(), Vec::new());
        while let Some(p) = stack.pop() {
            region.push(p);
            for q in neighbours8(p % width, p / width, width, height) {
                if beyond(q) {
                    if !seen[q] {
                        seen[q] = true;
                        stack.push(q);
                    }
                } else if winners[q] < BEYOND && !on_rim[q] {
                    on_rim[q] = true;
                    rim.push(q);
                }
            }
        }
        let high = rim
            .iter()
            .filter(|&&q| labels[q].order[winners[q]] >= top - BEYOND_RIM_BELOW_TOP)
            .count() as f64
            > BEYOND_RIM_HIGH_SHARE * rim.len() as f64;
        for &q in &rim {
            on_rim[q] = false;
        }
        if rim.len() >= BEYOND_RIM_MIN_PIXELS && !high {
            for p in region {
                ruled_out[p] = true;
            }
        }
    }
    ruled_out
}

/// See [`beyond_ruled_out`]: how far below the table's top (fringes) every rim pixel of a
/// beyond-range region must lie for the label to be ruled out.
pub(super) const BEYOND_RIM_BELOW_TOP: f32 = 1.0;
/// See [`beyond_ruled_out`].
pub(super) const BEYOND_RIM_MIN_PIXELS: usize = 8;
/// See [`beyond_ruled_out`]: the share of rim pixels within [`BEYOND_RIM_BELOW_TOP`] of the top
/// above which the region keeps *beyond range* (a ring of the top, not a few noisy pixels).
pub(super) const BEYOND_RIM_HIGH_SHARE: f64 = 0.1;

/// Past the table, where colours have washed out to a grey that some table order's tint
/// passes close to, the labelling can hold a whole zone at that one order: a plateau (a disc
/// of the CI draw read 3.86 over 24 rows where the truth ran from 4.8 to 19). Orders are
/// continuous and climb towards a zone past the table, so a flat zone (every valued neighbour
/// within [`PLATEAU_STEP`]) that touches a *confirmed* beyond-range region — one whose rim
/// holds a valued pixel within [`PLATEAU_BELOW_TOP`] of the top — is an alias of it. The
/// plateau, grown over flat pixels within [`PLATEAU_SPAN`] of the first pixel's order, is
/// flagged beyond range (the cautious reading). Measured on the generated scenes: scenes with
/// pixels past the table valued, CI draw 5 → 2 of 40, held out 59 → 53 of 300 (95th
/// percentile of the valued share 72 % → 41 %), at a cost of coverage misses 27 → 29 and
/// false-beyond misses 84 → 88; the 12-megapixel benchmark's coverage 99.32 → 98.78 %.
pub(super) fn flag_plateaus_at_beyond_range(
    pass: &mut Pass,
    top: f32,
    width: usize,
    height: usize,
) {
    let n = pass.flags.len();
    let valued = |flags: &[PixelFlags], p: usize| flags[p].0 == 0;
    let flat = |p: usize| {
        neighbours4(p % width, p / width, width, height)
            .filter(|&q| valued(&pass.flags, q))
            .all(|q| (pass.order[q] - pass.order[p]).abs() <= PLATEAU_STEP)
    };
    // Beyond-range regions (8-connected) whose rim holds a valued pixel near the top: a
    // confirmed climb past the table.
    let mut component = vec![usize::MAX; n];
    let mut confirmed = Vec::new();
    let mut stack = Vec::new();
    for start in 0..n {
        if component[start] != usize::MAX || !pass.flags[start].has(PixelFlags::BEYOND_RANGE) {
            continue;
        }
        let id = confirmed.len();
        let mut high = false;
        component[start] = id;
        stack.push(start);
        while let Some(p) = stack.pop() {
            for q in neighbours8(p % width, p / width, width, height) {
                if pass.flags[q].has(PixelFlags::BEYOND_RANGE) {
                    if component[q] == usize::MAX {
                        component[q] = id;
                        stack.push(q);
                    }
                } else if valued(&pass.flags, q) && pass.order[q] >= top - PLATEAU_BELOW_TOP {
                    high = true;
                }
            }
        }
        confirmed.push(high);
    }
    let seeds: Vec<usize> = (0..n)
        .filter(|&p| {
            valued(&pass.flags, p)
                && neighbours8(p % width, p / width, width, height)
                    .any(|q| component[q] != usize::MAX && confirmed[component[q]])
                && flat(p)
        })
        .collect();
    let mut flagged = vec![false; n];
    for seed in seeds {
        if flagged[seed] {
            continue;
        }
        let level = pass.order[seed];
        flagged[seed] = true;
        stack.push(seed);
        while let Some(p) = stack.pop() {
            for q in neighbours4(p % width, p / width, width, height) {
                if !flagged[q]
                    && valued(&pass.flags, q)
                    && (pass.order[q] - level).abs() <= PLATEAU_SPAN
                    && flat(q)
                {
                    flagged[q] = true;
                    stack.push(q);
                }
            }
        }
    }
    for (f, flagged) in pass.flags.iter_mut().zip(flagged) {
        if flagged {
            f.0 |= PixelFlags::BEYOND_RANGE;
        }
    }
}

/// Orders climb towards a zone past the table. Where the colours past the table resemble the
/// table's last fringe, the labelling folds back instead: the read orders rise to a ridge near
/// the top and then fall and wander (a disc's contact read 4.22, 4.07, 4.18, 4.10 over 16
/// pixels where the truth climbed from 4.4 to 6). So the valued pixels within
/// [`NEAR_TABLE_TOP`] of the top `top` — where the map's caution already says values may be
/// aliases — keep their value only where a path from the lower orders reaches them without
/// ever falling below the highest order the path has surely met: every order is taken with
/// its noise, `sigma` (1 σ, fringes, as [`super::uncertainty`] gives it), and a path may step
/// on where the order plus [`FOLD_SIGMAS`] σ reaches the highest order minus its own
/// [`FOLD_SIGMAS`] σ met on the way. Those of a region touching *beyond range* that no such
/// path reaches are flagged beyond range (the cautious reading). Regions of near-top pixels
/// without lower orders beside them are left to [`flag_unanchored_high_regions`].
pub(super) fn flag_folds_at_beyond_range(
    pass: &mut Pass,
    sigma: &[f32],
    top: f32,
    width: usize,
    height: usize,
) {
    use std::cmp::Reverse;
    use std::collections::BinaryHeap;
    let near = top - NEAR_TABLE_TOP as f32;
    let valued = |p: usize| pass.flags[p].0 == 0 && pass.order[p].is_finite();
    let high = |p: usize| valued(p) && pass.order[p] >= near;
    let spread = |p: usize| FOLD_SIGMAS * if sigma[p].is_finite() { sigma[p] } else { 0.0 };
    // Least running maximum of order − spread (bits of a non-negative f32 order, which sort as
    // the numbers do) with which each near-top pixel is reached from the lower orders.
    let n = pass.order.len();
    let mut reached = vec![u32::MAX; n];
    let mut queue = BinaryHeap::new();
    for p in (0..n).filter(|&p| high(p)) {
        let below = neighbours4(p % width, p / width, width, height)
            .any(|q| valued(q) && pass.order[q] < near);
        if below {
            let key = (pass.order[p] - spread(p)).max(0.0).to_bits();
            reached[p] = key;
            queue.push(Reverse((key, p)));
        }
    }
    while let Some(Reverse((key, p))) = queue.pop() {
        if key > reached[p] {
            continue;
        }
        let running = f32::from_bits(key);
        for q in neighbours4(p % width, p / width, width, height) {
            if !high(q) || pass.order[q] + spread(q) < running {
                continue;
            }
            let next = running.max(pass.order[q] - spread(q)).max(0.0).to_bits();
            if next < reached[q] {
                reached[q] = next;
                queue.push(Reverse((next, q)));
            }
        }
    }
    // Unreached near-top pixels, grouped into 4-connected regions; those touching beyond
    // range that fall from a reached pixel within FOLD_REACH faster than FOLD_RATE (beyond
    // both readings' noise) are folds. A slower fall is a field sinking past a rise.
    let reached_at = |p: usize| high(p) && reached[p] != u32::MAX;
    let steep_below = |p: usize| {
        let (x, y) = ((p % width) as i64, (p / width) as i64);
        let r = FOLD_REACH as i64;
        (-r..=r).any(|dy| {
            (-r..=r).any(|dx| {
                let (qx, qy) = (x + dx, y + dy);
                if qx < 0 || qy < 0 || qx >= width as i64 || qy >= height as i64 {
                    return false;
                }
                let q = qy as usize * width + qx as usize;
                let distance = ((dx * dx + dy * dy) as f32).sqrt();
                reached_at(q)
                    && (pass.order[q] - spread(q)) - (pass.order[p] + spread(p))
                        > FOLD_RATE * distance
            })
        })
    };
    let mut seen = vec![false; n];
    let mut stack = Vec::new();
    let mut folded = Vec::new();
    for start in 0..n {
        if seen[start] || !high(start) || reached[start] != u32::MAX {
            continue;
        }
        seen[start] = true;
        stack.push(start);
        let (mut region, mut beyond, mut steep) = (Vec::new(), false, false);
        while let Some(p) = stack.pop() {
            region.push(p);
            steep = steep || steep_below(p);
            for q in neighbours4(p % width, p / width, width, height) {
                beyond |= pass.flags[q].has(PixelFlags::BEYOND_RANGE);
                if !seen[q] && high(q) && reached[q] == u32::MAX {
                    seen[q] = true;
                    stack.push(q);
                }
            }
        }
        if beyond && steep {
            folded.extend(region);
        }
    }
    for p in folded {
        pass.flags[p].0 |= PixelFlags::BEYOND_RANGE;
    }
}

/// See [`flag_folds_at_beyond_range`]: how many standard uncertainties an order may lie
/// either side of its reading.
pub(super) const FOLD_SIGMAS: f32 = 2.0;
/// See [`flag_folds_at_beyond_range`]: the fastest fall (fringes per pixel) a field sinking
/// past a rise near the table's top shows; folds fall about as fast as the orders rose.
pub(super) const FOLD_RATE: f32 = 0.05;
/// See [`flag_folds_at_beyond_range`]: how far (pixels) from a reached pixel a fall is
/// measured.
pub(super) const FOLD_REACH: usize = 4;

/// See [`flag_plateaus_at_beyond_range`], fringes.
pub(super) const PLATEAU_BELOW_TOP: f32 = 0.3;
/// See [`flag_plateaus_at_beyond_range`], fringes per pixel.
pub(super) const PLATEAU_STEP: f32 = 0.02;
/// See [`flag_plateaus_at_beyond_range`], fringes.
pub(super) const PLATEAU_SPAN: f32 = 0.1;

#[cfg(test)]
mod tests {
    use super::*;

    /// A 9 × 5 field of winners: label 0 at order `rim` everywhere but a 3 × 1 block of
    /// *beyond range* in the middle.
    fn beyond_block(rim: f32) -> (Vec<usize>, Vec<Labels>) {
        let (w, h) = (9, 5);
        let mut winners = vec![0; w * h];
        for x in 3..6 {
            winners[2 * w + x] = BEYOND;
        }
        let mut label = NO_LABELS;
        label.order[0] = rim;
        (winners, vec![label; w * h])
    }

    /// A pass valued everywhere at `order` (row-major), residuals and margins 1.
    fn valued_pass(order: Vec<f32>) -> Pass {
        let n = order.len();
        Pass {
            order,
            residual: vec![1.0; n],
            margin: vec![1.0; n],
            flags: vec![PixelFlags::default(); n],
        }
    }

    /// Flags columns 0 and 1 of every row beyond range.
    fn flag_first_two_columns_beyond(pass: &mut Pass, width: usize, height: usize) {
        for y in 0..height {
            for x in 0..2 {
                pass.flags[y * width + x].0 = PixelFlags::BEYOND_RANGE;
            }
        }
    }

    /// 14 × 4 pixels: columns 0–1 beyond range, columns 2–7 a plateau at `plateau`, columns
    /// 8–13 a ramp down from it, 0.15 fringe per pixel; pixel (8, 0) is near the top and
    /// confirms the beyond-range region.
    fn plateau_pass(plateau: f32) -> Pass {
        let (width, height) = (14, 4);
        let n = width * height;
        let mut pass = valued_pass(
            (0..n)
                .map(|p| match p % width {
                    x if x < 8 => plateau,
                    x => plateau - 0.15 * (x - 7) as f32,
                })
                .collect(),
        );
        flag_first_two_columns_beyond(&mut pass, width, height);
        pass.order[2] = 4.35;
        pass
    }

    #[test]
    fn a_flat_plateau_against_a_confirmed_beyond_range_region_is_flagged_and_a_ramp_is_not() {
        // Orders are continuous: a flat zone held at one order beside orders past the table is
        // an alias of them. source: common practice, no source.
        let (width, height, top) = (14, 4, 4.4);
        let mut pass = plateau_pass(3.86);
        flag_plateaus_at_beyond_range(&mut pass, top, width, height);
        let beyond_columns: Vec<usize> = (0..width)
            .filter(|&x| pass.flags[2 * width + x].has(PixelFlags::BEYOND_RANGE))
            .collect();
        // Row 2: the plateau up to column 6 (column 7 borders the ramp, so is not flat), never
        // the ramp.
        assert_eq!(beyond_columns, (0..7).collect::<Vec<_>>());
        // Without a rim pixel near the top the beyond-range region is not confirmed.
        let mut unconfirmed = plateau_pass(3.86);
        unconfirmed.order[2] = 3.86;
        flag_plateaus_at_beyond_range(&mut unconfirmed, top, width, height);
        assert!((0..width * height)
            .filter(|p| p % width >= 2)
            .all(|p| !unconfirmed.flags[p].has(PixelFlags::BEYOND_RANGE)));
    }

    #[test]
    fn beyond_range_is_ruled_out_only_inside_a_rim_well_below_the_table_top() {
        // Orders are continuous: a region past a 4.4-fringe table must be ringed by orders
        // near 4.4. source: common practice, no source.
        let (winners, labels) = beyond_block(1.7);
        let ruled_out = beyond_ruled_out(&winners, &labels, 4.4, 9, 5);
        let expected: Vec<bool> = winners.iter().map(|&k| k == BEYOND).collect();
        assert_eq!(ruled_out, expected);
        // A rim at 3.6 lies within a fringe of the top: the region keeps its label.
        let (winners, labels) = beyond_block(3.6);
        assert!(!beyond_ruled_out(&winners, &labels, 4.4, 9, 5)
            .iter()
            .any(|&r| r));
        // The 12-pixel rim at 1.7 with one pixel at 3.6 (a share of 1/12, below 0.1) is still
        // well below the top; with two (1/6) it is not.
        let (winners, mut labels) = beyond_block(1.7);
        labels[9 + 2].order[0] = 3.6;
        assert_eq!(beyond_ruled_out(&winners, &labels, 4.4, 9, 5), expected);
        labels[3 * 9 + 6].order[0] = 3.6;
        assert!(!beyond_ruled_out(&winners, &labels, 4.4, 9, 5)
            .iter()
            .any(|&r| r));
    }

    #[test]
    fn a_pixel_darker_than_the_tables_zero_order_reads_as_it() {
        let black = Lab::new(14.6, -0.6, -9.2);
        assert_eq!(
            super::super::floored_at_black(Lab::new(0.0, 0.0, 0.0), black),
            black
        );
        let grey = Lab::new(20.0, 0.0, 0.0);
        assert_eq!(super::super::floored_at_black(grey, black), grey);
    }

    #[test]
    fn upper_fringe_regions_next_to_beyond_range_are_flagged_unless_low_orders_or_a_hint_anchor_them(
    ) {
        // 12 × 4 pixels: columns 0–1 beyond range; columns 2–11 a gentle ramp.
        let (width, height, top, gradient) = (12, 4, 4.4, 0.2);
        let pass_with = |lowest: f32| {
            let n = width * height;
            let mut pass = valued_pass(
                (0..n)
                    .map(|p| lowest + 0.05 * (11 - p % width) as f32)
                    .collect(),
            );
            flag_first_two_columns_beyond(&mut pass, width, height);
            pass
        };
        let beyond = |pass: &Pass| {
            (0..width * height)
                .filter(|&p| p % width >= 2 && pass.flags[p].has(PixelFlags::BEYOND_RANGE))
                .count()
        };
        // Orders 3.9–4.35 only: nothing anchors them.
        let mut upper = pass_with(3.9);
        flag_unanchored_high_regions(&mut upper, top, &[], width, height, gradient);
        assert_eq!(beyond(&upper), 10 * height);
        // The same with a hint inside.
        let mut hinted = pass_with(3.9);
        flag_unanchored_high_regions(&mut hinted, top, &[width + 6], width, height, gradient);
        assert_eq!(beyond(&hinted), 0);
        // A ramp that comes down to 2.0 is anchored by its low orders.
        let mut anchored = pass_with(2.0);
        flag_unanchored_high_regions(&mut anchored, top, &[], width, height, gradient);
        assert_eq!(beyond(&anchored), 0);
    }

    /// A 9 × 9 specimen (all but the corner pixel (0, 0) inside the mask) valued at order 1: a ring of beyond-range pixels
    /// (the square between columns/rows 2 and 6) around a valued 3 × 3 core, whose pixel
    /// (4, 4) reads `core_centre`; `gap` replaces the ring's pixel (4, 2) by a valued pixel
    /// of order 1 or, for `Some(PixelFlags::UNRELIABLE)`, an unreliable one.
    fn ringed_core(gap: Option<u8>, opening: f32) -> (Pass, usize, usize) {
        let (width, height) = (9, 9);
        let n = width * height;
        let mut pass = valued_pass(vec![1.0; n]);
        for p in 0..n {
            let (x, y) = (p % width, p / width);
            if (2..=6).contains(&x)
                && (2..=6).contains(&y)
                && (x == 2 || x == 6 || y == 2 || y == 6)
            {
                pass.flags[p].0 = PixelFlags::BEYOND_RANGE;
            }
        }
        // A mask: the corner pixel lies outside it.
        pass.flags[0].0 = PixelFlags::OUTSIDE_MASK;
        if let Some(bits) = gap {
            pass.flags[2 * width + 4].0 = bits;
            pass.order[2 * width + 4] = opening;
        }
        (pass, width, height)
    }

    /// The core's pixels (3..=5 × 3..=5) that carry `bits`.
    fn core_flagged(pass: &Pass, width: usize, bits: u8) -> usize {
        (3..=5)
            .flat_map(|y| (3..=5).map(move |x| y * width + x))
            .filter(|&p| pass.flags[p].has(bits))
            .count()
    }

    #[test]
    fn valued_regions_cut_off_from_the_edge_are_flagged_unless_hinted_or_joined_without_a_jump() {
        let jump = 0.3;
        // Ringed by beyond range: flagged beyond range.
        let (mut closed, width, height) = ringed_core(None, 0.0);
        flag_cut_off_regions(&mut closed, &[], width, height, jump);
        assert_eq!(core_flagged(&closed, width, PixelFlags::BEYOND_RANGE), 9);
        // A hint inside the core anchors it.
        let (mut hinted, width, height) = ringed_core(None, 0.0);
        flag_cut_off_regions(&mut hinted, &[4 * width + 4], width, height, jump);
        assert_eq!(core_flagged(&hinted, width, u8::MAX), 0);
        // A gap of unreliable pixels does not anchor it: their orders are unknown.
        let (mut unreliable, width, height) = ringed_core(Some(PixelFlags::UNRELIABLE), 1.0);
        flag_cut_off_regions(&mut unreliable, &[], width, height, jump);
        assert_eq!(
            core_flagged(&unreliable, width, PixelFlags::BEYOND_RANGE),
            9
        );
        // A valued gap that continues the orders joins the core to the edge.
        let (mut open, width, height) = ringed_core(Some(0), 1.0);
        flag_cut_off_regions(&mut open, &[], width, height, jump);
        assert_eq!(core_flagged(&open, width, u8::MAX), 0);
        // A valued gap with a jump of 0.5 on both sides does not.
        let (mut jumped, width, height) = ringed_core(Some(0), 1.5);
        flag_cut_off_regions(&mut jumped, &[], width, height, jump);
        assert_eq!(core_flagged(&jumped, width, PixelFlags::BEYOND_RANGE), 9);
        // Without a mask the specimen's edge is unknown: nothing is cut off.
        let (mut unmasked, width, height) = ringed_core(None, 0.0);
        unmasked.flags[0].0 = 0;
        flag_cut_off_regions(&mut unmasked, &[], width, height, jump);
        assert_eq!(core_flagged(&unmasked, width, u8::MAX), 0);
    }

    #[test]
    fn edge_band_pixels_near_beyond_range_are_flagged_and_deeper_ones_are_not() {
        // One row of 12 pixels: outside the mask at x = 0, valued at x = 1..=10, beyond range
        // at x = 11. The band is x = 1..=3 (depths 0..=2); a beyond-range pixel within 3
        // pixels of x = 1..=3 exists only for x ≥ 8, so nothing is flagged...
        let (width, top) = (12, 4.4);
        let pass_with_beyond_at = |b: usize| {
            let mut pass = Pass::empty(width);
            pass.order.iter_mut().for_each(|o| *o = 3.6);
            pass.flags[0].0 = PixelFlags::OUTSIDE_MASK;
            pass.flags[b].0 = PixelFlags::BEYOND_RANGE;
            pass
        };
        let mut far = pass_with_beyond_at(11);
        flag_edge_band_near_beyond_range(&mut far, top, width, 1);
        assert!(far.flags[1..11].iter().all(|f| f.0 == 0));
        // ... while beyond range at x = 5 reaches the band pixels x = 2 and 3 (within 3), not
        // x = 1 (4 away), and never the deeper pixels x = 4 and 6.
        let mut near = pass_with_beyond_at(5);
        flag_edge_band_near_beyond_range(&mut near, top, width, 1);
        let flagged: Vec<usize> = (0..width)
            .filter(|&p| p != 5 && near.flags[p].has(PixelFlags::BEYOND_RANGE))
            .collect();
        assert_eq!(flagged, vec![2, 3]);
        assert!(near.order[2].is_nan() && near.order[1] == 3.6 && near.order[4] == 3.6);
        // A band pixel more than a fringe below the top is no alias of orders past the table.
        let mut low = pass_with_beyond_at(5);
        low.order[2] = 3.3;
        flag_edge_band_near_beyond_range(&mut low, top, width, 1);
        assert!(low.flags[2].0 == 0 && low.flags[3].has(PixelFlags::BEYOND_RANGE));
    }

    #[test]
    fn beyond_range_no_resolvable_climb_can_reach_becomes_unreliable() {
        // One row: valued 2.0 at x = 0, beyond range at x = 1..=13. At 0.25 fringe per pixel
        // the field reaches 2.0 + 0.25·x, the top 4.5 first at x = 10: x = 1..=9 are too close
        // to a low order to lie past the table and become unreliable; x = 10..=13 stay beyond.
        // source: common practice, no source (orders are continuous through the material).
        let (width, top, gradient) = (14, 4.5, 0.25);
        let row = || {
            let mut pass = Pass::empty(width);
            pass.order[0] = 2.0;
            for f in &mut pass.flags[1..] {
                f.0 = PixelFlags::BEYOND_RANGE;
            }
            pass
        };
        let steepen = |pass: &mut Pass| {
            if let Some(climb) = ClimbBound::of(pass, gradient, width, 1, 1) {
                climb.flag_unreachable_beyond_as_steep(pass, top, width);
            }
        };
        let mut pass = row();
        steepen(&mut pass);
        let unreliable: Vec<usize> = (0..width)
            .filter(|&p| pass.flags[p].0 == PixelFlags::UNRELIABLE)
            .collect();
        assert_eq!(unreliable, (1..=9).collect::<Vec<_>>());
        assert!(pass.flags[10..]
            .iter()
            .all(|f| f.0 == PixelFlags::BEYOND_RANGE));
        assert!(
            pass.order[1..].iter().all(|o| o.is_nan()),
            "no pixel gains a value"
        );
        // The field is continuous through the material only: across a pixel outside the mask
        // nothing bounds the climb.
        let mut cut = row();
        cut.flags[1].0 = PixelFlags::OUTSIDE_MASK;
        steepen(&mut cut);
        assert!(cut.flags[2..]
            .iter()
            .all(|f| f.0 == PixelFlags::BEYOND_RANGE));
    }

    #[test]
    fn on_block_means_a_pixel_keeps_beyond_range_while_any_block_around_it_can_reach_the_top() {
        // Five blocks of 2 × 2 pixels in a row: block 0 valued 1.0, blocks 1–4 beyond range;
        // one fringe per block, so the bounds climb 1, 2, 3, 4, 5 and the top is 4.4.
        let blocks = {
            let mut pass = Pass::empty(5);
            pass.order[0] = 1.0;
            for f in &mut pass.flags[1..] {
                f.0 = PixelFlags::BEYOND_RANGE;
            }
            pass
        };
        let climb = ClimbBound::of(&blocks, 1.0, 5, 1, 2).unwrap();
        // Full resolution, 10 × 2: x = 0 valued, x = 1..=9 beyond range (x = 1 lies in block 0
        // but took the flag of block 1). The highest bound over a pixel's block and its
        // neighbours: x = 0–1 → 2, x = 2–3 → 3, x = 4–5 → 4, x = 6–9 → 5.
        let mut pass = Pass::empty(20);
        for y in 0..2 {
            pass.order[y * 10] = 1.0;
            for x in 1..10 {
                pass.flags[y * 10 + x].0 = PixelFlags::BEYOND_RANGE;
            }
        }
        climb.flag_unreachable_beyond_as_steep(&mut pass, 4.4, 10);
        let row: Vec<u8> = pass.flags[10..].iter().map(|f| f.0).collect();
        let (u, b) = (PixelFlags::UNRELIABLE, PixelFlags::BEYOND_RANGE);
        assert_eq!(row, vec![0, u, u, u, u, u, b, b, b, b]);
    }

    #[test]
    fn near_top_orders_that_fall_back_fast_before_beyond_range_are_flagged_as_a_fold() {
        // One row each, table top 4.4 (near-top band from 3.4), beyond range at the right end,
        // every reading with σ = 0.015 fringe.
        // source: common practice, no source (orders climb continuously towards a zone past
        // the table; colours past it repeat the table's upper fringes in paler form).
        let run = |orders: &[f32]| {
            let width = orders.len() + 1;
            let mut pass = Pass::empty(width);
            pass.order[..orders.len()].copy_from_slice(orders);
            pass.flags[width - 1].0 = PixelFlags::BEYOND_RANGE;
            flag_folds_at_beyond_range(&mut pass, &vec![0.015; width], 4.4, width, 1);
            (0..orders.len())
                .filter(|&p| pass.flags[p].has(PixelFlags::BEYOND_RANGE))
                .collect::<Vec<_>>()
        };
        // A climb to a ridge at 4.2 that falls back 0.15 fringe per pixel and wanders before
        // beyond range: from x = 7, below the ridge beyond both readings' noise, the stretch is
        // a fold.
        let fold = [3.0, 3.2, 3.4, 3.6, 3.8, 4.0, 4.2, 4.05, 3.9, 3.8, 3.85];
        assert_eq!(run(&fold), vec![7, 8, 9, 10]);
        // A climb straight into beyond range keeps every value.
        let ramp = [3.0, 3.2, 3.4, 3.6, 3.8, 4.0, 4.2, 4.3];
        assert!(run(&ramp).is_empty());
        // So does a flat stretch whose noise stays within 2 σ.
        let flat = [
            3.0, 3.5, 3.9, 3.96, 3.92, 3.96, 3.92, 3.96, 3.92, 3.96, 3.92,
        ];
        assert!(run(&flat).is_empty());
        // And a field that sinks slowly past a rise (0.01 fringe per pixel, as a plate's
        // remote field does beyond the ridge around a hole) before climbing into beyond range.
        let sink: Vec<f32> = [3.0, 3.4, 3.8, 4.2]
            .into_iter()
            .chain((1..=20).map(|k| 4.2 - 0.01 * k as f32))
            .chain([4.1, 4.2, 4.3])
            .collect();
        assert!(run(&sink).is_empty());
    }

    #[test]
    fn the_climb_bound_matches_a_naive_minimum_over_every_valued_pixel() {
        // A 40 × 150 rectangle, a few valued pixels, the rest beyond range: for every pixel the
        // flags must follow the least N_q + gradient · (chamfer distance to q) over all valued
        // pixels q, computed naively. Pixels whose naive bound
        // lies within 1e-3 of the top are left out: rounding may tip them either way.
        let (width, height, top, gradient) = (40usize, 150usize, 4.4f32, 0.2f32);
        let valued = [
            (0usize, 0usize, 3.9f32),
            (39, 149, 1.0),
            (20, 63, 3.0),
            (20, 66, 2.2),
            (5, 128, 0.5),
            (33, 100, 4.1),
        ];
        let mut pass = Pass::empty(width * height);
        pass.flags
            .iter_mut()
            .for_each(|f| f.0 = PixelFlags::BEYOND_RANGE);
        for &(x, y, o) in &valued {
            pass.flags[y * width + x].0 = 0;
            pass.order[y * width + x] = o;
        }
        let naive = |p: usize| {
            let (x, y) = (p % width, p / width);
            valued
                .iter()
                .map(|&(qx, qy, o)| {
                    let (dx, dy) = (x.abs_diff(qx) as f32, y.abs_diff(qy) as f32);
                    let (long, short) = (dx.max(dy), dx.min(dy));
                    o + gradient * (long - short) + gradient * std::f32::consts::SQRT_2 * short
                })
                .fold(f32::INFINITY, f32::min)
        };
        let before = pass.flags.clone();
        let climb = ClimbBound::of(&pass, gradient, width, height, 1).unwrap();
        climb.flag_unreachable_beyond_as_steep(&mut pass, top, width);
        let (mut steep, mut kept) = (0, 0);
        for p in (0..width * height).filter(|&p| before[p].0 != 0) {
            let bound = naive(p);
            if (bound - top).abs() < 1e-3 {
                continue;
            }
            let expected = if bound < top {
                steep += 1;
                PixelFlags::UNRELIABLE
            } else {
                kept += 1;
                PixelFlags::BEYOND_RANGE
            };
            assert_eq!(pass.flags[p].0, expected, "pixel {p}, bound {bound}");
        }
        assert!(steep > 500 && kept > 500, "{steep} {kept}");
    }

    #[test]
    fn window_means_match_the_naive_mean_over_each_clipped_window() {
        use rand::{Rng, SeedableRng};
        // Taller than one strip of the column pass (64 rows), so strips meet twice.
        let (width, height, r) = (23, 150, 3);
        let mut rng = rand::rngs::StdRng::seed_from_u64(11);
        let values: Vec<f32> = (0..width * height)
            .map(|_| rng.random_range(-50.0..50.0))
            .collect();
        // Every pixel counted except a block and a scatter; one window counts nothing.
        let counted: Vec<bool> = (0..width * height)
            .map(|p| {
                let (x, y) = (p % width, p / width);
                !(x >= 14 && y >= 8) && rng.random_range(0..5) > 0
            })
            .collect();
        let fast = window_means(&values, &counted, width, height, r);
        for y in 0..height {
            for x in 0..width {
                let (mut sum, mut n) = (0.0f64, 0);
                for yy in y.saturating_sub(r)..(y + r + 1).min(height) {
                    for xx in x.saturating_sub(r)..(x + r + 1).min(width) {
                        if counted[yy * width + xx] {
                            sum += f64::from(values[yy * width + xx]);
                            n += 1;
                        }
                    }
                }
                let got = fast[y * width + x];
                if n == 0 {
                    assert!(got.is_nan(), "({x}, {y}) counts nothing but got {got}");
                } else {
                    let want = sum / f64::from(n);
                    assert!(
                        (f64::from(got) - want).abs() < 1e-4,
                        "({x}, {y}): {got} vs {want}"
                    );
                }
            }
        }
        assert!(
            fast.iter().any(|m| m.is_nan()),
            "the test should hold an empty window"
        );
    }

    #[test]
    fn smoothing_averages_whole_windows_keeps_ramps_and_leaves_steps_flags_and_unselected_pixels_alone(
    ) {
        // A 13 × 13 ramp 0.1 x + 0.05 y with a bump of 0.5 at (4, 4), a step of 3 fringes
        // from x = 10 on and a flagged pixel at (4, 10); gradient 0.25, so a window may span
        // 2 · 0.25 · 2 = 1 fringe around its centre.
        let (width, height, gradient) = (13, 13, 0.25);
        let ramp = |x: usize, y: usize| 0.1 * x as f32 + 0.05 * y as f32;
        let build = || {
            let n = width * height;
            let mut pass = Pass {
                order: (0..n)
                    .map(|p| {
                        let (x, y) = (p % width, p / width);
                        ramp(x, y)
                            + if (x, y) == (4, 4) { 0.5 } else { 0.0 }
                            + if x >= 10 { 3.0 } else { 0.0 }
                    })
                    .collect(),
                residual: vec![0.0; n],
                margin: vec![0.0; n],
                flags: vec![PixelFlags::default(); n],
            };
            pass.flags[10 * width + 4].0 = PixelFlags::UNRELIABLE;
            pass
        };
        let mut pass = build();
        let input = pass.order.clone();
        smooth(&mut pass, width, height, gradient, None);
        let near =
            |x: usize, y: usize, cx: usize, cy: usize| x.abs_diff(cx) <= 2 && y.abs_diff(cy) <= 2;
        for y in 0..height {
            for x in 0..width {
                let p = y * width + x;
                let border = x < 2 || y < 2 || x >= width - 2 || y >= height - 2;
                let crosses_step = (8..=11).contains(&x);
                let expected = if border || crosses_step || near(x, y, 4, 10) {
                    input[p] // not a whole window, a jump, or a flagged pixel in it
                } else if near(x, y, 4, 4) {
                    ramp(x, y) + 0.5 / 25.0 // the bump shared over 25 pixels
                } else {
                    ramp(x, y) + if x >= 10 { 3.0 } else { 0.0 } // ramps stay exact
                };
                assert!(
                    (pass.order[p] - expected).abs() < 1e-5,
                    "({x}, {y}): {} instead of {expected}",
                    pass.order[p]
                );
            }
        }
        // Only the selected pixels (x < 4) change.
        let mut pass = build();
        let selected: Vec<bool> = (0..width * height).map(|p| p % width < 4).collect();
        smooth(&mut pass, width, height, gradient, Some(&selected));
        assert!((pass.order[4 * width + 3] - (ramp(3, 4) + 0.02)).abs() < 1e-5);
        assert_eq!(pass.order[4 * width + 4], input[4 * width + 4]);
        assert_eq!(pass.order[4 * width + 5], input[4 * width + 5]);
    }
}
