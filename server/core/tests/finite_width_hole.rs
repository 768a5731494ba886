//! A plate of finite width with a central hole under tension: its stress-concentration factor
//! against the handbook chart, and recovered from a rendered photo through the free-edge stress.
//!
//! The reference: Howland's solution (1930) for a strip with a central circular hole, as
//! charted in Peterson's Stress Concentration Factors with the fit, from memory,
//! K_tn = 3.00 − 3.13 (d/W) + 3.66 (d/W)² − 1.53 (d/W)³ on the net section
//! σ_net = S·W/(W − d). (Heywood's formula 2 + (1 − d/W)³ agrees within 1 % for d/W ≤ 0.5.)
//!
//! The field drawn is found here by boundary collocation (no closed form exists): a Michell
//! stress function symmetric about both axes, its coefficients fitted by least squares so that
//! the hole and the long edges are free of traction and the ends, two widths from the hole,
//! carry σyy = S, τxy = 0.

mod common;

use isotint_core::boundary::{boundary_stress, EdgePath};
use isotint_core::render::{FieldSample, OrderField};
use isotint_core::stress::{PlaneStress, StressOpticLaw};
use isotint_core::{map_orders, MapOptions};
use nalgebra::{DMatrix, DVector};

/// Peterson's fit of Howland's net-section K_t for a hole of diameter d in a strip of width W.
fn howland_kt_net(d_over_w: f64) -> f64 {
    3.00 - 3.13 * d_over_w + 3.66 * d_over_w.powi(2) - 1.53 * d_over_w.powi(3)
}

/// The highest harmonic cos nθ of the stress function.
const HARMONICS: i32 = 36;

/// One term of the stress function: r^m cos nθ (θ from +x), or ln r.
#[derive(Debug, Clone, Copy)]
enum Term {
    Log,
    Power { m: i32, n: i32 },
}

/// A strip |x| ≤ W/2 with a hole of radius 1 at the origin, remote tension S = 1 along y,
/// lengths in hole radii, stresses in units of S.
struct Strip {
    half_width: f64,
    /// Positive powers are written (r/R)^m so that every column stays of order one.
    reach: f64,
    terms: Vec<(Term, f64)>,
}

impl Term {
    /// (σ_rr, σ_θθ, τ_rθ) of this term at (r, θ), with positive powers scaled by `reach`.
    fn polar(self, r: f64, theta: f64, reach: f64) -> [f64; 3] {
        match self {
            Term::Log => [1.0 / (r * r), -1.0 / (r * r), 0.0],
            Term::Power { m, n } => {
                let (m_f, n_f) = (f64::from(m), f64::from(n));
                let scale = if m > 0 {
                    (r / reach).powi(m)
                } else {
                    r.powi(m)
                } / (r * r);
                let (c, s) = ((n_f * theta).cos(), (n_f * theta).sin());
                [
                    (m_f - n_f * n_f) * scale * c,
                    m_f * (m_f - 1.0) * scale * c,
                    n_f * (m_f - 1.0) * scale * s,
                ]
            }
        }
    }
}

/// Cartesian stress of polar components at angle θ.
fn cartesian([srr, stt, trt]: [f64; 3], theta: f64) -> PlaneStress {
    let (c, s) = (theta.cos(), theta.sin());
    PlaneStress {
        sx: srr * c * c + stt * s * s - 2.0 * trt * s * c,
        sy: srr * s * s + stt * c * c + 2.0 * trt * s * c,
        txy: (srr - stt) * s * c + trt * (c * c - s * s),
    }
}

impl Strip {
    /// Solves the strip of width `width` (hole radii) with harmonics cos nθ up to `max_n`.
    fn solve(width: f64, max_n: i32) -> Strip {
        let half_width = 0.5 * width;
        let half_length = 2.0 * width;
        let reach = half_width.hypot(half_length);
        let mut terms = vec![Term::Log, Term::Power { m: 2, n: 0 }];
        for n in (2..=max_n).step_by(2) {
            for m in [n, n + 2, -n, 2 - n] {
                terms.push(Term::Power { m, n });
            }
        }
        // Each row: a traction component at a point of the first quadrant (symmetry does the
        // rest) and its wanted value.
        let mut rows: Vec<(Vec<f64>, f64)> = Vec::new();
        let mut add =
            |x: f64, y: f64, pick: &dyn Fn(PlaneStress, [f64; 3]) -> [f64; 2], want: [f64; 2]| {
                let (r, theta) = (x.hypot(y), y.atan2(x));
                let columns: Vec<[f64; 2]> = terms
                    .iter()
                    .map(|t| {
                        let p = t.polar(r, theta, reach);
                        pick(cartesian(p, theta), p)
                    })
                    .collect();
                for k in 0..2 {
                    rows.push((columns.iter().map(|c| c[k]).collect(), want[k]));
                }
            };
        for i in 0..=80 {
            let theta = std::f64::consts::FRAC_PI_2 * f64::from(i) / 80.0;
            add(theta.cos(), theta.sin(), &|_, p| [p[0], p[2]], [0.0, 0.0]);
        }
        for i in 0..=160 {
            let y = half_length * f64::from(i) / 160.0;
            add(half_width, y, &|s, _| [s.sx, s.txy], [0.0, 0.0]);
        }
        for i in 0..=60 {
            let x = half_width * f64::from(i) / 60.0;
            add(x, half_length, &|s, _| [s.sy, s.txy], [1.0, 0.0]);
        }
        let a = DMatrix::from_fn(rows.len(), terms.len(), |i, j| rows[i].0[j]);
        let b = DVector::from_iterator(rows.len(), rows.iter().map(|r| r.1));
        let coefficients = a
            .svd(true, true)
            .solve(&b, 1e-12)
            .expect("a least-squares solution");
        Strip {
            half_width,
            reach,
            terms: terms
                .into_iter()
                .zip(coefficients.iter().copied())
                .collect(),
        }
    }

