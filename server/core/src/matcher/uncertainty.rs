//! Standard uncertainty (1 σ, fringes) of each valued pixel's order.
//!
//! A colour that lies ΔE from the table moves the order by about ΔE / |dC/dN|, where |dC/dN|
//! is the table's local slope in ΔE\*ab per fringe: steep in the first orders (black to white
//! to vivid tints), shallow where the tints wash out. The colour's own miss (its residual)
//! and the photo's typical miss (noise, compression, plates and dispersion the table does not
//! hold) are combined as independent terms; a floor stands for the calibration itself (the
//! beam's edge order and the table's grid).

use super::*;

/// Half-width of the central difference for the table's slope, fringes.
const SLOPE_SPAN: f64 = 0.03;
/// Least table slope used, ΔE\*ab per fringe: where the tints barely change with order
/// (far up the table) colour says little, and σ is large but finite.
const MIN_SLOPE: f32 = 4.0;
/// Scale from colour miss over slope to 1 σ of the order, set on the CI draw of generated
/// scenes (seeds 1–40): 90.9 % of its valued pixels lie within 2 σ of the truth (two scenes
/// read a whole fringe off), 96.7 % of the held-out draw's (docs/validation.md).
const MISS_TO_SIGMA: f32 = 0.5;
/// Relative uncertainty of the calibration (edge order of the beam), per fringe of order.
const CALIBRATION_RELATIVE: f32 = 0.005;
/// Absolute floor, fringes: the table's grid and the solver's sub-step fit.
const FLOOR: f32 = 0.004;

/// 1 σ of `pass`'s orders, fringes; NaN where there is no value. `table` up to `max_order`.
pub(super) fn order_uncertainty(pass: &Pass, table: &CalibrationTable, max_order: f64) -> Vec<f32> {
    let step = table.order_step;
    let count = (max_order / step).floor() as usize + 1;
    // Per table entry, (MISS_TO_SIGMA / slope)²: the colour term's factor on the squared miss.
    let colour_factor: Vec<f32> = (0..count)
        .map(|i| {
            let n = i as f64 * step;
            let (lo, hi) = ((n - SLOPE_SPAN).max(0.0), (n + SLOPE_SPAN).min(max_order));
            let d = delta_e_ab(table.colour_at(lo), table.colour_at(hi));
            let slope = (d / (hi - lo) as f32).max(MIN_SLOPE);
            (MISS_TO_SIGMA / slope).powi(2)
        })
        .collect();
    let mut residuals: Vec<f32> = pass
        .order
        .iter()
        .zip(&pass.residual)
        .step_by((pass.order.len() / 20_000).max(1))
        .filter(|(o, r)| o.is_finite() && r.is_finite())
        .map(|(_, r)| *r)
        .collect();
    let typical_sq = if residuals.is_empty() {
        0.0
    } else {
        median_f32(&mut residuals).powi(2)
    };
    let inverse_step = (1.0 / step) as f32;
    let mut sigma = par_filled(pass.order.len(), f32::NAN);
    sigma
        .par_iter_mut()
        .zip(pass.order.par_iter())
        .zip(pass.residual.par_iter())
        .filter(|((_, o), _)| o.is_finite())
        .for_each(|((sigma, &o), &r)| {
            // o ≥ 0: truncation is floor.
            let i = ((o * inverse_step + 0.5) as usize).min(count - 1);
            let miss_sq = r.max(0.0).powi(2) + typical_sq;
            let relative = CALIBRATION_RELATIVE * o;
            // The three terms are independent: their squares add.
            *sigma = (colour_factor[i] * miss_sq + relative * relative + FLOOR * FLOOR).sqrt();
        });
    sigma
}
