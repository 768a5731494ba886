//! The solver judged on randomised, seeded scenes (`render::scenarios`): lights, cameras,
//! plates, dispersion, exposure, vignetting, blur, noise, file formats and specimens drawn
//! from seeds rather than chosen. Ground truth: closed-form fields (Timoshenko & Goodier's
//! disc, Kirsch's plate, Lamé's ring, beam theory) rendered through the spectral renderer.
//!
//! Two tiers. The CI tier maps seeds 1–40 (the draw the solver's rules were measured on) and
//! holds every target of the issue that the solver meets, scene by scene, and a ceiling on the
//! number of scenes that still miss the others, so that no change makes them worse unnoticed.
//! The long tier maps seeds 1001–1300, which no rule was tuned on, and prints the
//! distribution (docs/validation.md quotes it):
//!
//! `cargo test --release -p isotint-core --test generated_scenes -- --ignored --nocapture`

use isotint_core::render::scenarios::{Scenario, SceneScore};
use isotint_core::{map_orders, MapOptions};

/// The targets, per scene (shares 0–1, orders in fringes).
const MAE: f64 = 0.015;
const JUMPS: f64 = 0.0005;
const COVERAGE: f64 = 0.99;
const FALSE_BEYOND: f64 = 0.002;
const ZERO_RIGHT: f64 = 0.995;
const PAST_VALUED: f64 = 0.001;
/// Share of the valued scored pixels of a whole draw within 2 σ of the truth: honest, not
/// inflated.
const TWO_SIGMA: (f64, f64) = (0.90, 0.995);

fn run(seed: u64) -> (Scenario, SceneScore) {
    let scenario = Scenario::draw(seed).unwrap();
    let scene = scenario.render().unwrap();
    let map = map_orders(
        &scene.photo,
        &scene.table,
        Some(&scene.mask),
        &MapOptions::default(),
    )
    .unwrap();
    let score = SceneScore::of(&map, &scene);
    (scenario, score)
}

fn pct(v: f64) -> String {
    if v.is_nan() {
        "     -".into()
    } else {
        format!("{:6.2}", 100.0 * v)
    }
}

/// Maps every seed, printing one scene per two lines.
fn map_all(seeds: impl Iterator<Item = u64>) -> Vec<(Scenario, SceneScore)> {
    seeds
        .map(|seed| {
            let (scenario, s) = run(seed);
            println!(
                "{}\n      top {:.2} scored {:>7} MAE {:.4} jumps {}% cov {}% false-beyond {}% zero {}% ({}) past {}% ({}) 2σ {}% median σ {:.3}",
                scenario.summary(),
                s.table_top,
                s.scored,
                s.mae,
                pct(s.jumps),
                pct(s.coverage),
                pct(s.false_beyond),
                pct(s.zero_right),
                s.zero_pixels,
                pct(s.past_valued),
                s.past_pixels,
                pct(s.within_two_sigma),
                s.median_sigma,
            );
            (scenario, s)
        })
        .collect()
}

