//! Repair of steep flanks by fitting whole windows. Where fringes lie a few pixels apart a
//! camera's colour is no longer the colour of one order: lens blur mixes a pixel with its
//! neighbours, and JPEG's 4:2:0 subsampling averages chroma over a 2 × 2 block that its
//! decoder then interpolates, so a steep flank comes out greyish and one pixel's colour
//! matches no table entry well. A 5 × 5 window still holds the full-resolution lightness of
//! every pixel along the ramp, so a plane of orders is fitted to the window as a whole, each
//! pixel's colour predicted from the table blurred across the fringes as the camera blurs it.

use super::*;
use crate::colour::{linear_from_lab, YCbCr};
use palette::{LinSrgb, Srgb};

/// Gradient magnitudes (fringes per pixel) the fit tries: up to one level past
/// [`WINDOW_MAX_GRADIENT`], so that a window steeper than that is recognised and refused
/// rather than fitted with a gentler plane.
const GRADIENT_LEVELS: [f32; 12] = [
    0.02, 0.04, 0.06, 0.08, 0.1, 0.12, 0.14, 0.17, 0.2, 0.24, 0.28, 0.33,
];
/// A fit whose gradient is steeper than this (fringes per pixel) is not trusted: beyond it the
/// windows of the accuracy suite's discs (JPEG and PNG) began to read more than half a fringe
/// off.
const WINDOW_MAX_GRADIENT: f32 = 0.3;
/// How a camera blurs, Gaussian σ in photo pixels: the lens (with the pixel's own width) in
/// linear light, and then, in a 4:2:0 JPEG, the chroma again in Y'CbCr: its 2 × 2 block mean
/// (σ 0.58 px), the decoder's interpolation (about 0.43 px) and the coarser quantisation of
/// chroma, 0.97 px in all. Fits try a photo with sharp chroma (PNG, TIFF, a JPEG without chroma
/// subsampling) and one with subsampled chroma. On the accuracy suite's JPEG discs chroma σ of
/// 0.6, 0.97, 1.3, 1.6 and 2.0 px gave 99.0, 99.4, 99.6, 99.5 and 99.4 % coverage over all
/// slopes; 1.3 also let 0.04 % of a disc's pixels past the table take a value (0.97: none).
#[derive(Clone, Copy)]
struct CameraBlur {
    lens: f32,
    chroma: f32,
}
const CAMERA_BLURS: [CameraBlur; 2] = [
    CameraBlur {
        lens: 0.7,
        chroma: 0.0,
    },
    CameraBlur {
        lens: 0.7,
        chroma: 0.97,
    },
];
/// σ of a pixel's own width (a 1-pixel box), pixels: the least lens blur of a working pixel.
const PIXEL_SIGMA: f32 = 0.29;
/// Orders grown stay this far (fringes) below the table's top, where orders past the table
/// alias in.
const WINDOW_BELOW_TOP: f32 = 0.3;
/// A fit is taken within this many fringes of the order the valued neighbours extrapolate to.
const WINDOW_REACH: f32 = 0.4;
/// ... and must beat every fit at least [`RIVAL_SEPARATION`] fringes away from it, within
/// [`RIVAL_REACH`] fringes of that order, by [`WINDOW_MARGIN`].
const RIVAL_REACH: f32 = 1.0;
const RIVAL_SEPARATION: f32 = 0.4;
/// Least lead (mean ΔE\*ab over the window, continuity term included) of the best fit over its
/// rivals.
const WINDOW_MARGIN: f32 = 1.0;
/// Largest mean ΔE\*ab (continuity term included) of an accepted fit.
const WINDOW_RESIDUAL: f32 = 12.0;
/// Continuity: ΔE\*ab added per fringe of mean disagreement between a fit and the orders of
/// the valued pixels in its window.
const CONTINUITY_WEIGHT: f32 = 5.0;
/// Fewest specimen pixels a window must hold, and fewest whose predicted order lies in the
/// table.
const MIN_WINDOW_PIXELS: usize = 15;
/// Below this gradient (fringes per pixel) the valued neighbours give no direction.
const MIN_DIRECTION_GRADIENT: f64 = 0.06;
/// Order step of the fit (fringes).
const FIT_STEP: f32 = 0.02;
/// Rivals are scored on a grid this many times coarser than [`FIT_STEP`], and the best of
/// them refined on the fine one.
const COARSE_STEPS: usize = 3;

