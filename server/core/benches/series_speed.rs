//! Speed of a load series: three 1-megapixel PNG photos of a rendered disc (1000 × 1000, mask
//! of the disc) → decoded, mapped and fitted, with the disc's fringe value. Run with
//! `cargo bench -p isotint-core --bench series_speed`; set `RAYON_NUM_THREADS=2` for the
//! two-core figure the docs quote. The photos are rendered first (not timed).

use std::time::Instant;

use isotint_core::render::{
    develop, render_scene, rendered_table, CameraModel, DiscField, LightSource, PhotoEffects,
    PhotoEncoding, QuarterWavePlates, RenderSetup, Renderer,
};
use isotint_core::series::{map_series, SeriesSpec};
use isotint_core::stress::DiscInCompression;
use isotint_core::{CalibrationMetadata, DecodeLimits, MapOptions, Photo, PixelPoint};

const SIZE: u32 = 1000;
const RUNS: usize = 3;
const DIAMETER_MM: f64 = 40.0;
const FRINGE_VALUE: f64 = 10.5;

fn main() {
    let renderer = Renderer::new(RenderSetup::default()).expect("renderer");
    // Centre orders 1, 2 and 3: P = N·π·D·f_σ/8.
    let loads: Vec<f64> = [1.0, 2.0, 3.0]
        .iter()
        .map(|n| n * std::f64::consts::PI * DIAMETER_MM * FRINGE_VALUE / 8.0)
        .collect();
    let mut mask = None;
    let photos: Vec<Vec<u8>> = loads
        .iter()
        .map(|&p| {
            let field = DiscField::new(
                PixelPoint { x: 500.0, y: 500.0 },
                460.0,
                DiscInCompression::new(DIAMETER_MM, 6.0, p).expect("disc"),
                FRINGE_VALUE,
            )
            .expect("field");
            let scene = render_scene(&field, &renderer, SIZE, SIZE, 2).expect("scene");
            mask = Some(scene.mask);
            let effects = PhotoEffects {
                blur_sigma_px: 0.6,
                noise_sigma_codes: 1.0,
                ..PhotoEffects::default()
            };
            develop(&scene.image, &effects, PhotoEncoding::Png8).expect("png")
        })
        .collect();
    let mask = mask.expect("a mask");
    let table = rendered_table(
        LightSource::Daylight,
        CameraModel::Colorimetric,
        QuarterWavePlates::Ideal,
        4.0,
        0.01,
        CalibrationMetadata {
            name: "series bench".into(),
            ..Default::default()
        },
    )
    .expect("table");
    let spec = SeriesSpec::new(3, loads, Some(DIAMETER_MM), Some(6.0)).expect("spec");
    let mut times = Vec::new();
    for _ in 0..RUNS {
        let start = Instant::now();
        let limits = DecodeLimits::default();
        let series = map_series(
            &spec,
            photos.iter().map(|p| Photo::decode(p, &limits)),
            &mask,
            &table,
            &MapOptions::default(),
        )
        .expect("series");
        times.push(start.elapsed().as_secs_f64());
        println!(
            "3 × 1 MP series: {:.3} s, f_σ {:.4} N/mm (drawn {FRINGE_VALUE}), linearity rms {:.4} \
             fringe, not linear {:.2} %",
            times[times.len() - 1],
            series.fringe_value.unwrap_or(f64::NAN),
            series.linearity_rms,
            100.0 * series.nonlinear_share
        );
    }
    times.sort_by(f64::total_cmp);
    println!(
        "best {:.3} s, median {:.3} s of {RUNS} runs on {} rayon threads",
        times[0],
        times[RUNS / 2],
        rayon::current_num_threads()
    );
}
