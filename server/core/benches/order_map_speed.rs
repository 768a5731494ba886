//! Speed and memory of a 12-megapixel JPEG → order map (decode included), the figures the
//! README quotes. Run with `cargo bench -p isotint-core --bench order_map_speed`.
//!
//! The first stage renders the photos (a 4000 × 3000 disc photographed as JPEG quality 90,
//! the disc's mask as a PNG, and a calibration beam) into `target/bench-data/`; each
//! measurement then runs in a child process limited to two rayon threads, so that its peak
//! resident memory (VmHWM) counts nothing but reading the inputs and mapping them. Two lines
//! are printed: the photo mapped whole (no mask), then with the mask of the disc, decoded
//! from its PNG inside the timed run, as a user would give it.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use isotint_core::export::{npy_f32, read_npy_f32};
use isotint_core::render::{
    develop, effects::encode_mask_png, photographed_beam_table, render_scene, CameraModel,
    DiscField, LightSource, PhotoEffects, PhotoEncoding, QuarterWavePlates, RenderSetup, Renderer,
};
use isotint_core::stress::DiscInCompression;
use isotint_core::{
    map_orders, CalibrationMetadata, CalibrationTable, DecodeLimits, MapOptions, Mask, Photo,
    PixelPoint,
};

const WIDTH: u32 = 4000;
const HEIGHT: u32 = 3000;
const RUNS: usize = 3;

fn main() {
    let args: Vec<String> = std::env::args().collect();
    if let Some(i) = args.iter().position(|a| a == "--measure") {
        let mask = args.get(i + 4).map(Path::new);
        measure(
            Path::new(&args[i + 1]),
            Path::new(&args[i + 2]),
            Path::new(&args[i + 3]),
            mask,
        );
        return;
    }
    let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../target/bench-data");
    std::fs::create_dir_all(&dir).expect("bench-data folder");
    let (photo, calibration, truth, mask) = (
        dir.join("disc-12mp.jpg"),
        dir.join("bench-calibration.json"),
        dir.join("disc-12mp-true-order.npy"),
        dir.join("disc-12mp-mask.png"),
    );
    if [&photo, &calibration, &truth, &mask]
        .iter()
        .any(|f| !f.exists())
    {
        prepare(&photo, &calibration, &truth, &mask);
    }
    let inputs = [&photo, &calibration, &truth].map(|f| f.to_str().unwrap());
    for masked in [None, Some(mask.to_str().unwrap())] {
        let status = Command::new(std::env::current_exe().expect("own path"))
            .arg("--measure")
            .args(inputs)
            .args(masked)
            .env("RAYON_NUM_THREADS", "2")
            .status()
            .expect("child run");
        assert!(status.success());
    }
}

fn prepare(photo: &Path, calibration: &Path, truth: &Path, mask: &Path) {
    let setup = RenderSetup {
        light: LightSource::Halogen,
        camera: CameraModel::Sensor,
        plates: QuarterWavePlates::Ideal,
        dispersion: 0.0,
        exposure: 0.9,
    };
    let renderer = Renderer::new(setup).unwrap();
    let fx = PhotoEffects {
        blur_sigma_px: 0.8,
        noise_sigma_codes: 1.0,
        seed: 3,
        ..PhotoEffects::default()
    };
    let table = photographed_beam_table(
        &renderer,
        &fx,
        PhotoEncoding::Png8,
        CalibrationMetadata {
            name: "bench beam".into(),
            ..Default::default()
        },
    )
    .unwrap();
    std::fs::write(calibration, table.to_json()).unwrap();
    let disc = DiscField::new(
        PixelPoint {
            x: f64::from(WIDTH) / 2.0,
            y: f64::from(HEIGHT) / 2.0,
        },
        1400.0,
        DiscInCompression::new(50.0, 6.0, 2600.0).unwrap(),
        11.0,
    )
    .unwrap();
    let scene = render_scene(&disc, &renderer, WIDTH, HEIGHT, 2).unwrap();
    std::fs::write(
        photo,
        develop(&scene.image, &fx, PhotoEncoding::Jpeg { quality: 90 }).unwrap(),
    )
    .unwrap();
    std::fs::write(
        truth,
        npy_f32(&scene.true_order, HEIGHT as usize, WIDTH as usize),
    )
    .unwrap();
    std::fs::write(mask, encode_mask_png(&scene.mask).unwrap()).unwrap();
}