/// The table as a camera sees steep fringes: for every gradient level and camera blur, the
/// table's colours on its fine grid blurred across fringes of that gradient as the camera
/// blurs them ([`CameraBlur`]); stored as CIELAB (D65).
pub(super) struct BlurredTables {
    step: f32,
    len: usize,
    /// `[level × CAMERA_BLURS.len() + blur]` → colours on the fine grid.
    colours: Vec<Vec<Lab>>,
}

impl BlurredTables {
    /// Tables for `stride`-pixel working pixels (block means of large photos): the blur in
    /// working pixels is the photo's over the stride, the lens's never less than a pixel's
    /// own width.
    pub(super) fn new(fine: &SearchTable, stride: u32) -> BlurredTables {
        let step = fine.step as f32;
        let linear: Vec<[f32; 3]> = (0..fine.len())
            .map(|i| {
                let c = linear_from_lab(fine.colour_at(i as f32 * step));
                [c.red, c.green, c.blue].map(|v| v.clamp(0.0, 1.0))
            })
            .collect();
        let stride = stride as f32;
        let colours = GRADIENT_LEVELS
            .iter()
            .flat_map(|&g| CAMERA_BLURS.iter().map(move |b| (g, *b)))
            .collect::<Vec<_>>()
            .into_par_iter()
            .map(|(g, blur)| {
                let lens = (blur.lens / stride).max(PIXEL_SIGMA);
                let seen = blurred_across_orders(&linear, step, g * lens);
                let ycc: Vec<[f32; 3]> = seen
                    .iter()
                    .map(|&[r, g, b]| {
                        let c = YCbCr::from_srgb(Srgb::from_linear(LinSrgb::new(r, g, b)));
                        [c.y, c.cb, c.cr]
                    })
                    .collect();
                let chroma = blurred_across_orders(&ycc, step, g * blur.chroma / stride);
                ycc.iter()
                    .zip(&chroma)
                    .map(|(l, c)| {
                        YCbCr {
                            y: l[0],
                            cb: c[1],
                            cr: c[2],
                        }
                        .to_lab()
                    })
                    .collect()
            })
            .collect();
        BlurredTables {
            step,
            len: linear.len(),
            colours,
        }
    }

    fn top(&self) -> f32 {
        (self.len - 1) as f32 * self.step
    }
}

/// `values` sampled every `step` fringes from order 0, smoothed along the orders by a Gaussian
/// of σ = `sigma` fringes (to ±2σ). Orders are magnitudes, so the table folds at zero; past its
/// end it holds its last value.
fn blurred_across_orders(values: &[[f32; 3]], step: f32, sigma: f32) -> Vec<[f32; 3]> {
    let last = values.len() - 1;
    let at = |n: f32| {
        let pos = (n.abs() / step).min(last as f32);
        let i = (pos as usize).min(last - 1);
        let t = pos - i as f32;
        [0, 1, 2].map(|k| values[i][k] + t * (values[i + 1][k] - values[i][k]))
    };
    (0..values.len())
        .map(|i| {
            let n = i as f32 * step;
            let (mut acc, mut total) = ([0f32; 3], 0.0);
            for k in -8..=8 {
                let u = k as f32 / 4.0;
                let w = (-0.5 * u * u).exp();
                let v = at(n + sigma * u);
                for c in 0..3 {
                    acc[c] += w * v[c];
                }
                total += w;
            }
            acc.map(|a| a / total)
        })
        .collect()
}

