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
//! 3. **Local refinement** of the winning candidate on the table's own grid (*beyond range*
//!    is ruled out inside a rim of orders wholly a fringe below the table's top), then flags
//!    (`cleanup`): too small an ambiguity margin, too steep a field, jumps
//!    and small islands make a pixel *unreliable*; the winning label *beyond range* flags it
//!    as such. Values are then grown into steep edges against the table averaged over the
//!    pixel footprint; the beyond-range guards follow (washed-out neighbourhoods, high orders
//!    that match markedly worse than the rest of the photo, upper-fringe regions nothing
//!    anchors, high orders next to beyond-range pixels); a second repair grows values back
//!    well below the table's top, also matching the wider colour footprint of JPEG's
//!    subsampled chroma; a window fit (`window_fit`) grows values further into steep flanks
//!    by fitting a plane of orders to each 5 × 5 window against the table blurred as a
//!    camera blurs steep fringes; flat plateaus against a beyond-range region confirmed by a
//!    near-top rim, and near-top stretches that fall back from the orders below faster than
//!    a field does, beyond each reading's uncertainty, before it
//!    (`flag_folds_at_beyond_range`), are flagged beyond range, then valued regions joined to neither the
//!    specimen's edge nor a hint without a jump (`flag_cut_off_regions`); *beyond range* that
//!    no climb at the maximum gradient from a valued pixel can reach is a field too steep to
//!    resolve, flagged *unreliable* instead (`ClimbBound`, applied last at full resolution);
//!    and a 5 × 5 mean that keeps ramps exact smooths the result. Last, at full resolution, the edge band
//!    (pixels mixed with the dark background) near beyond-range pixels is flagged beyond
//!    range too (`flag_edge_band_near_beyond_range`).
//! 4. **Exposure compensation** (optional, `exposure_fit`): a per-channel gain and a radial
//!    vignetting term on linear light are fitted on vivid, confident pixels of a preliminary
//!    pass on a ≤ 0.15-megapixel image, in up to two rounds. That pass compares chroma
//!    relative to lightness (`exposure_invariant`), which exposure and vignetting leave
//!    unchanged, so that a photo both darker and vignetted still finds its orders.
//! 5. **Large photos** are labelled on block means (≤ 1 megapixel). At full resolution each
//!    pixel takes the order interpolated from the blocks around it where they agree within
//!    a tenth of a fringe, and searches the table near that order elsewhere.
//!
//! Distances inside the search are ΔE\*ab with the lightness difference weighted by
//! [`LIGHTNESS_WEIGHT`] (exposure drift moves L\* most); the residuals of the finished map are
//! CIEDE2000, computed last (`residuals_in_de2000`) for people and files.
//! The preliminary pass that feeds the exposure fit weights lightness even less and has no
//! *beyond range* label, so that a photo much darker than the calibration still finds its
//! orders.

use palette::LinSrgb;
use rayon::prelude::*;

use crate::calibration::CalibrationTable;
use crate::colour::{
    ciede2000, delta_e_ab, lab_from_linear, linear_from_lab, Lab, LabImage, Photo,
};
use crate::error::CoreResult;
use crate::exposure::{radius_sq, ExposureCorrection};
use crate::geometry::Mask;
use crate::geometry::PixelPoint;
use crate::order_map::{
    MapOptions, MapStatistics, OrderHint, OrderMap, PixelFlags, NEAR_TABLE_TOP,
};

mod aggregate;
mod cleanup;
mod exposure_fit;
mod search;
mod uncertainty;
mod window_fit;

use aggregate::*;
use cleanup::*;
use exposure_fit::*;
pub(crate) use search::SEARCH_STEP;
use search::*;
use uncertainty::*;
use window_fit::*;

/// Weight of ΔL\* in the search distance (a\* and b\* have weight 1).
const LIGHTNESS_WEIGHT: f32 = 0.6;
/// Weight of ΔL\* in the local refinement of the chosen candidate.
const REFINE_LIGHTNESS_WEIGHT: f32 = 2.5;
/// Weight of ΔL\* in the preliminary pass that feeds the exposure fit.
const PRELIMINARY_LIGHTNESS_WEIGHT: f32 = 0.25;