    /// Stress at (x, y) hole radii from the hole's centre, units of S.
    fn stress_at(&self, x: f64, y: f64) -> PlaneStress {
        let (r, theta) = (x.hypot(y), y.atan2(x));
        let mut p = [0.0; 3];
        for (term, c) in &self.terms {
            let q = term.polar(r, theta, self.reach);
            for k in 0..3 {
                p[k] += c * q[k];
            }
        }
        cartesian(p, theta)
    }

    /// Net-section K_t: σ_θθ beside the hole over S·W/(W − d).
    fn kt_net(&self) -> f64 {
        let width = 2.0 * self.half_width;
        self.stress_at(1.0, 0.0).sy * (width - 2.0) / width
    }
}

#[test]
fn the_collocated_strip_matches_howlands_chart_and_tends_to_kirsch_when_wide() {
    for d_over_w in [0.3, 0.4, 0.5] {
        let strip = Strip::solve(2.0 / d_over_w, HARMONICS);
        let (kt, chart) = (strip.kt_net(), howland_kt_net(d_over_w));
        println!("d/W {d_over_w}: K_tn {kt:.4}, chart {chart:.4}");
        // source: Howland (1930) as charted in Peterson's Stress Concentration Factors (fit
        // from memory); the chart is read to about 1 %.
        assert!(
            (kt - chart).abs() <= 0.015 * chart,
            "d/W {d_over_w}: {kt} vs {chart}"
        );
        let edge = strip.stress_at(strip.half_width, 0.7);
        // The long edges are free of traction (to 2 % of S, the collocation's residual there).
        assert!(edge.sx.abs() < 0.02 && edge.txy.abs() < 0.02, "{edge:?}");
    }
    // source: Kirsch (1898), K_t = 3 (gross and net alike) as the strip becomes wide.
    let wide = Strip::solve(40.0, HARMONICS);
    let gross = wide.stress_at(1.0, 0.0).sy;
    assert!((gross - 3.0).abs() < 0.03, "K_tg {gross}");
}

/// The strip in a photo: hole radius `radius_px` centred at (`cx`, `cy`), remote σyy of
/// `remote_mpa` through `law`.
struct StripField {
    strip: Strip,
    centre: (f64, f64),
    radius_px: f64,
    remote_mpa: f64,
    law: StressOpticLaw,
}

impl OrderField for StripField {
    fn sample(&self, x: f64, y: f64) -> Option<FieldSample> {
        let (dx, dy) = (
            (x - self.centre.0) / self.radius_px,
            (y - self.centre.1) / self.radius_px,
        );
        if dx.abs() > self.strip.half_width || dx.hypot(dy) < 1.0 {
            return None;
        }
        let s = self.strip.stress_at(dx, dy);
        let stress = PlaneStress {
            sx: s.sx * self.remote_mpa,
            sy: s.sy * self.remote_mpa,
            txy: s.txy * self.remote_mpa,
        };
        Some(FieldSample {
            order: self.law.order(stress.principal_difference()),
            isoclinic_rad: stress.principal_angle(),
        })
    }
}

#[test]
fn a_rendered_strip_with_a_hole_gives_the_handbooks_net_section_kt() {
    // d/W = 0.4: a hole of 120 px radius in a strip 600 px wide, remote order 0.8 (1.4 MPa at
    // 1.75 MPa per fringe): about 3 fringes beside the hole, inside the table's 4.
    let law = StressOpticLaw::new(10.5, 6.0).unwrap();
    let d_over_w = 0.4;
    let field = StripField {
        strip: Strip::solve(2.0 / d_over_w, HARMONICS),
        centre: (340.0, 440.0),
        radius_px: 120.0,
        remote_mpa: law.stress_difference_mpa(0.8),
        law,
    };
    let (photo, mask) = common::rendered_photo(&field, 680, 880, 7);
    let table = common::rendered_daylight_table();
    let map = map_orders(&photo, &table, Some(&mask), &MapOptions::default()).unwrap();
    let net = field.remote_mpa / (1.0 - d_over_w);
    let result = boundary_stress(&map, &law, Some(net), &EdgePath::Outline).unwrap();
    let kt = result.kt.unwrap();
    let chart = howland_kt_net(d_over_w);
    println!(
        "rendered strip d/W {d_over_w}: K_tn {kt:.4} at ({:.1}, {:.1}), chart {chart:.4}, \
         collocation {:.4}",
        result.x,
        result.y,
        field.strip.kt_net()
    );
    // source: Howland (1930) / Peterson's chart (from memory), 2.236 at d/W = 0.4. The edge
    // reading carries orders to the edge linearly and so reads low where the gradient steepens
    // towards it (docs/stresses.md; 2.0 % here); with the chart's own 1 %, 4 % in all.
    assert!((kt - chart).abs() <= 0.04 * chart, "K_tn {kt} vs {chart}");
    // Beside the hole, on the horizontal through its centre.
    assert!((result.y - 440.0).abs() < 15.0, "{result:?}");
    assert!(((result.x - 340.0).abs() - 120.0).abs() < 2.0, "{result:?}");
    assert!(!result.max_is_lower_bound, "{result:?}");
}