/// Times `RUNS` maps of `photo` (with the mask PNG at `mask`, if given, decoded in each run)
/// and prints one line of figures.
fn measure(photo: &Path, calibration: &Path, truth: &Path, mask: Option<&Path>) {
    let bytes = std::fs::read(photo).unwrap();
    let mask_bytes = mask.map(|m| std::fs::read(m).unwrap());
    let table = CalibrationTable::from_json(&std::fs::read(calibration).unwrap()).unwrap();
    let mut times = Vec::new();
    let mut last = None;
    for _ in 0..RUNS {
        drop(last.take());
        let start = Instant::now();
        let decoded = Photo::decode(&bytes, &DecodeLimits::default()).unwrap();
        let mask = mask_bytes
            .as_ref()
            .map(|m| Mask::decode(m, &DecodeLimits::default()).unwrap());
        let map = map_orders(&decoded, &table, mask.as_ref(), &MapOptions::default()).unwrap();
        times.push(start.elapsed().as_secs_f64());
        last = Some(map);
    }
    let peak_kib: f64 = std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("VmHWM:"))
                .map(|l| l.split_whitespace().nth(1).unwrap().parse().unwrap())
        })
        .unwrap_or(f64::NAN);
    // Accuracy of the last run inside the disc, where the true order is ≤ 4 (without a mask
    // the black background is mapped too, and left out of the score here).
    let map = last.expect("at least one run");
    let (_, _, true_order) = read_npy_f32(&std::fs::read(truth).unwrap()).unwrap();
    // Scored ≥ 3 px inside the disc, as in the accuracy suite.
    let inside = Mask::new(
        WIDTH,
        HEIGHT,
        true_order.iter().map(|t| t.is_finite()).collect(),
    )
    .unwrap()
    .eroded(3);
    let (mut scored, mut valued, mut error, mut gross) = (0usize, 0usize, 0f64, 0usize);
    // Past the table (by more than half a fringe) a value is an under-read: count them.
    let past_limit = table.max_order() as f32 + 0.5;
    let (mut past, mut past_valued) = (0usize, 0usize);
    for ((o, t), scored_here) in map.order.iter().zip(&true_order).zip(inside.as_slice()) {
        if *scored_here && *t > past_limit {
            past += 1;
            past_valued += usize::from(o.is_finite());
        }
        if *scored_here && *t <= 4.0 {
            scored += 1;
            if o.is_finite() {
                valued += 1;
                let e = f64::from((o - t).abs());
                error += e;
                gross += usize::from(e > 0.5);
            }
        }
    }
    times.sort_by(f64::total_cmp);
    let pixels = f64::from(WIDTH) * f64::from(HEIGHT);

    println!(
        "order map of a {WIDTH}×{HEIGHT} JPEG ({:.1} MB), {}, {} rayon threads: best {:.2} s, median {:.2} s over {RUNS} runs; peak RSS {:.0} MiB = {:.1} bytes/pixel; where N ≤ 4: MAE {:.4}, off > 0.5 {:.3} %, coverage {:.2} %; more than 0.5 past the table: {:.2} % of {past} px valued",
        bytes.len() as f64 / 1e6,
        if mask.is_some() {
            "with the disc's mask"
        } else {
            "no mask"
        },
        rayon::current_num_threads(),
        times[0],
        times[RUNS / 2],
        peak_kib / 1024.0,
        peak_kib * 1024.0 / pixels,
        error / valued.max(1) as f64,
        100.0 * gross as f64 / scored.max(1) as f64,
        100.0 * valued as f64 / scored.max(1) as f64,
        100.0 * past_valued as f64 / past.max(1) as f64,
    );
}