/// Which solver pass: the preliminary one feeding the exposure fit, or the final one.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Stage {
    Preliminary,
    Final,
}
/// Data cost of the *beyond range* label (ΔE units): past the table colours wash out to pale
/// tints that match some high table order only loosely; a region whose best match is worse
/// than this, and that continues the top of the table, is taken as beyond range. Measured on
/// 108 rendered discs loaded past the table (three light sources, PNG and JPEG 85–95, exposure
/// ± 15 %): at 6 (with 4 × the typical match below) 10.5 % of the pixels past the table got a
/// value on average, 48 % at worst; at 3 (and 2 ×) 0.7 % and 8 %, at no cost in accuracy.
const BEYOND_COST: f32 = 3.0;
/// A pixel must lie this much closer (search distance) to the washed-out colour of high orders
/// than to every table colour before *beyond range* is its cheaper reading.
const WASHED_OUT_MARGIN: f32 = 1.0;
/// Tables shorter than this (fringes) do not reach far enough to tell the washed-out colour.
const WASHED_OUT_MIN_TABLE: f64 = 1.5;
/// How much darker (L\*) than the table's last fringe a pixel may be and still be read as
/// beyond the table.
const BEYOND_DARKER: f32 = 15.0;
/// The *beyond range* cost is at least this multiple of the photo's median best match.
const BEYOND_TO_TYPICAL: f32 = 2.0;
/// Extra cost of a label that disagrees with a hint by more than [`HINT_TOLERANCE`] fringes.
const HINT_PENALTY: f32 = 400.0;
/// How far a label may lie from a hint's order without penalty, fringes.
const HINT_TOLERANCE: f64 = 0.2;
/// Largest maximum gradient used on block means, fringes per working pixel: steeper would
/// let a chain jump to the next colour repeat unpenalised.
const COARSE_MAX_GRADIENT: f64 = 0.45;
/// Aggregated ambiguity margin (ΔE units per direction) below which a pixel is unreliable.
const MARGIN_LIMIT: f32 = 0.35;

/// Winner label of a pixel outside the specimen.
const NO_WINNER: usize = usize::MAX;

/// One solver pass on a CIELAB image.
struct Pass {
    order: Vec<f32>,
    residual: Vec<f32>,
    margin: Vec<f32>,
    flags: Vec<PixelFlags>,
}

impl Pass {
    /// `n` pixels without value or flag.
    fn empty(n: usize) -> Pass {
        Pass {
            order: par_filled(n, f32::NAN),
            residual: par_filled(n, f32::NAN),
            margin: par_filled(n, f32::NAN),
            flags: par_filled(n, PixelFlags::default()),
        }
    }
}

/// A vector of `n` copies of `value`, written in parallel. The first write to fresh memory
/// is costly (the pages are mapped then); spread over the threads here it costs far less
/// than inside the pixel loops, where it serialises them.
pub(super) fn par_filled<T: Copy + Send + Sync>(n: usize, value: T) -> Vec<T> {
    let mut v = Vec::with_capacity(n);
    v.par_extend(rayon::iter::repeat_n(value, n));
    v
}

/// The renderer's daylight table (colorimetric camera, ideal plates) up to 4.4 fringes on a
/// 0.01-fringe grid, for the solver's unit tests.
#[cfg(test)]
fn daylight_test_table(name: &str) -> CalibrationTable {
    use crate::render::{rendered_table, CameraModel, LightSource, QuarterWavePlates};
    rendered_table(
        LightSource::Daylight,
        CameraModel::Colorimetric,
        QuarterWavePlates::Ideal,
        4.4,
        0.01,
        crate::CalibrationMetadata {
            name: name.into(),
            ..Default::default()
        },
    )
    .unwrap()
}

