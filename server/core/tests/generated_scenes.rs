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
    // No scene is read confidently wrong: a uniform field whose one colour two orders explain
    // at plausible exposures gets no value rather than the wrong fringe everywhere.
    // source: common practice, no source (colours repeat from order to order).
    for (scenario, s) in &rows {
        assert!(
            s.jumps.is_nan() || s.jumps <= 0.5,
            "seed {}: {:.0} % of its valued pixels a fringe off",
            scenario.seed,
            100.0 * s.jumps
        );
    }
    // Still missed by some scenes (issue 15 stays open for them); measured counts:
    // MAE 5, jumps 5, coverage 7 (one an ambiguous uniform field, unvalued), false beyond 3
    // (past the table: none of the forty, but 36 of the 300 held-out scenes). A change that
    // makes any of them worse fails here.
    let ceilings = [5, 5, 7, 3, 0, 0];
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

/// The edge-order estimate on each scene's calibration beam (edge order 4.5, lit, filmed and
/// filed as the scene draws it): relative errors, or the refusal. Prints one line per seed and
/// returns (seed, error or None when refused).
fn estimate_beams(seeds: impl Iterator<Item = u64>) -> Vec<(u64, Option<f64>)> {
    use isotint_core::beam::estimate::{default_references, estimate_edge_order};
    use isotint_core::render::PHOTOGRAPHED_BEAM_EDGE_ORDER as TRUTH;
    let references = default_references();
    seeds
        .map(|seed| {
            let scenario = Scenario::draw(seed).unwrap();
            let (photo, region) = scenario.beam_photo().unwrap();
            let result = estimate_edge_order(&photo, &region, &references);
            let error = result.as_ref().ok().map(|e| (e.edge_order - TRUTH) / TRUTH);
            match &result {
                Ok(e) => println!(
                    "{}\n      edge order {:.3} ({:+.2} %), residual {:.2} ΔE00, {}",
                    scenario.summary(),
                    e.edge_order,
                    100.0 * (e.edge_order - TRUTH) / TRUTH,
                    e.residual_de2000,
                    e.confidence.name()
                ),
                Err(refused) => println!("{}\n      refused: {refused}", scenario.summary()),
            }
            (seed, error)
        })
        .collect()
}

/// Prints refusals, the share within 2 % and the median and worst error; returns (refused,
/// within 2 %, estimated).
fn summarise_estimates(rows: &[(u64, Option<f64>)]) -> (usize, usize, usize) {
    let refused = rows.iter().filter(|(_, e)| e.is_none()).count();
    let mut errors: Vec<f64> = rows.iter().filter_map(|(_, e)| e.map(f64::abs)).collect();
    errors.sort_by(f64::total_cmp);
    let within = errors.iter().filter(|e| **e <= EDGE_ORDER_ERROR).count();
    println!(
        "refused {refused} of {}; within 2 %: {within} of {}; median |error| {:.2} %, worst {:.2} %",
        rows.len(),
        errors.len(),
        100.0 * errors.get(errors.len() / 2).copied().unwrap_or(f64::NAN),
        100.0 * errors.last().copied().unwrap_or(f64::NAN),
    );
    (refused, within, errors.len())
}

/// The target for the edge-order estimate on drawn beams: relative error.
const EDGE_ORDER_ERROR: f64 = 0.02;

#[test]
fn the_edge_order_estimate_reads_every_drawn_calibration_beam_within_two_percent() {
    // source: closed-form pure bending, N linear through the depth from 0 to N_edge = 4.5
    // (the rendered field).
    let (refused, within, estimated) = summarise_estimates(&estimate_beams(1..=40));
    assert_eq!(refused, 0);
    assert_eq!(within, estimated);
}

#[test]
#[ignore = "about four minutes in release mode; figures in docs/validation.md"]
fn the_edge_order_estimate_on_three_hundred_held_out_beams() {
    summarise_estimates(&estimate_beams(1001..=1300));
}