/// A target: its name and whether a scene misses it (a scene without such pixels never does).
type Target = (&'static str, fn(&SceneScore) -> bool);

const TARGETS: [Target; 6] = [
    ("MAE", |s| s.mae > MAE),
    ("jumps", |s| s.jumps > JUMPS),
    ("coverage", |s| s.coverage < COVERAGE),
    ("false beyond", |s| s.false_beyond > FALSE_BEYOND),
    ("zero order", |s| s.zero_right < ZERO_RIGHT),
    ("past table", |s| s.past_valued > PAST_VALUED),
];

/// Share of all valued scored pixels of the draw within 2 σ of the truth.
fn pooled_within_two_sigma(rows: &[(Scenario, SceneScore)]) -> f64 {
    let (within, all) =
        rows.iter()
            .filter(|(_, s)| s.with_sigma > 0)
            .fold((0.0, 0.0), |(w, a), (_, s)| {
                let n = s.with_sigma as f64;
                (w + s.within_two_sigma * n, a + n)
            });
    within / all
}

/// Prints, per target, the scenes that miss it; returns their counts in [`TARGETS`] order.
fn misses(rows: &[(Scenario, SceneScore)]) -> Vec<usize> {
    TARGETS
        .iter()
        .map(|(name, missed)| {
            let seeds: Vec<u64> = rows
                .iter()
                .filter(|(_, s)| missed(s))
                .map(|(c, _)| c.seed)
                .collect();
            println!("{name:<13} missed by {:>3} scenes: {seeds:?}", seeds.len());
            seeds.len()
        })
        .collect()
}

/// Percentiles (5th, 50th, 95th) of one figure over the scenes that have it.
fn percentiles(rows: &[(Scenario, SceneScore)], figure: fn(&SceneScore) -> f64) -> [f64; 3] {
    let mut v: Vec<f64> = rows
        .iter()
        .map(|(_, s)| figure(s))
        .filter(|v| v.is_finite())
        .collect();
    v.sort_by(f64::total_cmp);
    if v.is_empty() {
        return [f64::NAN; 3];
    }
    [0.05, 0.5, 0.95].map(|q| v[((v.len() - 1) as f64 * q).round() as usize])
}

#[test]
fn forty_drawn_scenes_hold_the_targets_met_and_miss_no_more_than_measured() {
    let rows = map_all(1..=40);
    let counts = misses(&rows);
    // Met in every scene of the draw: the zero order of unloaded beam ends reads 0.
    // source: common practice, no source (in a dark field N = 0 is black).
    assert_eq!(counts[4], 0, "zero-order regions");
    // Still missed by some scenes (issue 15 stays open for them); measured counts:
    // MAE 7, jumps 6, coverage 6, false beyond 15, past table 2. A change that makes any of
    // them worse fails here.
    let ceilings = [7, 6, 6, 15, 0, 2];
    for ((name, _), (count, ceiling)) in TARGETS.iter().zip(counts.iter().zip(ceilings)) {
        assert!(
            *count <= ceiling,
            "{name}: {count} scenes miss it, measured ceiling {ceiling}"
        );
    }
    // Over the whole draw: the uncertainty is honest, the coverage's 5th percentile.
    let two_sigma = pooled_within_two_sigma(&rows);
    println!(
        "valued pixels within 2σ of the truth: {:.2} %",
        100.0 * two_sigma
    );
    assert!(
        (TWO_SIGMA.0..=TWO_SIGMA.1).contains(&two_sigma),
        "{two_sigma}"
    );
    let coverage = percentiles(&rows, |s| s.coverage);
    println!("coverage 5th/50th/95th percentile: {coverage:?}");
    let sigma = percentiles(&rows, |s| s.median_sigma);
    println!("median σ 5th/50th/95th percentile: {sigma:?}");
    assert!(sigma[1] <= 0.05, "median σ {sigma:?}");
}

#[test]
#[ignore = "about two minutes in release mode; figures in docs/validation.md"]
fn three_hundred_held_out_scenes_report_their_distribution() {
    let rows = map_all(1001..=1300);
    misses(&rows);
    println!(
        "valued pixels within 2σ of the truth: {:.2} %",
        100.0 * pooled_within_two_sigma(&rows)
    );
    for (name, figure) in [
        ("MAE", (|s: &SceneScore| s.mae) as fn(&SceneScore) -> f64),
        ("jumps", |s| s.jumps),
        ("coverage", |s| s.coverage),
        ("false beyond", |s| s.false_beyond),
        ("zero order", |s| s.zero_right),
        ("past table", |s| s.past_valued),
        ("within 2σ", |s| s.within_two_sigma),
        ("median σ", |s| s.median_sigma),
    ] {
        println!(
            "{name:<13} 5th/50th/95th percentile: {:?}",
            percentiles(&rows, figure)
        );
    }
}