/// One labelling of `lab`, whose pixels are block means of `stride` × `stride` photo pixels.
fn solve_pass(
    lab: &LabImage,
    stride: u32,
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
    let white = washed_out_white(table, max_order);

    let mut labels: Vec<Labels> = lab
        .data
        .par_iter()
        .zip(inside.par_iter())
        .map_init(Vec::new, |scratch, (c, &ins)| {
            if ins {
                candidates(&search, *c, beyond_order, beyond_cost, scratch)
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
        let scaled = if best.is_empty() {
            beyond_cost
        } else {
            beyond_cost.max(BEYOND_TO_TYPICAL * median_f32(&mut best))
        };
        // Far past the table the colours wash out to grey (`white`): a pixel that looks like it
        // is cheaper to read as beyond range than the flat cost.
        let darkest = darkest_beyond(table, max_order);
        labels
            .par_iter_mut()
            .zip(lab.data.par_iter())
            .filter(|(l, _)| l.cost[BEYOND].is_finite())
            .for_each(|(l, c)| {
                let washed = white.map_or(f32::INFINITY, |w| {
                    search.weighted_distance(*c, w) + WASHED_OUT_MARGIN
                });
                l.cost[BEYOND] = if c.l < darkest {
                    f32::INFINITY
                } else {
                    scaled.min(washed)
                };
            });
    }
    let mut hinted = Vec::new();
    for hint in &options.hints {
        if let Some((x, y)) = hint.at.pixel(lab.width, lab.height) {
            let p = y as usize * width + x as usize;
            if !inside[p] {
                continue;
            }
            hinted.push(p);
            let l = &mut labels[p];
            // Make sure the hinted order is a candidate, then penalise every label far from it.
            let (hint_order, hint_cost) = {
                let centre = (hint.order / search.step).round() as usize;
                let reach = (HINT_TOLERANCE / search.step).ceil() as usize;
                search.best_in(
                    lab.data[p],
                    centre.saturating_sub(reach),
                    centre + reach,
                    &mut Vec::new(),
                )
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
    // Winning label per pixel (NO_WINNER outside the specimen).
    let winner = |s: &[f32; LABELS], allowed: &dyn Fn(usize) -> bool| {
        (0..LABELS)
            .filter(|k| s[*k].is_finite() && allowed(*k))
            .min_by(|a, b| s[*a].total_cmp(&s[*b]))
    };
    let winners: Vec<usize> = total
        .par_iter()
        .zip(inside.par_iter())
        .map(|(s, &ins)| {
            if ins {
                winner(s, &|_| true).unwrap_or(BEYOND)
            } else {
                NO_WINNER
            }
        })
        .collect();
    let no_beyond = if stage == Stage::Final {
        beyond_ruled_out(&winners, &labels, top, width, height)
    } else {
        vec![false; winners.len()]
    };

    let n = lab.data.len();
    let mut pass = Pass::empty(n);
    let fine_reach = (2.0 * SEARCH_STEP / fine.step).ceil() as usize;
    let directions = DIRECTIONS;
    pass.order
        .par_iter_mut()
        .zip(pass.residual.par_iter_mut())
        .zip(pass.margin.par_iter_mut())
        .zip(pass.flags.par_iter_mut())
        .enumerate()
        .for_each_init(
            Vec::new,
            |scratch, (p, (((order, residual), margin), flags))| {
                if !inside[p] {
                    flags.0 |= PixelFlags::OUTSIDE_MASK;
                    return;
                }
                let s = &total[p];
                let l = &labels[p];
                let best = if no_beyond[p] {
                    winner(s, &|k| k != BEYOND).unwrap_or(BEYOND)
                } else {
                    winners[p]
                };
                let chosen = l.order[best];
                let rival = (0..LABELS)
                    .filter(|k| {
                        s[*k].is_finite()
                            && !(no_beyond[p] && *k == BEYOND)
                            && (l.order[*k].min(beyond_order) - chosen.min(beyond_order)).abs()
                                > 0.5
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
                    scratch,
                );
                *order = refined as f32;
                *residual = delta_e_ab(lab.data[p], fine.colour_at(refined as f32));
                if *margin < MARGIN_LIMIT {
                    flags.0 |= PixelFlags::UNRELIABLE;
                }
            },
        );
    flag_steep_and_isolated(&mut pass, width, height, gradient);
    if stage == Stage::Final {
        let first = RepairLimits {
            ceiling: max_order - 0.05,
            residual: REPAIR_RESIDUAL,
            subsampled_chroma: false,
        };
        repair_steep_edges(&mut pass, lab, &fine, first, width, height);
        if let Some(white) = white {
            flag_washed_out(&mut pass, lab, white, inside, width, height);
        }
        flag_poor_high_matches(&mut pass, top, width, height);
        flag_unanchored_high_regions(&mut pass, top, &hinted, width, height, gradient);
        extend_beyond_range(&mut pass, top, width, height);
        // A second repair after the guards, for pixels the guards flagged that continue the
        // lower orders around them: anchored by their valued neighbours, kept well below the
        // table's top, where aliases cannot come from. Only this repair tries the footprint of
        // JPEG's subsampled chroma: before the guards it let aliases of orders past the table
        // grow (twice as many of them valued in the accuracy suite's JPEG disc).
        let second = RepairLimits {
            ceiling: max_order - SECOND_REPAIR_BELOW_TOP,
            residual: SECOND_REPAIR_RESIDUAL,
            subsampled_chroma: true,
        };
        repair_steep_edges(&mut pass, lab, &fine, second, width, height);
        repair_by_window_fit(
            &mut pass,
            lab,
            &BlurredTables::new(&fine, stride),
            width,
            height,
        );
        flag_plateaus_at_beyond_range(&mut pass, top, width, height);
        let sigma = order_uncertainty(&pass, table, max_order);
        flag_folds_at_beyond_range(&mut pass, &sigma, top, width, height);
        flag_cut_off_regions(&mut pass, &hinted, width, height, 1.5 * gradient);
    }
    smooth(&mut pass, width, height, gradient, None);
    clear_flagged(&mut pass);
    pass
}

/// Every valued pixel flagged unreliable and its value cleared: the whole reading is in doubt.
fn flag_valued_unreliable(pass: &mut Pass) {
    pass.order
        .par_iter_mut()
        .zip(pass.flags.par_iter_mut())
        .filter(|(o, _)| o.is_finite())
        .for_each(|(o, f)| {
            f.0 |= PixelFlags::UNRELIABLE;
            *o = f32::NAN;
        });
}

/// No value where a pixel carries a flag.
fn clear_flagged(pass: &mut Pass) {
    pass.order
        .par_iter_mut()
        .zip(pass.flags.par_iter())
        .filter(|(_, f)| f.0 != 0)
        .for_each(|(o, _)| *o = f32::NAN);
}

/// The colour orders far past the table wash out to, CIELAB (D65): the mean linear-light
/// colour of the table over its last whole fringes (as many as it holds). Averaged over whole
/// fringes the dark-field transmission sin²(πNλ₀/λ) tends to ½ at every wavelength — the more
/// fringes, the closer — which is also what a pixel spanning many fringes, or an order so high
/// that the fringes of different wavelengths no longer line up, shows. `None` for tables
/// shorter than [`WASHED_OUT_MIN_TABLE`].
fn washed_out_white(table: &CalibrationTable, max_order: f64) -> Option<Lab> {
    if max_order < WASHED_OUT_MIN_TABLE {
        return None;
    }
    let colours: Vec<Lab> = last_fringes(table, max_order, max_order.floor()).collect();
    let sum = colours
        .iter()
        .map(|c| linear_from_lab(*c))
        .fold(LinSrgb::new(0.0, 0.0, 0.0), |a, b| a + b);
    Some(lab_from_linear(sum / colours.len() as f32))
}

/// The darkest colour of `table`'s first fringe: its zero order, as this calibration's photo
/// shows it (lens blur across the beam's neutral axis and plate leakage lift it above black).
fn table_black(table: &CalibrationTable) -> Lab {
    let steps = (1.0f64.min(table.max_order()) / table.order_step).round() as usize;
    (0..=steps)
        .map(|k| table.colour_at(k as f64 * table.order_step))
        .min_by(|a, b| a.l.total_cmp(&b.l))
        .unwrap_or(Lab::new(0.0, 0.0, 0.0))
}

/// A pixel at least as dark as the table's zero order (`black`) reads as that colour: in a
/// dark field nothing but the zero order is darker, and near black CIELAB magnifies small
/// differences of light (an 8-bit black pixel lay 15 ΔE\*ab from a calibration black of
/// L\* 15, which flagged every pixel of a beam's unloaded ends as unreliable).
fn floored_at_black(c: Lab, black: Lab) -> Lab {
    if c.l <= black.l {
        black
    } else {
        c
    }
}

/// Least CIELAB lightness L\* a pixel past the end of the table can have: past the table
/// colours only grow paler, so nothing much darker than the table's last fringe is beyond it
/// (dark zero-order areas darker than the calibration's own black stay with the table).
fn darkest_beyond(table: &CalibrationTable, max_order: f64) -> f32 {
    last_fringes(table, max_order, 1.0f64.min(max_order))
        .map(|c| c.l)
        .fold(f32::INFINITY, f32::min)
        - BEYOND_DARKER
}

/// The table's colours on its own grid from `max_order` down over `span` fringes.
fn last_fringes(
    table: &CalibrationTable,
    max_order: f64,
    span: f64,
) -> impl Iterator<Item = Lab> + '_ {
    let steps = (span / table.order_step).round() as usize;
    (0..=steps).map(move |k| table.colour_at(max_order - k as f64 * table.order_step))
}

/// How the solver sees a photo pixel: its linear-light colour after the exposure correction,
/// in CIELAB (D65), floored at the table's black (`floored_at_black`).
struct Corrected<'a> {
    exposure: &'a ExposureCorrection,
    black: Lab,
    width: u32,
    height: u32,
}

impl<'a> Corrected<'a> {
    /// The view of a `width` × `height` image's pixels under `exposure`.
    fn new(exposure: &'a ExposureCorrection, black: Lab, width: u32, height: u32) -> Self {
        Corrected {
            exposure,
            black,
            width,
            height,
        }
    }

    /// The corrected CIELAB colour of linear-light `c` at pixel (x, y).
    #[inline(always)]
    fn lab(&self, c: LinSrgb<f32>, x: usize, y: usize) -> Lab {
        let corrected = self.exposure.apply(c, x, y, self.width, self.height);
        floored_at_black(lab_from_linear(corrected), self.black)
    }
}

/// CIEDE2000 between a pixel's corrected colour and the table's colour at its order: the
/// residual the finished map gives, in the unit of every figure for people (`colour.rs`).
#[inline]
fn residual_de2000(colour: Lab, order: f32, table: &CalibrationTable) -> f32 {
    ciede2000(colour, table.colour_at(f64::from(order)))
}

/// Writes [`residual_de2000`] into `residual` for every pixel of `photo` whose `order` has a
/// value; other pixels are left alone. Rows without a valued pixel are skipped. (Computing it
/// in the full-resolution pass on the colour at hand there was no faster on the 12-MP
/// benchmark — the formula dominates — and cost a float per pixel more at the peak.)
fn residuals_in_de2000(
    residual: &mut [f32],
    order: &[f32],
    photo: &Photo,
    corrected: &Corrected,
    table: &CalibrationTable,
) {
    let w = photo.width() as usize;
    residual
        .par_chunks_mut(w)
        .zip(order.par_chunks(w))
        .enumerate()
        .for_each_init(Vec::new, |linear, (y, (residual, order))| {
            if !order.iter().any(|o| o.is_finite()) {
                return;
            }
            photo.linear_row(y as u32, linear);
            for (x, (r, o)) in residual.iter_mut().zip(order).enumerate() {
                if o.is_finite() {
                    *r = residual_de2000(corrected.lab(linear[x], x, y), *o, table);
                }
            }
        });
}

/// Summary figures of a finished pass; `max_order` is the highest order it could read.
fn statistics(pass: &Pass, max_order: f64) -> MapStatistics {
    /// Sums over some of the pixels.
    #[derive(Default)]
    struct Part {
        specimen: u64,
        beyond: u64,
        unreliable: u64,
        count: u64,
        sum: f64,
        min: f64,
        max: f64,
        res: f64,
    }
    impl Part {
        fn empty() -> Part {
            Part {
                min: f64::INFINITY,
                max: f64::NEG_INFINITY,
                ..Part::default()
            }
        }
    }
    // Fixed chunks, summed in order: the figures do not depend on the thread count.
    const CHUNK: usize = 1 << 16;
    let parts: Vec<Part> = pass
        .order
        .par_chunks(CHUNK)
        .zip(pass.residual.par_chunks(CHUNK))
        .zip(pass.flags.par_chunks(CHUNK))
        .map(|((order, residual), flags)| {
            let mut part = Part::empty();
            for ((o, r), f) in order.iter().zip(residual).zip(flags) {
                part.specimen += u64::from(!f.has(PixelFlags::OUTSIDE_MASK));
                part.beyond += u64::from(f.has(PixelFlags::BEYOND_RANGE));
                part.unreliable += u64::from(f.has(PixelFlags::UNRELIABLE));
                if o.is_finite() {
                    let v = f64::from(*o);
                    part.count += 1;
                    part.sum += v;
                    part.min = part.min.min(v);
                    part.max = part.max.max(v);
                    part.res += f64::from(*r);
                }
            }
            part
        })
        .collect();
    let mut all = Part::empty();
    for part in parts {
        all.specimen += part.specimen;
        all.beyond += part.beyond;
        all.unreliable += part.unreliable;
        all.count += part.count;
        all.sum += part.sum;
        all.min = all.min.min(part.min);
        all.max = all.max.max(part.max);
        all.res += part.res;
    }
    let Part {
        specimen,
        beyond,
        unreliable,
        count,
        sum,
        min,
        max,
        res,
    } = all;
    let (beyond, unreliable) = (beyond as f64, unreliable as f64);
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
        table_max_order: max_order,
        ambiguous_colour: false,
    }
}

/// A full-resolution pixel next to blocks without a value is refined from the valued ones if
/// they carry at least this share of its interpolation weight.
const PARTIAL_WEIGHT: f32 = 0.25;
/// ... searching this much further (fringes) around the value interpolated from them.
const PARTIAL_REACH: f32 = 0.1;
/// The repair after the beyond-range guards only grows orders at least this far (fringes)
/// below the table's top.
const SECOND_REPAIR_BELOW_TOP: f64 = 1.0;
/// Where the valued blocks around a full-resolution pixel differ by at most this (fringes),
/// the pixel takes the order interpolated from them: the block means already average its
/// colour noise, and its own colour would add it back. On the 12-megapixel benchmark (JPEG
/// q90, stride 4) searching every pixel gave MAE 0.0029 and coverage 99.15 %, this 0.0018
/// and 99.12 %.
const GENTLE_BLOCK_SPREAD: f32 = 0.1;
/// Photos up to this many pixels are labelled at full resolution; larger ones on block means.
const FULL_RESOLUTION_LIMIT: u64 = 1_000_000;
/// A first exposure fit this close to no correction needs no second round.
const SETTLED_GAIN: f32 = 0.03;
/// Largest working image of the preliminary passes that feed the exposure fit, pixels.
const PRELIMINARY_LIMIT: u64 = 150_000;

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

    /// CIELAB (D65) of every working pixel after `correction`, floored at `black`.
    fn lab(&self, correction: &ExposureCorrection, black: Lab) -> LabImage {
        let w = self.width as usize;
        let corrected = Corrected::new(correction, black, self.width, self.height);
        let data = self
            .linear
            .par_iter()
            .enumerate()
            .map(|(i, c)| corrected.lab(*c, i % w, i / w))
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
    let max_order = options.top_order(table);
    let black = table_black(table);
    let mut exposure = ExposureCorrection::NONE;
    let mut ambiguous = false;
    if options.exposure_compensation {
        let working = Working::new(photo, mask, PRELIMINARY_LIMIT);
        let scaled = working.scale(options);
        // A second round only where the first found a real drift: a strong drift is only
        // partly corrected by the first fit.
        let invariant_table = exposure_invariant_table(table);
        for _ in 0..2 {
            let mut lab = working.lab(&exposure, black);
            lab.data
                .par_iter_mut()
                .for_each(|c| *c = exposure_invariant(*c));
            let preliminary = solve_pass(
                &lab,
                working.stride,
                &working.inside,
                &invariant_table,
                max_order,
                &scaled,
                Stage::Preliminary,
            );
            match fit_exposure(&working, table, &preliminary, !options.hints.is_empty()) {
                Some(fit) => {
                    let settled = fit
                        .correction
                        .gain
                        .iter()
                        .all(|g| (g - 1.0).abs() < SETTLED_GAIN)
                        && fit.correction.vignetting < SETTLED_GAIN;
                    exposure = fit.correction;
                    ambiguous = fit.ambiguous;
                    if settled {
                        break;
                    }
                }
                None => break,
            }
        }
    }
    let working = Working::new(photo, mask, FULL_RESOLUTION_LIMIT);
    let scaled = working.scale(options);
    let pass = solve_pass(
        &working.lab(&exposure, black),
        working.stride,
        &working.inside,
        table,
        max_order,
        &scaled,
        Stage::Final,
    );
    let climb = ClimbBound::of(
        &pass,
        scaled.max_gradient as f32,
        working.width as usize,
        working.height as usize,
        working.stride as usize,
    );
    let mut pass = if working.stride == 1 {
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
            black,
        )
    };
    flag_edge_band_near_beyond_range(
        &mut pass,
        max_order as f32,
        photo.width() as usize,
        photo.height() as usize,
    );
    if let Some(climb) = climb {
        climb.flag_unreachable_beyond_as_steep(&mut pass, max_order as f32, photo.width() as usize);
    }
    if ambiguous {
        flag_valued_unreliable(&mut pass);
    }
    let uncertainty = order_uncertainty(&pass, table, max_order);
    // The search's ΔE*ab residuals, which the uncertainty is built on, give way to CIEDE2000
    // wherever a value is left.
    let corrected = Corrected::new(&exposure, black, photo.width(), photo.height());
    residuals_in_de2000(&mut pass.residual, &pass.order, photo, &corrected, table);
    let statistics = MapStatistics {
        ambiguous_colour: ambiguous,
        ..statistics(&pass, max_order)
    };
    Ok(OrderMap {
        width: photo.width(),
        height: photo.height(),
        order: pass.order,
        residual: pass.residual,
        margin: pass.margin,
        uncertainty,
        flags: pass.flags,
        exposure,
        statistics,
    })
}

/// Full-resolution orders from a labelling on block means. Each pixel interpolates the order
/// of the valued block centres around it; where those blocks differ by more than
/// [`GENTLE_BLOCK_SPREAD`], or some of them have no value, it searches the table near that
/// order, within the change the blocks show. Blocks without a value pass their flags on.
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
    black: Lab,
) -> Pass {
    let (w, h) = (photo.width() as usize, photo.height() as usize);
    let s = stride as usize;
    let (cw, ch) = (w.div_ceil(s), h.div_ceil(s));
    let fine = SearchTable::new(table, table.order_step, max_order, REFINE_LIGHTNESS_WEIGHT);
    let (fine_step, top) = (fine.step as f32, max_order as f32);
    let n = w * h;
    let mut pass = Pass::empty(n);
    // Interpolation between block centres along one axis: (lower block, upper block, weight
    // of the upper one) for each pixel coordinate.
    let axis = |length: usize, blocks: usize| -> Vec<(usize, usize, f32)> {
        (0..length)
            .map(|v| {
                let f = ((v as f32 + 0.5) / s as f32 - 0.5).clamp(0.0, (blocks - 1) as f32);
                let low = f as usize; // f ≥ 0: truncation is floor
                (low, (low + 1).min(blocks - 1), f - low as f32)
            })
            .collect()
    };
    let (columns, rows_at) = (axis(w, cw), axis(h, ch));
    // Block orders where the block is valued, NaN elsewhere.
    let valued: Vec<f32> = coarse
        .order
        .iter()
        .zip(&coarse.flags)
        .map(|(o, f)| if f.0 == 0 { *o } else { f32::NAN })
        .collect();
    // Pixels that searched the table: only they are smoothed afterwards, the interpolated
    // ones being as smooth as the blocks.
    let mut searched = par_filled(n, false);
    let rows = pass
        .order
        .par_chunks_mut(w)
        .zip(pass.residual.par_chunks_mut(w))
        .zip(pass.margin.par_chunks_mut(w))
        .zip(pass.flags.par_chunks_mut(w))
        .zip(searched.par_chunks_mut(w))
        .enumerate();
    let corrected = Corrected::new(exposure, black, photo.width(), photo.height());
    let scratch = || (Vec::new(), Vec::new(), Vec::new());
    rows.for_each_init(
        scratch,
        |(linear, colours, distances), (y, ((((order, residual), margin), flags), searched))| {
            photo.linear_row(y as u32, linear);
            // The colours of the row's stretch from its first to its last specimen pixel
            // first, in one simple loop the compiler can vectorise.
            let inside = mask.map(|m| &m.as_slice()[y * w..(y + 1) * w]);
            let start = inside.map_or(0, |m| m.iter().position(|v| *v).unwrap_or(w));
            let end = inside.map_or(w, |m| m.iter().rposition(|v| *v).map_or(start, |p| p + 1));
            colours.clear();
            colours.extend(
                linear[start..end]
                    .iter()
                    .zip(start..)
                    .map(|(c, x)| corrected.lab(*c, x, y)),
            );
            let (y0, y1, ty) = rows_at[y];
            for x in 0..w {
                let i = y * w + x;
                if mask.is_some_and(|m| !m.as_slice()[i]) {
                    flags[x].0 = PixelFlags::OUTSIDE_MASK;
                    continue;
                }
                let (x0, x1, tx) = columns[x];
                let corners = [
                    (y0 * cw + x0, (1.0 - tx) * (1.0 - ty)),
                    (y0 * cw + x1, tx * (1.0 - ty)),
                    (y1 * cw + x0, (1.0 - tx) * ty),
                    (y1 * cw + x1, tx * ty),
                ];
                // Next to a block beyond range the pixel is too (the cautious reading). Next to
                // blocks without a value (the mask's edge, unreliable blocks) the value is
                // interpolated from the valued blocks alone, searched a little wider.
                let beyond = corners
                    .iter()
                    .any(|(c, wgt)| *wgt > 0.0 && coarse.flags[*c].has(PixelFlags::BEYOND_RANGE));
                let (mut sum, mut weight, mut lo, mut hi, mut best_margin) = (
                    0.0,
                    0.0,
                    f32::INFINITY,
                    f32::NEG_INFINITY,
                    f32::NEG_INFINITY,
                );
                for &(c, wgt) in &corners {
                    if wgt > 0.0 && !valued[c].is_nan() {
                        sum += wgt * valued[c];
                        weight += wgt;
                        lo = lo.min(valued[c]);
                        hi = hi.max(valued[c]);
                        best_margin = best_margin.max(coarse.margin[c]);
                    }
                }
                let partial = weight < 0.999;
                if beyond || weight < PARTIAL_WEIGHT {
                    flags[x].0 = if beyond {
                        PixelFlags::BEYOND_RANGE
                    } else {
                        PixelFlags::UNRELIABLE
                    };
                    continue;
                }
                let predicted = sum / weight;
                let colour = colours[x - start];
                let value = if !partial && hi - lo <= GENTLE_BLOCK_SPREAD {
                    predicted
                } else {
                    let reach = 0.05 + (hi - lo) + if partial { PARTIAL_REACH } else { 0.0 };
                    // Both ends are ≥ 0: truncation is floor, and + 1 rounds up.
                    let from = ((predicted - reach).max(0.0) / fine_step) as usize;
                    let to = ((predicted + reach).min(top) / fine_step) as usize + 1;
                    searched[x] = true;
                    fine.best_in(colour, from, to, distances).0 as f32
                };
                let miss = delta_e_ab(colour, fine.colour_at(value));
                order[x] = value;
                residual[x] = miss;
                margin[x] = best_margin;
            }
        },
    );
    smooth(&mut pass, w, h, gradient, Some(&searched));
    clear_flagged(&mut pass);
    pass
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::render::{
        develop, render_scene, DiscField, PhotoEffects, PhotoEncoding, RenderSetup, Renderer,
    };
    use crate::stress::DiscInCompression;

    /// A photographed disc (JPEG q90) larger than [`FULL_RESOLUTION_LIMIT`], so that it is
    /// labelled on block means and refined at full resolution, and its mask.
    fn large_disc_photo() -> (Photo, Mask) {
        let (width, height) = (1100, 1000);
        let renderer = Renderer::new(RenderSetup::default()).unwrap();
        let field = DiscField::new(
            PixelPoint { x: 550.0, y: 500.0 },
            470.0,
            DiscInCompression::new(40.0, 6.0, 600.0).unwrap(),
            11.0,
        )
        .unwrap();
        let scene = render_scene(&field, &renderer, width, height, 1).unwrap();
        let effects = PhotoEffects {
            blur_sigma_px: 0.8,
            noise_sigma_codes: 1.0,
            ..PhotoEffects::default()
        };
        let jpeg = develop(&scene.image, &effects, PhotoEncoding::Jpeg { quality: 90 }).unwrap();
        let photo = Photo::decode(&jpeg, &crate::DecodeLimits::default()).unwrap();
        (photo, scene.mask)
    }

    #[test]
    fn a_large_photos_residuals_are_the_ciede2000_of_each_valued_pixel_at_its_final_order() {
        let (photo, mask) = large_disc_photo();
        assert!(u64::from(photo.width()) * u64::from(photo.height()) > FULL_RESOLUTION_LIMIT);
        let table = daylight_test_table("residual reference");
        let black = table_black(&table);
        for mask in [None, Some(&mask)] {
            let map = solve(&photo, &table, mask, &MapOptions::default()).unwrap();
            let w = photo.width() as usize;
            let mut valued = 0;
            for (i, (o, r)) in map.order.iter().zip(&map.residual).enumerate() {
                if o.is_nan() {
                    continue;
                }
                valued += 1;
                // Reference: the definition, straight from the photo's pixel, pixel by pixel
                // (CIEDE2000 after CIE 142-2001, through palette; the solver's colour view).
                let (x, y) = (i % w, i / w);
                let c = map
                    .exposure
                    .apply(photo.linear(i), x, y, photo.width(), photo.height());
                let colour = floored_at_black(lab_from_linear(c), black);
                let reference = ciede2000(colour, table.colour_at(f64::from(*o)));
                assert_eq!(r.to_bits(), reference.to_bits(), "pixel ({x}, {y})");
            }
            assert!(valued > 500_000, "only {valued} pixels valued");
        }
    }
}
