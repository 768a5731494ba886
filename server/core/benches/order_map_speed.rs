//! Speed and memory of a 12-megapixel JPEG → order map (decode included), the figures the
//! README quotes. Run with `cargo bench -p isotint-core --bench order_map_speed`.
//!
//! The first stage renders the photos (a 4000 × 3000 disc photographed as JPEG quality 90,
//! and a calibration beam) into `target/bench-data/`; the measurement then runs in a child
//! process limited to two rayon threads, so that its peak resident memory (VmHWM) counts
//! nothing but reading the JPEG and mapping it.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use isotint_core::beam::{calibrate_beam, BeamSpec, EdgeLoad};
use isotint_core::render::{
    develop, render_scene, BendingBeamField, CameraModel, DiscField, LightSource, PhotoEffects,
    PhotoEncoding, QuarterWavePlates, RenderSetup, Renderer,
};
use isotint_core::stress::DiscInCompression;
use isotint_core::{
    map_orders, CalibrationMetadata, CalibrationTable, DecodeLimits, MapOptions, Photo, PixelPoint,
    PixelRect,
};

const WIDTH: u32 = 4000;
const HEIGHT: u32 = 3000;
const RUNS: usize = 3;

fn main() {
    let args: Vec<String> = std::env::args().collect();
    if let Some(i) = args.iter().position(|a| a == "--measure") {
        measure(Path::new(&args[i + 1]), Path::new(&args[i + 2]));
        return;
    }
    let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../target/bench-data");
    std::fs::create_dir_all(&dir).expect("bench-data folder");
    let (photo, calibration) = (
        dir.join("disc-12mp.jpg"),
        dir.join("bench-calibration.json"),
    );
    if !photo.exists() || !calibration.exists() {
        prepare(&photo, &calibration);
    }
    let status = Command::new(std::env::current_exe().expect("own path"))
        .args([
            "--measure",
            photo.to_str().unwrap(),
            calibration.to_str().unwrap(),
        ])
        .env("RAYON_NUM_THREADS", "2")
        .status()
        .expect("child run");
    assert!(status.success());
}

fn prepare(photo: &Path, calibration: &Path) {
    let setup = RenderSetup {
        light: LightSource::Halogen,
        camera: CameraModel::Sensor,
        plates: QuarterWavePlates::Ideal,
        exposure: 0.9,
    };
    let renderer = Renderer::new(setup).unwrap();
    let fx = PhotoEffects {
        blur_sigma_px: 0.8,
        noise_sigma_codes: 1.0,
        seed: 3,
        ..PhotoEffects::default()
    };
    let beam = BendingBeamField::new(
        PixelRect::new(20.0, 80.0, 980.0, 320.0).unwrap(),
        (50.0, 950.0),
        (280.0, 720.0),
        4.5,
    )
    .unwrap();
    let beam_scene = render_scene(&beam, &renderer, 1000, 400, 3).unwrap();
    let beam_photo = Photo::decode(
        &develop(&beam_scene.image, &fx, PhotoEncoding::Png8).unwrap(),
        &DecodeLimits::default(),
    )
    .unwrap();
    let zone = beam.constant_moment_zone();
    let table: CalibrationTable = calibrate_beam(
        &beam_photo,
        &BeamSpec {
            region: PixelRect::new(zone.left + 20.0, zone.top, zone.right - 20.0, zone.bottom)
                .unwrap(),
            load: EdgeLoad::EdgeOrder(4.5),
            refine_edges: false,
            order_step: 0.01,
            metadata: CalibrationMetadata {
                name: "bench beam".into(),
                ..Default::default()
            },
        },
    )
    .unwrap()
    .table;
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
}

fn measure(photo: &Path, calibration: &Path) {
    let bytes = std::fs::read(photo).unwrap();
    let table = CalibrationTable::from_json(&std::fs::read(calibration).unwrap()).unwrap();
    let mut times = Vec::new();
    let mut valued = 0;
    for _ in 0..RUNS {
        let start = Instant::now();
        let decoded = Photo::decode(&bytes, &DecodeLimits::default()).unwrap();
        let map = map_orders(&decoded, &table, None, &MapOptions::default()).unwrap();
        times.push(start.elapsed().as_secs_f64());
        valued = map.statistics.valued_pixels;
    }
    times.sort_by(f64::total_cmp);
    let pixels = f64::from(WIDTH) * f64::from(HEIGHT);
    let peak_kib: f64 = std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("VmHWM:"))
                .map(|l| l.split_whitespace().nth(1).unwrap().parse().unwrap())
        })
        .unwrap_or(f64::NAN);
    println!(
        "order map of a {WIDTH}×{HEIGHT} JPEG ({:.1} MB), {} rayon threads: best {:.2} s, median {:.2} s over {RUNS} runs; peak RSS {:.0} MiB = {:.1} bytes/pixel; {valued} pixels valued",
        bytes.len() as f64 / 1e6,
        rayon::current_num_threads(),
        times[0],
        times[RUNS / 2],
        peak_kib / 1024.0,
        peak_kib * 1024.0 / pixels,
    );
}
