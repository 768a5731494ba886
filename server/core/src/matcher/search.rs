//! Candidate orders of one colour: the table flattened for fast search, and the local
//! minima of a colour's distance curve along it.

use super::*;

/// Colour candidates kept per pixel.
pub(super) const CANDIDATES: usize = 4;
/// Labels per pixel: the candidates plus *beyond range*.
pub(super) const LABELS: usize = CANDIDATES + 1;
/// Index of the *beyond range* label.
pub(super) const BEYOND: usize = CANDIDATES;
/// Order spacing of the candidate search, fringes.
pub(crate) const SEARCH_STEP: f64 = 0.02;
/// Data costs are capped here (ΔE units) so that one bad pixel cannot dominate a path.
pub(super) const COST_CAP: f32 = 25.0;
/// The table flattened for fast search: CIELAB components in separate arrays.
pub(super) struct SearchTable {
    pub(super) step: f64,
    /// 1 / `step`, fringes⁻¹.
    inverse_step: f32,
    pub(super) lightness_weight: f32,
    pub(super) l: Vec<f32>,
    pub(super) a: Vec<f32>,
    pub(super) b: Vec<f32>,
}

impl SearchTable {
    /// Samples `table` every `step` fringes up to `max_order`.
    pub(super) fn new(
        table: &CalibrationTable,
        step: f64,
        max_order: f64,
        lightness_weight: f32,
    ) -> Self {
        let n = (max_order / step + 1e-9).floor() as usize + 1;
        let mut t = SearchTable {
            step,
            inverse_step: (1.0 / step) as f32,
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

    /// CIELAB colour at `order` (fringes), interpolated between entries in `f32`: the
    /// table's own [`CalibrationTable::colour_at`] for the per-pixel loops, where its `f64`
    /// division showed in profiles. Equal to it where `step` is the table's own step.
    #[inline]
    pub(super) fn colour_at(&self, order: f32) -> Lab {
        let last = self.len() - 1;
        let pos = (order * self.inverse_step).clamp(0.0, last as f32);
        // pos ≥ 0: truncation is floor.
        let i = (pos as usize).min(last - 1);
        let t = pos - i as f32;
        let mix = |v: &[f32]| v[i] + t * (v[i + 1] - v[i]);
        Lab::new(mix(&self.l), mix(&self.a), mix(&self.b))
    }

    pub(super) fn len(&self) -> usize {
        self.l.len()
    }

    pub(super) fn max_order(&self) -> f64 {
        (self.len() - 1) as f64 * self.step
    }

    /// Search distance between two colours (ΔE\*ab with ΔL\* weighted as in the search).
    pub(super) fn weighted_distance(&self, a: Lab, b: Lab) -> f32 {
        let dl = self.lightness_weight * (a.l - b.l);
        let (da, db) = (a.a - b.a, a.b - b.b);
        (dl * dl + da * da + db * db).sqrt()
    }

    /// Squared search distance (cheaper for scanning; same minima).
    #[inline]
    pub(super) fn distance_sq(&self, c: Lab, i: usize) -> f32 {
        let dl = self.lightness_weight * (c.l - self.l[i]);
        let (da, db) = (c.a - self.a[i], c.b - self.b[i]);
        dl * dl + da * da + db * db
    }

    /// Squared search distances of `c` to entries `lo..=hi` (`hi` clipped to the table),
    /// written to `out` (cleared first); one branch-free pass that the compiler vectorises.
    pub(super) fn distances_sq(&self, c: Lab, lo: usize, hi: usize, out: &mut Vec<f32>) {
        let span = lo..hi.min(self.len() - 1) + 1;
        let w = self.lightness_weight;
        out.clear();
        out.extend(
            self.l[span.clone()]
                .iter()
                .zip(&self.a[span.clone()])
                .zip(&self.b[span])
                .map(|((l, a), b)| {
                    let dl = w * (c.l - l);
                    let (da, db) = (c.a - a, c.b - b);
                    dl * dl + da * da + db * db
                }),
        );
    }

    /// Best order in entries `lo..=hi` with a parabolic sub-step fit: (order, distance).
    /// `scratch` is working space, reused between calls.
    pub(super) fn best_in(
        &self,
        c: Lab,
        lo: usize,
        hi: usize,
        scratch: &mut Vec<f32>,
    ) -> (f64, f32) {
        self.distances_sq(c, lo, hi, scratch);
        let (mut best, mut best_d) = (0, f32::INFINITY);
        for (i, d) in scratch.iter().enumerate() {
            if *d < best_d {
                best = i;
                best_d = *d;
            }
        }
        match (best.checked_sub(1), scratch.get(best + 1)) {
            (Some(before), Some(after)) => self.vertex(lo + best, scratch[before], best_d, *after),
            _ => self.parabolic(c, lo + best, best_d),
        }
    }

    /// Refines a discrete minimum at entry `i` (squared distance `d_sq`) with a parabola
    /// through its neighbours' squared distances, which near a minimum follow a parabola in
    /// the order: (order, distance at the vertex).
    pub(super) fn parabolic(&self, c: Lab, i: usize, d_sq: f32) -> (f64, f32) {
        if i == 0 || i + 1 >= self.len() {
            return (i as f64 * self.step, d_sq.sqrt());
        }
        self.vertex(
            i,
            self.distance_sq(c, i - 1),
            d_sq,
            self.distance_sq(c, i + 1),
        )
    }

    /// Vertex of the parabola through squared distances `below`, `at`, `above` of entries
    /// i - 1, i, i + 1 (the vertex kept within half a step of i): (order, distance).
    fn vertex(&self, i: usize, below: f32, at: f32, above: f32) -> (f64, f32) {
        let denom = below - 2.0 * at + above;
        if denom <= 1e-6 {
            return (i as f64 * self.step, at.sqrt());
        }
        let shift = (0.5 * (below - above) / denom).clamp(-0.5, 0.5);
        let value = at - 0.25 * (below - above) * shift;
        (
            (i as f64 + f64::from(shift)) * self.step,
            value.max(0.0).sqrt(),
        )
    }
}

/// Per-pixel labels: candidate orders (the last slot is *beyond range*) and their data costs.
#[derive(Clone, Copy)]
pub(super) struct Labels {
    pub(super) order: [f32; LABELS],
    pub(super) cost: [f32; LABELS],
}

pub(super) const NO_LABELS: Labels = Labels {
    order: [f32::NAN; LABELS],
    cost: [f32::INFINITY; LABELS],
};

/// Candidate orders of one colour: the local minima of its distance curve. `scratch` is
/// working space, reused between calls.
pub(super) fn candidates(
    search: &SearchTable,
    c: Lab,
    beyond_order: f32,
    beyond_cost: f32,
    scratch: &mut Vec<f32>,
) -> Labels {
    search.distances_sq(c, 0, search.len() - 1, scratch);
    // Entry i is a local minimum when it is no worse than i - 1 and better than i + 1 (the
    // curve is taken as infinite past both ends). The best CANDIDATES minima are kept in
    // ascending order of distance; the test against the worst kept one comes first, as after
    // the first few minima it turns most entries away.
    let d = scratch.as_slice();
    let mut best: [(f32, usize); CANDIDATES] = [(f32::INFINITY, usize::MAX); CANDIDATES];
    fn keep(best: &mut [(f32, usize); CANDIDATES], v: f32, i: usize) {
        let mut k = CANDIDATES - 1;
        while k > 0 && best[k - 1].0 > v {
            best[k] = best[k - 1];
            k -= 1;
        }
        best[k] = (v, i);
    }
    match d {
        [] => {}
        [only] => {
            if *only < f32::INFINITY {
                keep(&mut best, *only, 0);
            }
        }
        [first, second, ..] => {
            if first < second {
                keep(&mut best, *first, 0);
            }
            // Interior entries in chunks of LANES: a branch-free test per chunk (which the
            // compiler vectorises), entry by entry only in chunks that hold a minimum.
            const LANES: usize = 8;
            let is_kept_minimum =
                |v: f32, left: f32, right: f32, worst: f32| (v < worst) & (v <= left) & (v < right);
            let mut i = 1;
            while i + LANES < d.len() {
                let w: &[f32; LANES + 2] = d[i - 1..i + LANES + 1].try_into().unwrap();
                let worst = best[CANDIDATES - 1].0;
                let any = (0..LANES).fold(false, |any, j| {
                    any | is_kept_minimum(w[j + 1], w[j], w[j + 2], worst)
                });
                if any {
                    for j in 0..LANES {
                        if is_kept_minimum(w[j + 1], w[j], w[j + 2], best[CANDIDATES - 1].0) {
                            keep(&mut best, w[j + 1], i + j);
                        }
                    }
                }
                i += LANES;
            }
            for i in i..d.len() - 1 {
                if is_kept_minimum(d[i], d[i - 1], d[i + 1], best[CANDIDATES - 1].0) {
                    keep(&mut best, d[i], i);
                }
            }
            let (last, before) = (d[d.len() - 1], d[d.len() - 2]);
            if last <= before && last < best[CANDIDATES - 1].0 {
                keep(&mut best, last, d.len() - 1);
            }
        }
    }
    let mut labels = NO_LABELS;
    for (slot, (dist, i)) in best.iter().enumerate() {
        if *i != usize::MAX {
            let (order, value) = search.parabolic(c, *i, *dist);
            labels.order[slot] = order as f32;
            labels.cost[slot] = value.min(COST_CAP);
        }
    }
    labels.order[BEYOND] = beyond_order;
    labels.cost[BEYOND] = beyond_cost;
    labels
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::render::{rendered_table, CameraModel, LightSource, QuarterWavePlates};

    #[test]
    fn candidates_are_the_best_local_minima_found_by_a_plain_scan() {
        use rand::{Rng, SeedableRng};
        // Naive reference: every entry tested on its own, the kept minima re-sorted each time.
        fn minima_naively(d: &[f32]) -> Vec<(f32, usize)> {
            let mut best = vec![(f32::INFINITY, usize::MAX); CANDIDATES];
            for i in 0..d.len() {
                let left = if i == 0 { f32::INFINITY } else { d[i - 1] };
                let right = d.get(i + 1).copied().unwrap_or(f32::INFINITY);
                if d[i] <= left && d[i] < right && d[i] < best[CANDIDATES - 1].0 {
                    best[CANDIDATES - 1] = (d[i], i);
                    best.sort_by(|x, y| x.0.total_cmp(&y.0));
                }
            }
            best
        }
        let table = daylight_test_table("candidates");
        let mut rng = rand::rngs::StdRng::seed_from_u64(5);
        // Table lengths that leave every remainder after the chunks of eight.
        for max_order in [0.08, 0.16, 0.3, 1.0, 2.5, 4.4] {
            let search = SearchTable::new(&table, SEARCH_STEP, max_order, LIGHTNESS_WEIGHT);
            for k in 0..500 {
                // Table colours with noise (several close minima), and arbitrary colours.
                let c = if k % 2 == 0 {
                    let t = table.colour_at(rng.random_range(0.0..max_order));
                    Lab::new(
                        t.l + rng.random_range(-3.0..3.0),
                        t.a + rng.random_range(-3.0..3.0),
                        t.b + rng.random_range(-3.0..3.0),
                    )
                } else {
                    Lab::new(
                        rng.random_range(0.0..100.0),
                        rng.random_range(-60.0..60.0),
                        rng.random_range(-60.0..60.0),
                    )
                };
                let labels = candidates(&search, c, 9.0, 3.0, &mut Vec::new());
                let mut d = Vec::new();
                search.distances_sq(c, 0, search.len() - 1, &mut d);
                for (slot, (dist, i)) in minima_naively(&d).into_iter().enumerate() {
                    if i == usize::MAX {
                        assert!(labels.order[slot].is_nan(), "slot {slot} should be empty");
                        continue;
                    }
                    let (order, value) = search.parabolic(c, i, dist);
                    assert_eq!(labels.order[slot], order as f32, "N {max_order}, {c:?}");
                    assert_eq!(labels.cost[slot], value.min(COST_CAP));
                }
                assert_eq!((labels.order[BEYOND], labels.cost[BEYOND]), (9.0, 3.0));
            }
        }
    }

    #[test]
    fn flattened_table_colours_match_the_tables_own_interpolation() {
        // Naive reference: CalibrationTable::colour_at in f64.
        let table = rendered_table(
            LightSource::Halogen,
            CameraModel::Sensor,
            QuarterWavePlates::Ideal,
            4.0,
            0.01,
            crate::CalibrationMetadata {
                name: "flattened".into(),
                ..Default::default()
            },
        )
        .unwrap();
        let flat = SearchTable::new(&table, table.order_step, table.max_order(), 1.0);
        for k in 0..=4100 {
            let order = k as f64 * 0.001 - 0.05; // also a little outside 0…4
            let (a, b) = (table.colour_at(order), flat.colour_at(order as f32));
            assert!(delta_e_ab(a, b) < 2e-3, "order {order}: {a:?} vs {b:?}");
        }
    }
}