/// Grows values into flagged pixels next to valued ones ([`grow_layers`]) by fitting the
/// window around each: the valued pixels give a plane of orders, hence the direction the order
/// rises in and a first order and gradient; planes along that direction (orders on a
/// [`FIT_STEP`] grid, gradients from [`GRADIENT_LEVELS`] within half to twice the first)
/// predict every window pixel's colour from `tables`, and a plane is scored by the mean
/// ΔE\*ab over the window plus [`CONTINUITY_WEIGHT`] × its mean disagreement with the valued
/// pixels. The best plane within [`WINDOW_REACH`] of the first order gives the pixel its
/// order if it scores below [`WINDOW_RESIDUAL`], beats its rivals by [`WINDOW_MARGIN`], is no
/// steeper than [`WINDOW_MAX_GRADIENT`], stays [`WINDOW_BELOW_TOP`] below the table's top, and
/// rises towards the window's *beyond range* pixels (so that growth cannot fold back down
/// into orders past the table, whose colours can mirror the table's last fringes).
pub(super) fn repair_by_window_fit(
    pass: &mut Pass,
    lab: &LabImage,
    tables: &BlurredTables,
    width: usize,
    height: usize,
) {
    let top = tables.top();
    let ceiling = top - WINDOW_BELOW_TOP;
    let blurs = CAMERA_BLURS.len();
    grow_layers(pass, width, height, |pass, p| {
        let (x, y) = ((p % width) as i64, (p / width) as i64);
        let (a, bx, by) = fit_plane(pass, x, y, width, height)?;
        let g0 = bx.hypot(by);
        if a < 0.0 || a > f64::from(ceiling) || g0 < MIN_DIRECTION_GRADIENT {
            return None;
        }
        let (a, g0) = (a as f32, g0 as f32);
        let (ux, uy) = (bx as f32 / g0, by as f32 / g0);
        // Window pixels as (distance along the rise, colour); valued ones also as (distance,
        // order); and where the beyond-range pixels lie.
        let mut colours = Vec::with_capacity(25);
        let mut known = Vec::with_capacity(25);
        let mut towards_beyond = 0.0;
        for (dx, dy, q) in repair_window(x, y, width, height) {
            let flags = pass.flags[q];
            if flags.has(PixelFlags::OUTSIDE_MASK) {
                continue;
            }
            let t = ux * dx as f32 + uy * dy as f32;
            colours.push((t, lab.data[q]));
            if flags.0 == 0 {
                known.push((t, pass.order[q]));
            } else if flags.has(PixelFlags::BEYOND_RANGE) {
                towards_beyond += t;
            }
        }
        if colours.len() < MIN_WINDOW_PIXELS || towards_beyond < 0.0 {
            return None;
        }
        // A plane's score with order n0 at the pixel: the best over the gradient levels near
        // the first gradient and the camera blurs, with its level.
        let levels: Vec<usize> = (0..GRADIENT_LEVELS.len())
            .filter(|&k| (0.5 * g0..=2.0 * g0 + 0.05).contains(&GRADIENT_LEVELS[k]))
            .collect();
        let score = |n0: f32| {
            let mut best = (f32::INFINITY, 0usize);
            for &k in &levels {
                let g = GRADIENT_LEVELS[k];
                let disagreement = known
                    .iter()
                    .map(|&(t, o)| (n0 + g * t - o).abs())
                    .sum::<f32>()
                    / known.len() as f32;
                for table in &tables.colours[k * blurs..(k + 1) * blurs] {
                    let (mut sum, mut count) = (0.0, 0);
                    for &(t, c) in &colours {
                        let n = (n0 + g * t).abs();
                        if n <= top {
                            sum += delta_e_ab(c, table[(n / tables.step + 0.5) as usize]);
                            count += 1;
                        }
                    }
                    let score = sum / count as f32 + CONTINUITY_WEIGHT * disagreement;
                    if count >= MIN_WINDOW_PIXELS && score < best.0 {
                        best = (score, k);
                    }
                }
            }
            best
        };
        let admissible = |n: f32| (n - a).abs() <= WINDOW_REACH && n <= ceiling;
        // (order, (score, gradient level)), compared by score.
        type Scored = (f32, (f32, usize));
        let by_score = |u: &Scored, v: &Scored| u.1 .0.total_cmp(&v.1 .0);
        // Rivals on the coarse grid; the best of them refined on the fine one.
        let coarse = FIT_STEP * COARSE_STEPS as f32;
        let first = ((a - RIVAL_REACH).max(0.0) / coarse).ceil() as usize;
        let last = ((a + RIVAL_REACH).min(top) / coarse).floor() as usize;
        let rivals: Vec<Scored> = (first..=last)
            .map(|i| i as f32 * coarse)
            .map(|n| (n, score(n)))
            .collect();
        let near = rivals
            .iter()
            .filter(|r| admissible(r.0))
            .min_by(|u, v| by_score(u, v))?
            .0;
        let steps = COARSE_STEPS as i32 - 1;
        let (order, (best, level)) = (-steps..=steps)
            .map(|j| near + j as f32 * FIT_STEP)
            .filter(|&n| n >= 0.0 && admissible(n))
            .map(|n| (n, score(n)))
            .min_by(by_score)?;
        let rival = rivals
            .iter()
            .filter(|r| (r.0 - order).abs() > RIVAL_SEPARATION)
            .map(|r| r.1 .0)
            .fold(f32::INFINITY, f32::min);
        if best > WINDOW_RESIDUAL
            || rival - best < WINDOW_MARGIN
            || GRADIENT_LEVELS[level] > WINDOW_MAX_GRADIENT
        {
            return None;
        }
        // The pixel's own colour against its predicted one (the sharper blur's), as residual.
        let predicted = tables.colours[level * blurs][(order / tables.step + 0.5) as usize];
        Some((order, delta_e_ab(lab.data[p], predicted)))
    });
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::colour::lab_from_linear;

    /// A 15 × 12 photo of a ramp across x, of order `start` at x = 0 changing by `slope`
    /// fringes per pixel: each pixel's colour is the table's, in linear light,
    /// averaged over the pixel's width and a Gaussian lens blur of σ = 0.7 px, by dense
    /// sampling. Columns 0–3 hold their true orders; the rest are flagged `flag`.
    fn ramp(
        table: &CalibrationTable,
        start: f32,
        slope: f32,
        flag: u8,
    ) -> (Pass, LabImage, Vec<f32>) {
        let (width, height) = (15, 12);
        let truth = |x: f32| start + slope * x;
        let colour = |x: usize| {
            let (mut acc, mut total) = ([0f32; 3], 0.0);
            for i in 0..10 {
                let inside = (i as f32 + 0.5) / 10.0 - 0.5;
                for k in -30..=30 {
                    let v = k as f32 * 0.07;
                    let w = (-0.5 * (v / 0.7).powi(2)).exp();
                    let n = truth(x as f32 + 0.5 + inside + v).abs();
                    let c = linear_from_lab(table.colour_at(f64::from(n)));
                    acc[0] += w * c.red;
                    acc[1] += w * c.green;
                    acc[2] += w * c.blue;
                    total += w;
                }
            }
            lab_from_linear(LinSrgb::new(acc[0] / total, acc[1] / total, acc[2] / total))
        };
        let n = width * height;
        let orders: Vec<f32> = (0..n).map(|p| truth((p % width) as f32 + 0.5)).collect();
        let lab = LabImage {
            width: width as u32,
            height: height as u32,
            data: (0..n).map(|p| colour(p % width)).collect(),
        };
        let mut pass = Pass {
            order: orders.clone(),
            residual: vec![1.0; n],
            margin: vec![10.0; n],
            flags: vec![PixelFlags::default(); n],
        };
        for p in (0..n).filter(|p| p % width >= 4) {
            pass.order[p] = f32::NAN;
            pass.flags[p].0 = flag;
        }
        (pass, lab, orders)
    }

    #[test]
    fn a_steep_blurred_ramp_is_regrown_to_its_true_orders_up_to_below_the_tables_top() {
        // source: closed-form test field (a linear ramp); colours from the renderer's
        // daylight table, blurred in linear light as a lens does (common practice, no source).
        let table = daylight_test_table("window fit");
        let fine = SearchTable::new(&table, table.order_step, 4.4, REFINE_LIGHTNESS_WEIGHT);
        let tables = BlurredTables::new(&fine, 1);
        let ceiling = 4.4 - WINDOW_BELOW_TOP;
        // Pixels two rows or more from the top and bottom edges and two columns or more from
        // the right one must grow; nearer, windows hold too few pixels, or pixels of the
        // corners left flagged.
        let full_window = |p: usize| (2..10).contains(&(p / 15)) && p % 15 <= 12;
        // Grown where the window is full, and within 0.05 fringe of the truth, below the
        // ceiling, wherever grown.
        let check = |pass: &Pass, truth: &[f32]| {
            for (p, &t) in truth.iter().enumerate() {
                let o = pass.order[p];
                if full_window(p) {
                    assert_eq!(pass.flags[p].0, 0, "pixel {p} (order {t}) not grown");
                }
                if !o.is_nan() {
                    assert!((o - t).abs() < 0.05, "pixel {p}: {o} for {t}");
                    assert!(o <= ceiling, "pixel {p}: {o} above the ceiling");
                }
            }
        };
        // Rising towards pixels beyond range (orders 1.1–3.9): grown.
        let (mut rising, lab, truth) = ramp(&table, 1.0, 0.2, PixelFlags::BEYOND_RANGE);
        repair_by_window_fit(&mut rising, &lab, &tables, 15, 12);
        check(&rising, &truth);
        // Falling towards them (orders 3.9 down to 1.1): nothing grows, since orders past the
        // table cannot lie where the orders fall ...
        let (mut falling, lab, _) = ramp(&table, 4.0, -0.2, PixelFlags::BEYOND_RANGE);
        repair_by_window_fit(&mut falling, &lab, &tables, 15, 12);
        assert_eq!(falling.order.iter().filter(|o| !o.is_nan()).count(), 4 * 12);
        // ... while the same ramp flagged merely unreliable is grown.
        let (mut unsure, lab, truth) = ramp(&table, 4.0, -0.2, PixelFlags::UNRELIABLE);
        repair_by_window_fit(&mut unsure, &lab, &tables, 15, 12);
        check(&unsure, &truth);
    }
}
