//! The command line as a lab uses it: `demo`, then `calibrate` and `map` on its files.

mod common;

use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::OnceLock;

use clap::Parser;
use isotint::cli::{self, Cli, LogFormat};
use isotint_core::export::read_npy_f32;
use isotint_core::render::{CameraModel, LightSource};
use isotint_core::{DecodeLimits, Mask};
use serde_json::Value;

fn isotint(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_isotint"))
        .args(args)
        .output()
        .expect("the isotint binary runs")
}

fn ok(output: Output) -> String {
    let text = String::from_utf8_lossy(&output.stdout).into_owned();
    assert!(
        output.status.success(),
        "failed: {}\n{text}",
        String::from_utf8_lossy(&output.stderr)
    );
    text
}

/// The stderr of a command that must fail; `what` (a format string's result) says which.
fn refused(output: &Output, what: impl std::fmt::Display) -> String {
    assert!(!output.status.success(), "{what}");
    String::from_utf8_lossy(&output.stderr).into_owned()
}

/// The demo directory, written once per test run.
fn demo() -> &'static Path {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let dir = tempfile::tempdir().unwrap().keep();
        let out = ok(isotint(&["demo", "--out", dir.to_str().unwrap()]));
        assert!(out.contains("calibration.json"), "{out}");
        dir
    })
}

fn scenario() -> Value {
    serde_json::from_slice(&std::fs::read(demo().join("scenario.json")).unwrap()).unwrap()
}

/// `isotint calibrate` on the demo beam photo, its constant-moment zone 5 % in from the inner
/// loads (as `isotint demo` calibrates), writing `out_file`, with `extra` arguments; what it
/// prints.
fn calibrate_demo_beam(out_file: &str, extra: &[&str]) -> String {
    let s = scenario();
    let zone = &s["beam"]["constant_moment_zone"];
    let inset = 0.05 * (zone["right"].as_f64().unwrap() - zone["left"].as_f64().unwrap());
    let region = format!(
        "{},{},{},{}",
        zone["left"].as_f64().unwrap() + inset,
        zone["top"],
        zone["right"].as_f64().unwrap() - inset,
        zone["bottom"]
    );
    let photo = path("beam.png");
    let mut args = vec![
        "calibrate",
        "--photo",
        &photo,
        "--region",
        &region,
        "--out",
        out_file,
    ];
    args.extend_from_slice(extra);
    ok(isotint(&args))
}

/// The number after a two-word label in the report `isotint calibrate` prints, and its line.
fn reported<'a>(printed: &'a str, label: &str) -> (f64, &'a str) {
    let line = printed
        .lines()
        .find(|l| l.contains(label))
        .unwrap_or_else(|| panic!("no {label} in {printed}"));
    let number = line.split_whitespace().nth(2).unwrap().parse().unwrap();
    (number, line)
}

fn path(name: &str) -> String {
    demo().join(name).to_str().unwrap().to_string()
}

#[test]
fn the_demo_names_its_light_and_camera_in_words_in_every_file_it_writes() {
    let calibration: Value =
        serde_json::from_slice(&std::fs::read(demo().join("calibration.json")).unwrap()).unwrap();
    let words = [
        (&calibration["metadata"]["camera"], "calibration camera"),
        (
            &calibration["metadata"]["light_source"],
            "calibration light",
        ),
        (&scenario()["setup"]["camera"], "scenario camera"),
        (&scenario()["setup"]["light"], "scenario light"),
    ];
    for (value, what) in words {
        let text = value.as_str().unwrap_or_else(|| panic!("{what}: {value}"));
        // Words, not a code: at least two of them and no hyphenated short name.
        assert!(
            text.split_whitespace().count() >= 2 && !text.contains("gaussian-"),
            "{what}: {text}"
        );
    }
    // They still read as the renderer's choices the demo drew with (render/demo.rs).
    let camera = calibration["metadata"]["camera"].as_str().unwrap();
    assert_eq!(CameraModel::from_name(camera).unwrap(), CameraModel::Sensor);
    let light = scenario()["setup"]["light"].as_str().unwrap().to_string();
    assert_eq!(
        LightSource::from_name(&light).unwrap(),
        LightSource::Halogen
    );
}

#[test]
fn the_demo_calibration_maps_the_disc_close_to_the_closed_form_orders() {
    let out_file = path("disc-orders.npy");
    let printed = ok(isotint(&[
        "map",
        "--calibration",
        &path("calibration.json"),
        "--photo",
        &path("disc.png"),
        "--mask",
        &path("disc-mask.png"),
        "--out",
        &out_file,
    ]));
    assert!(printed.contains("valued pixels"), "{printed}");
    let residual = printed
        .lines()
        .find(|l| l.contains("mean residual"))
        .unwrap();
    assert!(residual.ends_with(" ΔE00 (CIEDE2000)"), "{residual}");
    assert!(
        printed.contains("  mask                given, "),
        "the mask used is not named: {printed}"
    );
    // The demo disc's centre is loaded past the table (orders 5–7 against 4.4).
    assert!(
        printed.contains("caution") && printed.contains("beyond this calibration's last order"),
        "{printed}"
    );
    let (rows, cols, orders) = read_npy_f32(&std::fs::read(&out_file).unwrap()).unwrap();
    let (_, _, truth) = read_npy_f32(&std::fs::read(path("disc-true-order.npy")).unwrap()).unwrap();
    assert_eq!(orders.len(), rows * cols);
    let mask = Mask::decode(
        &std::fs::read(path("disc-mask.png")).unwrap(),
        &DecodeLimits::default(),
    )
    .unwrap()
    .eroded(3);
    let (mut scored, mut valued, mut sum) = (0usize, 0usize, 0.0f64);
    for (i, t) in truth.iter().enumerate() {
        if mask.as_slice()[i] && t.is_finite() && *t <= 4.0 {
            scored += 1;
            if orders[i].is_finite() {
                valued += 1;
                sum += f64::from((orders[i] - t).abs());
            }
        }
    }
    let mae = sum / valued.max(1) as f64;
    let coverage = valued as f64 / scored as f64;
    println!(
        "demo disc via CLI: MAE {mae:.4}, coverage {:.2} %",
        100.0 * coverage
    );
    assert!(mae <= 0.03, "MAE {mae}");
    assert!(coverage >= 0.95, "coverage {coverage}");
}

#[test]
fn calibrate_reports_the_fringe_value_implied_by_edge_order_moment_and_depth() {
    let s = scenario();
    let edge_order = s["beam"]["field"]["edge_order"].as_f64().unwrap();
    let out_file = path("beam-calibration.json");
    let printed = calibrate_demo_beam(
        &out_file,
        &[
            "--edge-order",
            &edge_order.to_string(),
            "--moment-n-mm",
            &s["beam"]["moment_n_mm"].to_string(),
            "--depth-mm",
            &s["beam"]["depth_mm"].to_string(),
            "--name",
            "CLI beam",
            "--refine-edges",
        ],
    );
    let expected = s["fringe_value_n_per_mm"].as_f64().unwrap();
    let (reported, line) = reported(&printed, "fringe value");
    assert!((reported - expected).abs() < 1e-6 * expected, "{line}");
    assert!(printed.contains("edge shift"), "{printed}");
    let residual = printed.lines().find(|l| l.contains("residual")).unwrap();
    assert!(residual.ends_with(" ΔE00 (CIEDE2000)"), "{residual}");
    let table: Value = serde_json::from_slice(&std::fs::read(&out_file).unwrap()).unwrap();
    assert_eq!(table["metadata"]["name"], "CLI beam");
    assert_eq!(table["source"]["kind"], "beam_photo");
}

#[test]
fn calibrate_estimates_the_edge_order_from_the_demo_beam_and_says_to_confirm_it() {
    let out_file = path("estimated-calibration.json");
    let printed = calibrate_demo_beam(&out_file, &["--estimate-edge-order", "--refine-edges"]);
    let truth = scenario()["beam"]["field"]["edge_order"].as_f64().unwrap();
    let (estimated, line) = reported(&printed, "edge-order estimate");
    println!("demo beam: estimated {estimated:.3}, rendered with {truth}");
    // source: closed-form pure bending (the demo beam's rendered field); tolerance measured in
    // server/core/tests/edge_estimate.rs (light among the references: 1 %).
    assert!((estimated - truth).abs() <= 0.01 * truth, "{line}");
    assert!(printed.contains("runner-up"), "{printed}");
    assert!(
        printed.contains("confirm it against a known load"),
        "{printed}"
    );
    let table: Value = serde_json::from_slice(&std::fs::read(&out_file).unwrap()).unwrap();
    let notes = table["metadata"]["notes"].as_str().unwrap();
    assert!(
        notes.contains("estimated from the beam's colour sequence"),
        "{notes}"
    );
}

/// `isotint map` of the demo plate with a hole (its mask and a hint), the photo read from
/// `photo`, the orders written to `out`, with `extra` arguments.
fn map_plate(photo: &str, out: &str, extra: &[&str]) -> Output {
    map_plate_with(&path("calibration.json"), photo, out, extra)
}

/// A calibration of the demo beam from its edge order alone: it carries no fringe value, so
/// stress commands need theirs (the demo's own calibration knows f_σ and h).
fn calibration_without_stress_inputs() -> String {
    static FILE: OnceLock<String> = OnceLock::new();
    FILE.get_or_init(|| {
        let file = path("calibration-edge-order-only.json");
        let edge = scenario()["beam"]["field"]["edge_order"].to_string();
        calibrate_demo_beam(&file, &["--edge-order", &edge]);
        file
    })
    .clone()
}

/// `isotint map` of the plate photo `photo` with `calibration`, a hint and `extra` arguments.
fn map_plate_with(calibration: &str, photo: &str, out: &str, extra: &[&str]) -> Output {
    let mask = path("plate-hole-mask.png");
    let mut args = vec![
        "map",
        "--calibration",
        calibration,
        "--photo",
        photo,
        "--mask",
        &mask,
        "--hint",
        "400.5,100.5,1.0",
        "--out",
        out,
    ];
    args.extend_from_slice(extra);
    isotint(&args)
}

#[test]
fn every_output_format_is_chosen_by_extension() {
    for (name, magic) in [
        ("plate.npy", &b"\x93NUMPY"[..]),
        ("plate.png", &b"\x89PNG"[..]),
        ("plate.preview.png", &b"\x89PNG"[..]),
        ("plate.csv", &b"x,y,order"[..]),
    ] {
        let out_file = path(name);
        ok(map_plate(
            &path("plate-hole.png"),
            &out_file,
            &["--no-exposure-compensation"],
        ));
        let bytes = std::fs::read(&out_file).unwrap();
        assert!(bytes.starts_with(magic), "{name}");
    }
}

#[test]
fn map_writes_the_order_uncertainty_as_npy_with_nan_wherever_the_order_is_nan() {
    let (out_file, uncertainty_file) = (path("plate-orders.npy"), path("plate-uncertainty.npy"));
    let printed = ok(map_plate(
        &path("plate-hole.png"),
        &out_file,
        &["--uncertainty-out", &uncertainty_file],
    ));
    assert!(printed.contains(&uncertainty_file), "{printed}");
    let (rows, cols, orders) = read_npy_f32(&std::fs::read(&out_file).unwrap()).unwrap();
    let (u_rows, u_cols, uncertainty) =
        read_npy_f32(&std::fs::read(&uncertainty_file).unwrap()).unwrap();
    assert_eq!(
        (u_rows, u_cols),
        (rows, cols),
        "the uncertainty has the map's shape"
    );
    assert!(
        orders.iter().any(|o| o.is_nan()),
        "the plate has pixels without a value"
    );
    common::assert_no_uncertainty_without_an_order(&orders, &uncertainty);
}

#[test]
fn map_refuses_to_write_an_output_over_its_photo_and_names_the_flag() {
    let dir = tempfile::tempdir().unwrap();
    let photo = dir.path().join("plate.png");
    std::fs::copy(path("plate-hole.png"), &photo).unwrap();
    let photo = photo.to_str().unwrap();
    let elsewhere = dir.path().join("orders.npy");
    let elsewhere = elsewhere.to_str().unwrap();
    let cases = [
        (
            "--uncertainty-out",
            map_plate(photo, elsewhere, &["--uncertainty-out", photo]),
        ),
        ("--out", map_plate(photo, photo, &[])),
    ];
    for (flag, output) in cases {
        let stderr = refused(&output, format_args!("{flag} over the photo succeeded"));
        assert!(
            stderr.contains(flag) && stderr.contains("--photo"),
            "{flag}: {stderr}"
        );
    }
    assert_eq!(
        std::fs::read(photo).unwrap(),
        std::fs::read(path("plate-hole.png")).unwrap(),
        "the photo is untouched"
    );
    assert!(!Path::new(elsewhere).exists(), "nothing was written");

    let output = map_plate(photo, elsewhere, &["--uncertainty-out", "sigma.png"]);
    let stderr = refused(&output, "the command succeeded");
    assert!(
        stderr.contains("--uncertainty-out") && stderr.contains(".npy"),
        "{stderr}"
    );
}

#[test]
fn calibrate_refuses_to_write_its_table_over_its_photo_and_names_both_flags() {
    let dir = tempfile::tempdir().unwrap();
    let photo = dir.path().join("beam.png");
    std::fs::copy(path("beam.png"), &photo).unwrap();
    let photo = photo.to_str().unwrap();
    let output = isotint(&[
        "calibrate",
        "--photo",
        photo,
        "--region",
        "302,80,698,320",
        "--edge-order",
        "4.5",
        "--out",
        photo,
    ]);
    let stderr = refused(&output, "--out over the photo succeeded");
    assert!(
        stderr.contains("--out") && stderr.contains("--photo"),
        "{stderr}"
    );
    assert_eq!(
        std::fs::read(photo).unwrap(),
        std::fs::read(path("beam.png")).unwrap(),
        "the photo is untouched"
    );
}

/// `isotint calibrate` with a region inside any photo and `load` flags, writing to a fresh
/// directory: what it says on stderr when it fails.
fn calibrate_error(photo: &str, region: &str, load: &[&str]) -> String {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("c.json");
    let mut args = vec![
        "calibrate",
        "--photo",
        photo,
        "--region",
        region,
        "--out",
        out.to_str().unwrap(),
    ];
    args.extend_from_slice(load);
    let output = isotint(&args);
    assert!(!output.status.success(), "{args:?} succeeded");
    String::from_utf8_lossy(&output.stderr).into_owned()
}

#[test]
fn calibrate_errors_name_the_flags_the_user_typed_never_the_api_fields() {
    let cases: [(&[&str], &str, &[&str]); 5] = [
        (&["--edge-order", "-2"], "invalid --edge-order", &[]),
        (
            &["--edge-order", "2", "--estimate-edge-order"],
            "invalid --estimate-edge-order",
            &["--edge-order"],
        ),
        (
            &["--depth-mm", "24"],
            "invalid --edge-order",
            &["--moment-n-mm", "--depth-mm", "--fringe-value-n-per-mm"],
        ),
        (
            &[
                "--moment-n-mm",
                "-4536",
                "--depth-mm",
                "24",
                "--fringe-value-n-per-mm",
                "10.5",
            ],
            "invalid --moment-n-mm",
            &[],
        ),
        (
            &["--edge-order", "2", "--thickness-mm", "0"],
            "invalid --thickness-mm",
            &[],
        ),
    ];
    for (load, named, also) in cases {
        let stderr = calibrate_error("p.png", "0,0,9,9", load);
        assert!(stderr.contains(named), "{load:?}: {stderr}");
        for flag in also {
            assert!(
                stderr.contains(flag),
                "{load:?} should name {flag}: {stderr}"
            );
        }
        assert!(
            !stderr.contains('_'),
            "{load:?} names an API field: {stderr}"
        );
    }
    // A photo that decodes, with the region outside it: the core's message names the flag.
    let stderr = calibrate_error(&path("beam.png"), "0,0,2000,400", &["--edge-order", "4.5"]);
    assert!(
        stderr.contains("invalid --region: 0,0,2000,400 lies outside the 1000×400 photo"),
        "{stderr}"
    );
}

#[test]
fn bad_command_line_input_fails_with_a_message_naming_it() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("c.json");
    let out = out.to_str().unwrap();
    let cases: [(&[&str], &str); 6] = [
        (
            &[
                "calibrate",
                "--photo",
                "p.png",
                "--region",
                "5,5,1,9",
                "--edge-order",
                "2",
                "--out",
                out,
            ],
            "--region",
        ),
        (
            &[
                "calibrate",
                "--photo",
                "p.png",
                "--region",
                "0,0,9,9",
                "--edge-order",
                "-2",
                "--out",
                out,
            ],
            "--edge-order",
        ),
        (
            &[
                "calibrate",
                "--photo",
                "p.png",
                "--region",
                "0,0,9,9",
                "--edge-order",
                "2",
                "--estimate-edge-order",
                "--out",
                out,
            ],
            "--estimate-edge-order",
        ),
        (
            &[
                "calibrate",
                "--photo",
                "/nonexistent/p.png",
                "--region",
                "0,0,9,9",
                "--edge-order",
                "2",
                "--out",
                out,
            ],
            "/nonexistent/p.png",
        ),
        (
            &[
                "map",
                "--calibration",
                "c.json",
                "--photo",
                "p.png",
                "--out",
                "orders.jpg",
            ],
            "invalid --out",
        ),
        (
            &[
                "map",
                "--calibration",
                "c.json",
                "--photo",
                "p.png",
                "--hint",
                "1,2",
                "--out",
                "o.npy",
            ],
            "X,Y,N",
        ),
    ];
    for (args, needle) in cases {
        let output = isotint(args);
        let stderr = refused(&output, format_args!("{args:?} succeeded"));
        assert!(stderr.contains(needle), "{args:?}: {stderr}");
    }
}

/// The share (0–1) in the `mask` line `isotint map` prints, and that line.
fn mask_line(printed: &str) -> (f64, &str) {
    let line = printed
        .lines()
        .find(|l| l.trim_start().starts_with("mask "))
        .unwrap_or_else(|| panic!("no mask line in {printed}"));
    let percent: f64 = line
        .split(", ")
        .nth(1)
        .and_then(|p| p.split(' ').next())
        .and_then(|p| p.parse().ok())
        .unwrap_or_else(|| panic!("no share in {line}"));
    (percent / 100.0, line)
}

#[test]
fn map_without_a_mask_finds_the_specimen_from_the_photo_and_says_which_mask_it_used() {
    let map = |extra: &[&str]| {
        let (calibration, photo, out) = (
            path("calibration.json"),
            path("plate-hole.png"),
            path("found-plate.npy"),
        );
        let mut args = vec![
            "map",
            "--calibration",
            &calibration,
            "--photo",
            &photo,
            "--out",
            &out,
        ];
        args.extend_from_slice(extra);
        ok(isotint(&args))
    };
    // source: the demo's own mask of the plate (its hole left out), written by `isotint demo`.
    let truth = Mask::decode(
        &std::fs::read(path("plate-hole-mask.png")).unwrap(),
        &DecodeLimits::default(),
    )
    .unwrap();
    let true_share =
        truth.as_slice().iter().filter(|v| **v).count() as f64 / truth.as_slice().len() as f64;
    let printed = map(&[]);
    let (share, line) = mask_line(&printed);
    assert!(line.contains("found from the photo"), "{line}");
    assert!(
        (share - true_share).abs() <= 0.01,
        "found {share}, the plate is {true_share} of the photo"
    );
    assert!(printed.contains("--whole-photo"), "{printed}");
    // The hole's centre is left out of the map: no value there.
    let (_, cols, orders) = read_npy_f32(&std::fs::read(path("found-plate.npy")).unwrap()).unwrap();
    let hole = &scenario()["plate"]["field"]["centre"];
    let (x, y) = (
        hole["x"].as_f64().unwrap() as usize,
        hole["y"].as_f64().unwrap() as usize,
    );
    assert!(
        orders[y * cols + x].is_nan(),
        "the hole's centre has a value"
    );

    let printed = map(&["--whole-photo"]);
    let (whole, line) = mask_line(&printed);
    assert_eq!(whole, 1.0, "{line}");
    assert!(line.contains("whole photo"), "{line}");

    let both = isotint(&[
        "map",
        "--calibration",
        &path("calibration.json"),
        "--photo",
        &path("plate-hole.png"),
        "--mask",
        &path("plate-hole-mask.png"),
        "--whole-photo",
        "--out",
        &path("never-both.npy"),
    ]);
    let stderr = refused(&both, "the command succeeded");
    assert!(
        stderr.contains("--mask") && stderr.contains("--whole-photo"),
        "{stderr}"
    );
}

#[test]
fn a_photo_that_cannot_be_decoded_is_refused_naming_the_photo_flag_in_every_command() {
    let dir = tempfile::tempdir().unwrap();
    // A PNG signature followed by nothing a decoder can read, and a JPEG cut after its header.
    let broken_png = dir.path().join("broken.png");
    let mut png = b"\x89PNG\r\n\x1a\n".to_vec();
    png.extend_from_slice(&[7; 64]);
    std::fs::write(&broken_png, png).unwrap();
    let cut_jpeg = dir.path().join("cut.jpg");
    let mut jpeg = vec![0xFF, 0xD8, 0xFF, 0xE0, 0x00, 0x10];
    jpeg.extend_from_slice(b"JFIF\0\x01\x01\0\0\x01\0\x01\0\0");
    std::fs::write(&cut_jpeg, jpeg).unwrap();
    let (calibration, mask) = (path("calibration.json"), path("disc-mask.png"));
    let out = dir.path().join("o.npy");
    let out = out.to_str().unwrap();
    for photo in [&broken_png, &cut_jpeg] {
        let photo = photo.to_str().unwrap();
        let commands: [Vec<&str>; 4] = [
            vec![
                "map",
                "--calibration",
                &calibration,
                "--photo",
                photo,
                "--out",
                out,
            ],
            vec![
                "boundary",
                "--calibration",
                &calibration,
                "--photo",
                photo,
                "--mask",
                &mask,
                "--fringe-value-n-per-mm",
                "10.5",
                "--thickness-mm",
                "6",
            ],
            vec![
                "calibrate",
                "--photo",
                photo,
                "--region",
                "0,0,9,9",
                "--edge-order",
                "2",
                "--out",
                out,
            ],
            vec![
                "series",
                "--calibration",
                &calibration,
                "--mask",
                &mask,
                "--photo",
                photo,
                "--load-n",
                "100",
                "--photo",
                photo,
                "--load-n",
                "200",
            ],
        ];
        for args in commands {
            let output = isotint(&args);
            let stderr = refused(&output, format_args!("{args:?} succeeded"));
            assert!(stderr.contains("--photo"), "{args:?}: {stderr}");
        }
    }
}

#[test]
fn map_errors_from_the_core_name_the_flag() {
    let output = map_plate(
        &path("plate-hole.png"),
        &path("never.npy"),
        &["--max-gradient", "2"],
    );
    let stderr = refused(&output, "the command succeeded");
    assert!(
        stderr.contains("invalid --max-gradient: must lie in (0, 1] fringe per pixel, got 2"),
        "{stderr}"
    );
}

#[test]
fn no_help_text_shows_an_empty_default_or_environment_value() {
    for command in [
        &[][..],
        &["serve"],
        &["calibrate"],
        &["map"],
        &["demo"],
        &["token", "create"],
    ] {
        let mut args = command.to_vec();
        args.push("--help");
        let help = ok(isotint(&args));
        assert!(
            !help.contains("[default: ]")
                && !help.contains("[default: \"\"]")
                && !help.contains("=]"),
            "{args:?}: {help}"
        );
    }
}

#[test]
fn calibrate_help_gives_each_quantity_its_unit_and_hides_the_old_spellings() {
    let help = ok(isotint(&["calibrate", "--help"]));
    for flag in [
        "--moment-n-mm",
        "--depth-mm",
        "--fringe-value-n-per-mm",
        "--thickness-mm",
    ] {
        assert!(help.contains(flag), "{flag}: {help}");
    }
    for old in ["--moment ", "--depth ", "--fringe-value "] {
        assert!(!help.contains(old), "{old}: {help}");
    }
}

#[test]
fn old_flag_spellings_still_parse_as_the_unit_suffixed_flags() {
    let parse = |load: [&str; 6]| {
        let mut args = vec![
            "isotint",
            "calibrate",
            "--photo",
            "b.png",
            "--region",
            "0,0,9,9",
            "--out",
            "c.json",
        ];
        args.extend(load);
        match Cli::try_parse_from(args).unwrap().command {
            cli::Command::Calibrate(a) => (
                a.beam.moment_n_mm,
                a.beam.depth_mm,
                a.beam.fringe_value_n_per_mm,
            ),
            other => panic!("{other:?}"),
        }
    };
    let expected = (Some(4536.0), Some(24.0), Some(10.5));
    let old = [
        "--moment",
        "4536",
        "--depth",
        "24",
        "--fringe-value",
        "10.5",
    ];
    let new = [
        "--moment-n-mm",
        "4536",
        "--depth-mm",
        "24",
        "--fringe-value-n-per-mm",
        "10.5",
    ];
    assert_eq!(parse(old), expected);
    assert_eq!(parse(new), expected);
}

#[test]
fn the_log_format_is_one_global_option_taken_before_or_after_the_command() {
    let before = ["isotint", "--log-format", "json", "demo", "--out", "d"];
    let after = ["isotint", "demo", "--out", "d", "--log-format", "json"];
    for args in [&before[..], &after[..]] {
        let cli = Cli::try_parse_from(args).unwrap();
        assert!(matches!(cli.log_format, LogFormat::Json), "{args:?}");
    }
    let top = ok(isotint(&["--help"]));
    assert!(top.contains("--log-format"), "{top}");
}

/// A running `isotint serve`, ended (by its process id) when dropped.
struct Served {
    child: std::process::Child,
    /// Its log, kept open so that it can go on logging.
    _stdout: std::io::BufReader<std::process::ChildStdout>,
    /// Where it listens.
    address: String,
    /// Its JSON log lines up to "listening".
    log: Vec<Value>,
}

impl Drop for Served {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

/// Starts `isotint serve` in `dir` (no calibration-sets folder there) on `database` with
/// `extra` arguments, on a free port, and waits until it listens.
fn serve_in(dir: &Path, database: &str, extra: &[&str]) -> Served {
    use std::io::BufRead;
    let mut child = Command::new(env!("CARGO_BIN_EXE_isotint"))
        .args(["serve", "--bind", "127.0.0.1:0", "--database", database])
        .args(extra)
        .env_remove("ISOTINT_AUTH")
        .args(["--log-format", "json"])
        .current_dir(dir)
        .env("RUST_LOG", "info")
        .env_remove("ISOTINT_CALIBRATION_SETS")
        .stdout(std::process::Stdio::piped())
        .spawn()
        .expect("isotint serve starts");
    let mut stdout = std::io::BufReader::new(child.stdout.take().unwrap());
    let mut log = Vec::new();
    let mut line = String::new();
    while stdout.read_line(&mut line).unwrap() > 0 {
        let entry: Value = serde_json::from_str(&line).unwrap();
        line.clear();
        if entry["fields"]["message"] == "listening" {
            let address = entry["fields"]["address"].as_str().unwrap().to_string();
            return Served {
                child,
                _stdout: stdout,
                address,
                log,
            };
        }
        log.push(entry);
    }
    let status = child.wait();
    panic!("isotint serve stopped before listening ({status:?}): {log:?}");
}

#[tokio::test]
async fn a_service_started_from_any_directory_offers_the_built_in_demo_calibration_once() {
    let dir = tempfile::tempdir().unwrap();
    let database = format!(
        "sqlite://{}?mode=rwc",
        dir.path().join("lab.sqlite").display()
    );
    let mut ids = Vec::new();
    for (start, imported) in [(1, 1), (2, 0)] {
        let served = serve_in(dir.path(), &database, &[]);
        let built_in = served
            .log
            .iter()
            .find(|l| {
                l["fields"]["message"] == "calibration sets imported"
                    && l["fields"]["from"] == "built into the binary"
            })
            .unwrap_or_else(|| panic!("start {start}: no import line in {:?}", served.log));
        assert_eq!(built_in["fields"]["imported"], imported, "start {start}");
        let url = format!("http://{}/api/v1/calibrations", served.address);
        let listed: Value = reqwest::get(&url).await.unwrap().json().await.unwrap();
        let listed = listed["calibrations"].as_array().unwrap();
        assert_eq!(listed.len(), 1, "start {start}: {listed:?}");
        assert_eq!(listed[0]["name"], "Demo beam, four-point bending");
        ids.push(listed[0]["id"].clone());
    }
    assert_eq!(ids[0], ids[1], "the second start keeps the first copy");
}

#[test]
fn out_of_range_numbers_are_refused_naming_their_flag() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("o.npy");
    let out = out.to_str().unwrap();
    let plate = path("plate-hole.png");
    let cases: [(&[&str], &str); 5] = [
        (&["--hint", "10.5,10.5,99"], "--hint"),
        (&["--max-gradient", "3"], "--max-gradient"),
        (&["--max-order", "-1"], "--max-order"),
        (&["--max-order", "2", "--hint", "10.5,10.5,2.5"], "--hint"),
        (&["--max-order", "0.01"], "--max-order"),
    ];
    for (extra, flag) in cases {
        let output = map_plate(&plate, out, extra);
        let stderr = refused(&output, format_args!("{extra:?} succeeded"));
        assert!(stderr.contains(flag), "{extra:?}: {stderr}");
        assert!(!Path::new(out).exists(), "{extra:?} wrote a map");
    }
    for (flag, value) in [
        ("--max-jobs", "0"),
        ("--max-connections", "0"),
        ("--header-timeout", "0s"),
        ("--request-timeout", "0s"),
        ("--max-image-pixels", "0"),
        ("--upload-limit-mib", "0"),
    ] {
        let output = isotint(&["serve", flag, value, "--database", "sqlite://unused"]);
        let stderr = refused(&output, format_args!("{flag} {value} started"));
        assert!(stderr.contains(flag), "{flag} {value}: {stderr}");
    }
}

#[test]
fn map_with_a_fringe_value_and_thickness_reports_stress_figures_and_writes_the_stress_map() {
    let (orders_file, stress_file) = (path("plate-for-stress.npy"), path("plate-stress.npy"));
    let printed = ok(map_plate(
        &path("plate-hole.png"),
        &orders_file,
        &[
            "--fringe-value-n-per-mm",
            "10.5",
            "--thickness-mm",
            "6",
            "--stress-out",
            &stress_file,
        ],
    ));
    // source: stress-optic law σ1 − σ2 = N·f_σ/h; 10.5/6 = 1.75 MPa per fringe (hand-worked).
    let (_, _, orders) = read_npy_f32(&std::fs::read(&orders_file).unwrap()).unwrap();
    let (_, _, stress) = read_npy_f32(&std::fs::read(&stress_file).unwrap()).unwrap();
    for (o, s) in orders.iter().zip(&stress) {
        assert!(o.is_nan() == s.is_nan() && (o.is_nan() || (o * 1.75 - s).abs() < 1e-5));
    }
    let line = printed
        .lines()
        .find(|l| l.trim_start().starts_with("σ1−σ2"))
        .unwrap_or_else(|| panic!("no stress line in {printed}"));
    assert!(line.contains("(1.7500 MPa per fringe)"), "{line}");
    assert!(
        printed.contains("f_sigma: 10.5 N/mm per fringe; model thickness h: 6 mm"),
        "{printed}"
    );
    assert!(
        printed.contains("do not replace, engineering judgement"),
        "{printed}"
    );
    // The hidden spellings of the issue parse as the same flags.
    let preview = path("plate-stress.preview.png");
    ok(map_plate(
        &path("plate-hole.png"),
        &orders_file,
        &[
            "--fringe-value",
            "10.5",
            "--thickness",
            "6",
            "--stress-out",
            &preview,
        ],
    ));
    assert!(std::fs::read(&preview).unwrap().starts_with(b"\x89PNG"));
}

#[test]
fn a_maximum_past_the_calibrations_range_is_printed_as_a_lower_bound() {
    let statistics = isotint_core::order_map::MapStatistics {
        specimen_pixels: 1000,
        valued_pixels: 900,
        beyond_range_share: 0.02,
        unreliable_share: 0.0,
        min_order: 0.0,
        max_order: 4.0,
        mean_order: 1.0,
        mean_residual: 1.0,
        table_max_order: 4.4,
        ambiguous_colour: false,
    };
    let law = isotint_core::stress::Specimen::Transmission(
        isotint_core::stress::StressOpticLaw::new(10.5, 6.0).unwrap(),
    );
    let text = cli::statistics_text(&statistics, Some(&law));
    assert!(text.contains("max at least 4.000 fringes"), "{text}");
    assert!(text.contains("max at least 7.000 MPa"), "{text}");
    let clean = cli::statistics_text(
        &isotint_core::order_map::MapStatistics {
            beyond_range_share: 0.0,
            ..statistics
        },
        Some(&law),
    );
    assert!(
        clean.contains("max 7.000 MPa") && !clean.contains("at least"),
        "{clean}"
    );
}

#[test]
fn stress_flags_are_refused_naming_the_flag_and_nothing_is_written() {
    let out = path("never-stress-orders.npy");
    for (extra, needle) in [
        (&["--stress-out", "s.npy"][..], "--fringe-value-n-per-mm"),
        (&["--thickness-mm", "6"][..], "--fringe-value-n-per-mm"),
        (
            &["--fringe-value-n-per-mm", "10.5", "--thickness-mm", "0"][..],
            "invalid --thickness-mm",
        ),
        (
            &[
                "--fringe-value-n-per-mm",
                "10.5",
                "--thickness-mm",
                "6",
                "--stress-out",
                "s.png",
            ][..],
            "--stress-out",
        ),
    ] {
        let output = map_plate_with(
            &calibration_without_stress_inputs(),
            &path("plate-hole.png"),
            &out,
            extra,
        );
        let stderr = refused(&output, format_args!("{extra:?} succeeded"));
        assert!(stderr.contains(needle), "{extra:?}: {stderr}");
    }
    assert!(!Path::new(&out).exists(), "nothing was written");
}

#[test]
fn map_of_a_coating_or_a_slice_reports_its_stress_and_strain_through_one_law() {
    let (orders_file, stress_file) = (path("coating-orders.npy"), path("coating-stress.npy"));
    let strain_file = path("coating-strain.npy");
    let printed = ok(map_plate(
        &path("plate-hole.png"),
        &orders_file,
        &[
            "--specimen",
            "coating",
            "--strain-fringe-value-um",
            "4",
            "--coating-thickness-mm",
            "2",
            "--youngs-modulus-mpa",
            "200000",
            "--poisson-ratio",
            "0.3",
            "--stress-out",
            &stress_file,
            "--strain-out",
            &strain_file,
        ],
    ));
    // source: ε1 − ε2 = N·f_ε/(2·t_c) for a coating in reflection (common practice, no
    // source) and σ1 − σ2 = E/(1 + ν)·(ε1 − ε2) (Hooke's law, plane stress, from memory).
    // Hand-worked: 4e-3 mm / 4 mm = 1000 µε per fringe; 200 000 / 1.3 · 1e-3 = 153.846 MPa.
    let per_fringe = 200_000.0 / 1.3 * 1e-3;
    let (_, _, orders) = read_npy_f32(&std::fs::read(&orders_file).unwrap()).unwrap();
    let (_, _, stress) = read_npy_f32(&std::fs::read(&stress_file).unwrap()).unwrap();
    let (_, _, strain) = read_npy_f32(&std::fs::read(&strain_file).unwrap()).unwrap();
    for ((o, s), e) in orders.iter().zip(&stress).zip(&strain) {
        assert!(o.is_nan() == s.is_nan() && o.is_nan() == e.is_nan());
        assert!(o.is_nan() || (f64::from(*o) * per_fringe - f64::from(*s)).abs() < 1e-3);
        assert!(o.is_nan() || (o * 1000.0 - e).abs() < 1e-2);
    }
    assert!(printed.contains("(153.8462 MPa per fringe)"), "{printed}");
    assert!(printed.contains("ε1−ε2"), "{printed}");
    assert!(printed.contains("µε"), "{printed}");
    // A slice: f_σ at the critical temperature 0.35 N/mm, slice 2.5 mm → 0.14 MPa per fringe.
    let slice = ok(map_plate(
        &path("plate-hole.png"),
        &orders_file,
        &[
            "--specimen",
            "slice",
            "--fringe-value-n-per-mm",
            "0.35",
            "--thickness-mm",
            "2.5",
        ],
    ));
    assert!(slice.contains("(0.1400 MPa per fringe)"), "{slice}");
    assert!(slice.contains("slice thickness h: 2.5 mm"), "{slice}");
    for (extra, needle) in [
        (&["--specimen", "mirror"][..], "--specimen"),
        (
            &[
                "--fringe-value",
                "10.5",
                "--thickness",
                "6",
                "--strain-out",
                "e.npy",
            ][..],
            "--strain-out e.npy needs --strain-fringe-value-um",
        ),
        (&["--specimen", "coating"][..], "--strain-fringe-value-um"),
        (
            &[
                "--strain-fringe-value-um",
                "4",
                "--coating-thickness-mm",
                "2",
                "--youngs-modulus-mpa",
                "200000",
                "--poisson-ratio",
                "0.7",
            ][..],
            "invalid --poisson-ratio",
        ),
    ] {
        let output = map_plate(&path("plate-hole.png"), &path("never-coating.npy"), extra);
        let stderr = refused(&output, format_args!("{extra:?} succeeded"));
        assert!(stderr.contains(needle), "{extra:?}: {stderr}");
    }
    assert!(!Path::new(&path("never-coating.npy")).exists());
}

/// `isotint COMMAND` with the demo calibration, the demo's `photo` and `mask` files, and `extra`
/// arguments.
fn on_demo(command: &str, photo: &str, mask: &str, extra: &[&str]) -> Output {
    on_demo_with(&path("calibration.json"), command, photo, mask, extra)
}

/// `isotint COMMAND` with `calibration` on a demo photo and mask, with `extra` arguments.
fn on_demo_with(
    calibration: &str,
    command: &str,
    photo: &str,
    mask: &str,
    extra: &[&str],
) -> Output {
    let (photo, mask) = (path(photo), path(mask));
    let mut args = vec![
        command,
        "--calibration",
        calibration,
        "--photo",
        &photo,
        "--mask",
        &mask,
    ];
    args.extend_from_slice(extra);
    isotint(&args)
}

/// `isotint boundary` on the demo plate with a hole, with `extra` arguments.
fn boundary_of_plate(extra: &[&str]) -> Output {
    on_demo("boundary", "plate-hole.png", "plate-hole-mask.png", extra)
}

#[test]
fn boundary_prints_one_json_object_with_the_peak_edge_stress_and_kt_of_the_demo_hole() {
    let s = scenario();
    let remote = s["plate"]["remote_order"].as_f64().unwrap() * 10.5 / 6.0;
    let edge_file = path("plate-edge.csv");
    let printed = ok(boundary_of_plate(&[
        "--fringe-value",
        "10.5",
        "--thickness",
        "6",
        "--nominal-stress",
        &remote.to_string(),
        "--out",
        &edge_file,
        "--json",
    ]));
    let v: Value = serde_json::from_str(printed.trim()).expect("one JSON object");
    for field in ["max_stress_mpa", "x", "y", "order", "kt", "beyond_range"] {
        assert!(!v[field].is_null(), "{field} missing: {v}");
    }
    let kt = v["kt"].as_f64().unwrap();
    println!("demo hole (70 px radius): K_t {kt:.3}, {v}");
    // source: Kirsch (1898), K_t = 3 beside the hole; the 70-px hole reads a little low (the
    // linear carry to the edge, about 2.5 %), so 5 % here.
    assert!((kt - 3.0).abs() <= 0.05 * 3.0, "{v}");
    let (x, y) = (v["x"].as_f64().unwrap(), v["y"].as_f64().unwrap());
    let centre = &s["plate"]["field"]["centre"];
    assert!(
        (y - centre["y"].as_f64().unwrap()).abs() < 15.0
            && ((x - centre["x"].as_f64().unwrap()).abs() - 70.0).abs() < 2.0,
        "{v}"
    );
    assert_eq!(v["max_is_lower_bound"], v["beyond_range"]);
    let csv = std::fs::read_to_string(&edge_file).unwrap();
    assert!(
        csv.starts_with("x,y,normal_x,normal_y,order,stress_mpa,beyond_range,contour,along_px\n")
    );
    assert_eq!(
        csv.lines().count() as u64,
        v["edge_points"].as_u64().unwrap() + 1
    );
    assert!(v.get("x_mm").is_none(), "no mm without a scale: {v}");
}

#[test]
fn boundary_with_a_scale_gives_the_peak_and_every_edge_point_in_millimetres_too() {
    let s = scenario();
    // The demo plate is drawn at 0.1 mm per pixel (its hole: 7 mm over 70 px).
    let mm_per_px = 0.1;
    let edge_file = path("plate-edge-mm.csv");
    let printed = ok(boundary_of_plate(&[
        "--fringe-value-n-per-mm",
        "10.5",
        "--thickness-mm",
        "6",
        "--mm-per-px",
        &mm_per_px.to_string(),
        "--out",
        &edge_file,
        "--json",
    ]));
    let v: Value = serde_json::from_str(printed.trim()).expect("one JSON object");
    let (x, y) = (v["x"].as_f64().unwrap(), v["y"].as_f64().unwrap());
    assert_eq!(v["mm_per_px"].as_f64(), Some(mm_per_px));
    assert!(
        (v["x_mm"].as_f64().unwrap() - x * mm_per_px).abs() < 1e-9,
        "{v}"
    );
    assert!(
        (v["y_mm"].as_f64().unwrap() - y * mm_per_px).abs() < 1e-9,
        "{v}"
    );
    // The peak lies on the hole's rim: 7 mm from its centre (the scenario's hole radius).
    let centre = &s["plate"]["field"]["centre"];
    let (cx, cy) = (centre["x"].as_f64().unwrap(), centre["y"].as_f64().unwrap());
    let from_centre_mm = (v["x_mm"].as_f64().unwrap() - cx * mm_per_px)
        .hypot(v["y_mm"].as_f64().unwrap() - cy * mm_per_px);
    assert!(
        (from_centre_mm - 7.0).abs() < 0.2,
        "{from_centre_mm} mm: {v}"
    );
    let csv = std::fs::read_to_string(&edge_file).unwrap();
    let mut lines = csv.lines();
    assert_eq!(
        lines.next(),
        Some("x,y,normal_x,normal_y,order,stress_mpa,beyond_range,contour,along_px,x_mm,y_mm,along_mm")
    );
    for line in lines {
        let cells: Vec<&str> = line.split(',').collect();
        let number = |i: usize| cells[i].parse::<f64>().unwrap();
        assert!((number(9) - number(0) * mm_per_px).abs() < 2e-3, "{line}");
        assert!((number(11) - number(8) * mm_per_px).abs() < 2e-3, "{line}");
    }
}

#[test]
fn boundary_refuses_bad_numbers_naming_the_flag_and_writes_nothing() {
    let edge_file = path("never-edge.csv");
    for (extra, needle) in [
        (
            &["--fringe-value-n-per-mm", "10.5", "--thickness-mm", "0"][..],
            "invalid --thickness-mm",
        ),
        (
            &["--fringe-value-n-per-mm", "-2", "--thickness-mm", "6"][..],
            "invalid --fringe-value-n-per-mm",
        ),
        (
            &[
                "--fringe-value-n-per-mm",
                "10.5",
                "--thickness-mm",
                "6",
                "--nominal-stress-mpa",
                "0",
            ][..],
            "invalid --nominal-stress-mpa",
        ),
        (&["--thickness-mm", "6"][..], "--fringe-value-n-per-mm"),
        (
            &[
                "--fringe-value-n-per-mm",
                "10.5",
                "--thickness-mm",
                "6",
                "--mm-per-px",
                "0",
            ][..],
            "invalid --mm-per-px",
        ),
        (
            &[
                "--fringe-value-n-per-mm",
                "10.5",
                "--thickness-mm",
                "6",
                "--mm-per-px",
                "-0.1",
            ][..],
            "invalid --mm-per-px",
        ),
    ] {
        let mut args = extra.to_vec();
        args.extend(["--out", &edge_file, "--json"]);
        let output = on_demo_with(
            &calibration_without_stress_inputs(),
            "boundary",
            "plate-hole.png",
            "plate-hole-mask.png",
            &args,
        );
        let stderr = refused(&output, format_args!("{extra:?} succeeded"));
        assert!(stderr.contains(needle), "{extra:?}: {stderr}");
    }
    assert!(!Path::new(&edge_file).exists(), "nothing was written");
}

/// Points on the demo hole's edge right of its centre, from −30° to 30°, as `--polyline`
/// spells them.
fn polyline_beside_the_demo_hole() -> String {
    let s = scenario();
    let centre = &s["plate"]["field"]["centre"];
    let (cx, cy) = (centre["x"].as_f64().unwrap(), centre["y"].as_f64().unwrap());
    let radius = s["plate"]["field"]["radius_px"].as_f64().unwrap();
    (-3..=3)
        .map(|i| {
            let a = f64::from(i) * 10f64.to_radians();
            format!("{:.2},{:.2}", cx + radius * a.cos(), cy + radius * a.sin())
        })
        .collect::<Vec<_>>()
        .join(";")
}

#[test]
fn boundary_samples_a_polyline_given_as_semicolon_separated_points() {
    let s = scenario();
    let remote = s["plate"]["remote_order"].as_f64().unwrap() * 10.5 / 6.0;
    let polyline = polyline_beside_the_demo_hole();
    let printed = ok(boundary_of_plate(&[
        "--fringe-value",
        "10.5",
        "--thickness",
        "6",
        "--nominal-stress",
        &remote.to_string(),
        "--polyline",
        &polyline,
        "--json",
    ]));
    let v: Value = serde_json::from_str(printed.trim()).expect("one JSON object");
    // source: Kirsch (1898), K_t = 3 beside the hole; 5 % for the 70-px hole as above.
    let kt = v["kt"].as_f64().unwrap();
    assert!((kt - 3.0).abs() <= 0.05 * 3.0, "{v}");
    // The polyline's chords are about 12 px long: a few dozen points, not the whole outline.
    let points = v["edge_points"].as_u64().unwrap();
    assert!((50..120).contains(&points), "{v}");
    for (bad, needle) in [
        ("10,10", "invalid --polyline"),
        ("10,10;x,4", "--polyline"),
        ("10,10;9000,10", "invalid --polyline"),
    ] {
        let output = boundary_of_plate(&[
            "--fringe-value",
            "10.5",
            "--thickness",
            "6",
            "--polyline",
            bad,
        ]);
        let stderr = refused(&output, format_args!("{bad} succeeded"));
        assert!(stderr.contains(needle), "{bad}: {stderr}");
    }
}

/// The text of a PDF file as `pdftotext` reads it, whitespace runs made single spaces; `None`
/// when the tool is missing outside CI (under CI its absence fails).
fn pdf_text(file: &str) -> Option<String> {
    let output = match Command::new("pdftotext").args([file, "-"]).output() {
        Ok(output) => output,
        Err(e) if std::env::var_os("CI").is_none() => {
            eprintln!("skipped: pdftotext not available ({e}); apt-get install poppler-utils");
            return None;
        }
        Err(e) => panic!("pdftotext is needed under CI (poppler-utils): {e}"),
    };
    assert!(output.status.success());
    let text = String::from_utf8(output.stdout).unwrap();
    Some(text.split_whitespace().collect::<Vec<_>>().join(" "))
}

#[test]
fn report_writes_a_pdf_whose_text_gives_the_maximum_edge_stress_and_the_caution() {
    let s = scenario();
    let remote = (s["plate"]["remote_order"].as_f64().unwrap() * 10.5 / 6.0).to_string();
    let material = [
        "--fringe-value",
        "10.5",
        "--thickness",
        "6",
        "--nominal-stress",
        &remote,
    ];
    let mut json = material.to_vec();
    json.push("--json");
    let v: Value = serde_json::from_str(ok(boundary_of_plate(&json)).trim()).unwrap();
    let report = path("plate-report.pdf");
    let mut args = material.to_vec();
    args.extend(["--load-n", "420", "--mm-per-px", "0.1", "--out", &report]);
    ok(on_demo(
        "report",
        "plate-hole.png",
        "plate-hole-mask.png",
        &args,
    ));
    let pdf = std::fs::read(&report).unwrap();
    assert!(pdf.starts_with(b"%PDF-"));
    let Some(text) = pdf_text(&report) else {
        return;
    };
    let maximum = isotint_core::stress::maximum_text(
        v["max_stress_mpa"].as_f64().unwrap(),
        "MPa",
        v["max_is_lower_bound"].as_bool().unwrap(),
    );
    assert!(text.contains(&maximum), "{maximum} missing from: {text}");
    for needed in [
        "calibration: ",
        "SHA-256",
        "load: 420 N",
        "scale: 0.1 mm per px",
        "K_t = sigma_max / sigma_nom",
        "local codes and licensed engineering practice",
    ] {
        assert!(text.contains(needed), "{needed:?} missing from: {text}");
    }
}

#[test]
fn report_refuses_missing_or_bad_inputs_naming_the_flag_and_writes_nothing() {
    let report = path("never-report.pdf");
    for (extra, needle) in [
        (&[][..], "--fringe-value-n-per-mm"),
        (
            &[
                "--fringe-value",
                "10.5",
                "--thickness",
                "6",
                "--mm-per-px",
                "0",
            ][..],
            "invalid --mm-per-px",
        ),
        (
            &[
                "--fringe-value",
                "10.5",
                "--thickness",
                "6",
                "--load-n",
                "-3",
            ][..],
            "invalid --load-n",
        ),
    ] {
        let mut args = extra.to_vec();
        args.extend(["--out", &report]);
        let output = on_demo_with(
            &calibration_without_stress_inputs(),
            "report",
            "plate-hole.png",
            "plate-hole-mask.png",
            &args,
        );
        let stderr = refused(&output, format_args!("{extra:?} succeeded"));
        assert!(stderr.contains(needle), "{extra:?}: {stderr}");
    }
    assert!(!Path::new(&report).exists(), "nothing was written");
}

/// The access mode a started service logged.
fn logged_mode(served: &Served) -> &Value {
    let line = served
        .log
        .iter()
        .find(|l| l["fields"]["message"] == "access mode")
        .unwrap_or_else(|| panic!("no access mode line in {:?}", served.log));
    &line["fields"]["mode"]
}

/// GET `path` of `served` with a token if given; the status.
async fn status_of(served: &Served, path: &str, token: Option<&str>) -> u16 {
    let mut request = reqwest::Client::new().get(format!("http://{}{path}", served.address));
    if let Some(token) = token {
        request = request.bearer_auth(token);
    }
    request.send().await.unwrap().status().as_u16()
}

#[tokio::test]
async fn sqlite_on_loopback_starts_open_and_postgresql_or_the_auth_flag_starts_token_mode() {
    let dir = tempfile::tempdir().unwrap();
    let sqlite = format!(
        "sqlite://{}?mode=rwc",
        dir.path().join("lab.sqlite").display()
    );
    let open = serve_in(dir.path(), &sqlite, &[]);
    assert_eq!(logged_mode(&open), "open");
    assert_eq!(status_of(&open, "/api/v1/calibrations", None).await, 200);
    drop(open);
    let required = serve_in(dir.path(), &sqlite, &["--auth", "required"]);
    assert_eq!(logged_mode(&required), "tokens");
    assert_eq!(
        status_of(&required, "/api/v1/calibrations", None).await,
        401
    );
    assert_eq!(status_of(&required, "/api/v1/health", None).await, 200);
    drop(required);
    match common::PostgresDatabase::create().await {
        Some(db) => {
            let shared = serve_in(dir.path(), &db.url, &[]);
            assert_eq!(logged_mode(&shared), "tokens");
            let explicit = serve_in(dir.path(), &db.url, &["--auth", "open"]);
            assert_eq!(logged_mode(&explicit), "open", "the explicit flag wins");
            drop((shared, explicit));
            db.drop_database().await;
        }
        None => eprintln!("ISOTINT_TEST_POSTGRES_URL not set: PostgreSQL variant skipped"),
    }
}

/// `isotint token create`, `list` and `revoke` against a service in token mode on `database`.
async fn tokens_made_listed_and_revoked_on(dir: &Path, database: &str) {
    let served = serve_in(dir, database, &["--auth", "required"]);
    let made = ok(isotint(&[
        "token",
        "create",
        "--database",
        database,
        "--name",
        "lab-admin",
        "--role",
        "admin",
    ]));
    let token = made.lines().last().unwrap().trim().to_string();
    assert!(
        token.starts_with("isotint_") && !token.contains(' '),
        "{made}"
    );
    let archive_unknown = "/api/v1/calibrations/00000000-0000-4000-8000-000000000000/archive";
    let client = reqwest::Client::new();
    let archived = client
        .post(format!("http://{}{archive_unknown}", served.address))
        .bearer_auth(&token)
        .send()
        .await
        .unwrap();
    assert_eq!(
        archived.status().as_u16(),
        404,
        "an admin gets past the check"
    );
    assert_eq!(
        status_of(&served, "/api/v1/calibrations", Some(&token)).await,
        200
    );

    let listed = ok(isotint(&["token", "list", "--database", database]));
    assert!(
        listed.contains("lab-admin") && listed.contains("admin"),
        "{listed}"
    );
    assert!(
        !listed.contains(&token) && !listed.contains(&token[8..]),
        "{listed}"
    );
    assert!(
        !listed.contains("never"),
        "a used token shows when: {listed}"
    );

    ok(isotint(&[
        "token",
        "revoke",
        "--database",
        database,
        "lab-admin",
    ]));
    assert_eq!(
        status_of(&served, "/api/v1/calibrations", Some(&token)).await,
        401
    );
    let again = isotint(&["token", "revoke", "--database", database, "lab-admin"]);
    assert!(!again.status.success());
    assert!(String::from_utf8_lossy(&again.stderr).contains("revoked already"));
    let reused = isotint(&[
        "token",
        "create",
        "--database",
        database,
        "--name",
        "lab-admin",
        "--role",
        "reader",
    ]);
    assert!(!reused.status.success());
    assert!(String::from_utf8_lossy(&reused.stderr).contains("--name"));
}

#[tokio::test]
async fn a_token_made_on_the_command_line_works_against_the_service_until_revoked_on_every_backend()
{
    let dir = tempfile::tempdir().unwrap();
    let sqlite = format!(
        "sqlite://{}?mode=rwc",
        dir.path().join("lab.sqlite").display()
    );
    tokens_made_listed_and_revoked_on(dir.path(), &sqlite).await;
    match common::PostgresDatabase::create().await {
        Some(db) => {
            tokens_made_listed_and_revoked_on(dir.path(), &db.url).await;
            db.drop_database().await;
        }
        None => eprintln!("ISOTINT_TEST_POSTGRES_URL not set: PostgreSQL variant skipped"),
    }
}

#[test]
fn bad_token_arguments_are_refused_naming_their_flag() {
    let dir = tempfile::tempdir().unwrap();
    let database = format!(
        "sqlite://{}?mode=rwc",
        dir.path().join("t.sqlite").display()
    );
    for (args, flag) in [
        (&["--name", "x", "--role", "root"][..], "--role"),
        (&["--name", "two words", "--role", "reader"][..], "--name"),
        (&["--role", "reader"][..], "--name"),
    ] {
        let mut all = vec!["token", "create", "--database", &database];
        all.extend_from_slice(args);
        let output = isotint(&all);
        let stderr = refused(&output, format_args!("{args:?} succeeded"));
        assert!(stderr.contains(flag), "{args:?}: {stderr}");
    }
}

/// Writes the test disc photographed at `loads` (N) into a fresh directory with its mask and a
/// rendered calibration table; returns the directory and the photo paths.
fn disc_series_files(loads: &[f64]) -> (PathBuf, Vec<String>) {
    let dir = tempfile::tempdir().unwrap().keep();
    std::fs::write(
        dir.join("table.json"),
        common::table("series table").to_json(),
    )
    .unwrap();
    let mut photos = Vec::new();
    for (i, load) in loads.iter().enumerate() {
        let disc = common::disc_photo_at(*load, 360);
        let photo = dir.join(format!("disc-{i}.png"));
        std::fs::write(&photo, &disc.png).unwrap();
        std::fs::write(dir.join("mask.png"), &disc.mask_png).unwrap();
        photos.push(photo.to_str().unwrap().to_string());
    }
    (dir, photos)
}

/// `isotint series` on the files of [`disc_series_files`] with `photos` and `loads` paired in
/// order, and `extra` arguments.
fn series_of(dir: &Path, photos: &[&str], loads: &[&str], extra: &[&str]) -> Output {
    let (table, mask) = (
        dir.join("table.json").to_str().unwrap().to_string(),
        dir.join("mask.png").to_str().unwrap().to_string(),
    );
    let mut args = vec!["series", "--calibration", &table, "--mask", &mask];
    for photo in photos {
        args.extend(["--photo", photo]);
    }
    for load in loads {
        args.extend(["--load-n", load]);
    }
    args.extend_from_slice(extra);
    isotint(&args)
}

#[test]
fn series_prints_the_fringe_value_of_a_rendered_disc_load_series_within_two_percent() {
    // Centre orders 1, 2 and 3: P = N·π·D·f_σ/8 = N · 172.8 N.
    let loads = [172.8, 345.6, 518.4];
    let (dir, photos) = disc_series_files(&loads);
    let slope_file = dir.join("slope.npy");
    let photos: Vec<&str> = photos.iter().map(String::as_str).collect();
    let load_text: Vec<String> = loads.iter().map(|l| l.to_string()).collect();
    let load_text: Vec<&str> = load_text.iter().map(String::as_str).collect();
    let printed = ok(series_of(
        &dir,
        &photos,
        &load_text,
        &[
            "--disc-diameter-mm",
            "40",
            "--thickness-mm",
            "6",
            "--out",
            slope_file.to_str().unwrap(),
            "--json",
        ],
    ));
    let v: Value = serde_json::from_str(printed.trim()).expect("one JSON object");
    common::assert_numbers(&v, &common::SERIES_FIELDS);
    let f = v["fringe_value"].as_f64().unwrap();
    println!("rendered disc series: {v}");
    // source: Timoshenko & Goodier, Theory of Elasticity §41: σ1 − σ2 = 8P/(πDh) at the centre.
    assert!(
        (f - common::DISC_FRINGE_VALUE).abs() <= 0.02 * common::DISC_FRINGE_VALUE,
        "{v}"
    );
    let (rows, cols, slope) = read_npy_f32(&std::fs::read(&slope_file).unwrap()).unwrap();
    assert_eq!((rows, cols), (360, 360));
    assert_eq!(
        slope.iter().filter(|s| s.is_finite()).count() as u64,
        v["fitted_pixels"].as_u64().unwrap()
    );
    // The short flag names still parse.
    let printed = ok(series_of(
        &dir,
        &photos[..2],
        &[],
        &[
            "--load",
            load_text[0],
            "--load",
            load_text[1],
            "--disc-diameter",
            "40",
        ],
    ));
    assert!(printed.contains("fringe value"), "{printed}");
}

#[test]
fn series_refuses_bad_input_naming_the_flag_and_writes_nothing() {
    let (dir, photos) = disc_series_files(&[200.0, 400.0]);
    let small = dir.join("small.png");
    std::fs::write(&small, common::disc_photo_at(300.0, 340).png).unwrap();
    let small = small.to_str().unwrap();
    let slope_file = dir.join("never-slope.npy");
    let out = ["--out", slope_file.to_str().unwrap(), "--json"];
    let (a, b) = (photos[0].as_str(), photos[1].as_str());
    for (photos, loads, needle) in [
        (&[a][..], &["200"][..], "invalid --photo"),
        (&[a, b][..], &["200"][..], "invalid --load-n"),
        (&[a, b][..], &["200", "0"][..], "invalid --load-n"),
        (&[a, b][..], &["200", "-5"][..], "invalid --load-n"),
        (&[a, small][..], &["200", "300"][..], "invalid --photo"),
    ] {
        let output = series_of(&dir, photos, loads, &out);
        let stderr = refused(&output, format_args!("{photos:?} {loads:?} succeeded"));
        assert!(stderr.contains(needle), "{loads:?}: {stderr}");
    }
    let output = series_of(
        &dir,
        &[a, b],
        &["200", "400"],
        &["--thickness-mm", "6", "--json"],
    );
    assert!(String::from_utf8_lossy(&output.stderr).contains("invalid --disc-diameter-mm"));
    assert!(!slope_file.exists(), "nothing was written");
}

/// `isotint compare` on the demo disc and its prediction, with `pairs` and `extra` arguments.
fn compare_demo_disc(prediction: &str, pairs: &[String], extra: &[&str]) -> Output {
    let mut args = vec![
        "--fringe-value-n-per-mm",
        "10.5",
        "--thickness-mm",
        "6",
        "--prediction",
        prediction,
    ];
    for pair in pairs {
        args.extend(["--pair", pair]);
    }
    args.extend_from_slice(extra);
    on_demo("compare", "disc.png", "disc-mask.png", &args)
}

/// The demo's registration pairs as `--pair` values, each model x shifted by `shift_mm`.
fn demo_pairs(shift_mm: f64) -> Vec<String> {
    scenario()["disc"]["prediction_pairs"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| {
            format!(
                "{},{},{},{}",
                p["x_px"],
                p["y_px"],
                p["x_mm"].as_f64().unwrap() + shift_mm,
                p["y_mm"]
            )
        })
        .collect()
}

#[test]
fn compare_prints_small_differences_for_the_demo_disc_and_large_ones_when_misregistered() {
    let difference_file = path("disc-difference.npy");
    let prediction = path("disc-prediction.csv");
    let run = |shift_mm: f64, extra: &[&str]| -> Value {
        let printed = ok(compare_demo_disc(&prediction, &demo_pairs(shift_mm), extra));
        serde_json::from_str(printed.trim()).expect("one JSON object")
    };
    let good = run(0.0, &["--out", &difference_file, "--json"]);
    common::assert_numbers(&good, &common::COMPARISON_FIELDS);
    let shifted = run(4.0, &["--json"]);
    let (g, s) = (
        good["mean_abs_difference_mpa"].as_f64().unwrap(),
        shifted["mean_abs_difference_mpa"].as_f64().unwrap(),
    );
    println!("demo disc against its closed form: mean |Δ| {g:.4} MPa; shifted 4 mm: {s:.4} MPa");
    // source: the prediction is Timoshenko & Goodier's closed form for the disc (§41); the
    // demo's centre σ1 − σ2 is about 5.1 MPa.
    assert!(g < 0.25, "{good}");
    assert!(s > 2.0 * g, "{shifted}");
    let (rows, cols, difference) = read_npy_f32(&std::fs::read(&difference_file).unwrap()).unwrap();
    assert_eq!((rows, cols), (600, 600));
    assert_eq!(
        difference.iter().filter(|d| d.is_finite()).count() as u64,
        good["compared_pixels"].as_u64().unwrap()
    );
}

#[test]
fn compare_refuses_bad_predictions_and_pairs_naming_the_flag_and_writes_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let nan = dir.path().join("nan.csv");
    std::fs::write(&nan, "x,y,s\n0,0,1\n10,0,NaN\n0,10,2\n").unwrap();
    let good = path("disc-prediction.csv");
    let out = dir.path().join("never.npy");
    let out = out.to_str().unwrap();
    let pairs = demo_pairs(0.0);
    let on_a_line = vec![
        "300,300,0,0".to_string(),
        "400,300,10,0".to_string(),
        "500,300,20,0".to_string(),
    ];
    for (prediction, pairs, needle) in [
        (nan.to_str().unwrap(), pairs.clone(), "invalid --prediction"),
        (good.as_str(), pairs[..1].to_vec(), "invalid --pair"),
        (good.as_str(), on_a_line, "invalid --pair"),
        (
            good.as_str(),
            demo_pairs(500.0),
            "invalid --pair: the registration leaves the specimen outside the model",
        ),
        (
            good.as_str(),
            vec!["1,2,3".into(), "4,5,6,7".into()],
            "--pair",
        ),
    ] {
        let output = compare_demo_disc(prediction, &pairs, &["--out", out, "--json"]);
        let stderr = refused(&output, format_args!("{pairs:?} succeeded"));
        assert!(stderr.contains(needle), "{pairs:?}: {stderr}");
    }
    assert!(!Path::new(out).exists(), "nothing was written");
}

/// `isotint COMMAND` with the demo calibration and the demo's `photo` but no mask, and `extra`
/// arguments.
fn on_demo_without_mask(command: &str, photo: &str, extra: &[&str]) -> Output {
    let (calibration, photo) = (path("calibration.json"), path(photo));
    let mut args = vec![command, "--calibration", &calibration, "--photo", &photo];
    args.extend_from_slice(extra);
    isotint(&args)
}

#[test]
fn boundary_without_a_mask_samples_the_outline_of_the_specimen_found_and_says_so() {
    let s = scenario();
    let remote = s["plate"]["remote_order"].as_f64().unwrap() * 10.5 / 6.0;
    let material = ["--fringe-value-n-per-mm", "10.5", "--thickness-mm", "6"];
    let nominal = ["--nominal-stress-mpa", &remote.to_string()];
    let args: Vec<&str> = material.iter().chain(&nominal).copied().collect();
    let json: Vec<&str> = args.iter().copied().chain(["--json"]).collect();
    let printed = ok(on_demo_without_mask("boundary", "plate-hole.png", &json));
    let v: Value = serde_json::from_str(printed.trim()).expect("one JSON object");
    assert_eq!(v["mask"]["source"], "found", "{v}");
    let kt = v["kt"].as_f64().unwrap();
    println!("demo hole, found mask: K_t {kt:.3}, {v}");
    // source: Kirsch (1898), K_t = 3 beside the hole; 5 % as with the given mask.
    assert!((kt - 3.0).abs() <= 0.05 * 3.0, "{v}");
    let printed = ok(on_demo_without_mask("boundary", "plate-hole.png", &args));
    assert!(
        printed.contains("mask                found from the photo")
            && printed.contains("give --mask FILE to keep them"),
        "{printed}"
    );
}

#[test]
fn compare_without_a_mask_compares_the_specimen_found_and_says_so() {
    let prediction = path("disc-prediction.csv");
    let mut args = vec![
        "--fringe-value-n-per-mm".to_string(),
        "10.5".into(),
        "--thickness-mm".into(),
        "6".into(),
        "--prediction".into(),
        prediction,
    ];
    for pair in demo_pairs(0.0) {
        args.extend(["--pair".to_string(), pair]);
    }
    let args: Vec<&str> = args.iter().map(String::as_str).collect();
    let json: Vec<&str> = args.iter().copied().chain(["--json"]).collect();
    let printed = ok(on_demo_without_mask("compare", "disc.png", &json));
    let v: Value = serde_json::from_str(printed.trim()).expect("one JSON object");
    assert_eq!(v["mask"]["source"], "found", "{v}");
    let mean = v["mean_abs_difference_mpa"].as_f64().unwrap();
    println!("demo disc, found mask: mean |Δ| {mean:.4} MPa, {v}");
    // source: the prediction is Timoshenko & Goodier's closed form for the disc (§41); the
    // same bound as with the given mask.
    assert!(mean < 0.25, "{v}");
    let printed = ok(on_demo_without_mask("compare", "disc.png", &args));
    assert!(
        printed.contains("mask                found from the photo"),
        "{printed}"
    );
    // The text gives the largest difference's place in the model's millimetres too, as the
    // JSON does.
    let in_model = format!(
        "= ({:.2}, {:.2}) mm in the model",
        v["max_x_mm"].as_f64().unwrap(),
        v["max_y_mm"].as_f64().unwrap()
    );
    assert!(printed.contains(&in_model), "{in_model} in {printed}");
}

#[test]
fn series_without_a_mask_finds_the_disc_in_the_photo_of_the_largest_load_and_says_so() {
    // Centre orders 1, 2 and 3: P = N·π·D·f_σ/8 = N · 172.8 N.
    let loads = [172.8, 345.6, 518.4];
    let (dir, photos) = disc_series_files(&loads);
    let table = dir.join("table.json").to_str().unwrap().to_string();
    let load_text: Vec<String> = loads.iter().map(|l| l.to_string()).collect();
    let mut args = vec![
        "series",
        "--calibration",
        &table,
        "--disc-diameter-mm",
        "40",
    ];
    for (photo, load) in photos.iter().zip(&load_text) {
        args.extend(["--photo", photo, "--load-n", load]);
    }
    let printed = ok(isotint(&[&args[..], &["--json"]].concat()));
    let v: Value = serde_json::from_str(printed.trim()).expect("one JSON object");
    assert_eq!(v["mask"]["source"], "found", "{v}");
    let f = v["fringe_value"].as_f64().unwrap();
    println!("rendered disc series, found mask: {v}");
    // source: Timoshenko & Goodier, Theory of Elasticity §41: σ1 − σ2 = 8P/(πDh) at the centre.
    assert!(
        (f - common::DISC_FRINGE_VALUE).abs() <= 0.02 * common::DISC_FRINGE_VALUE,
        "{v}"
    );
    let printed = ok(isotint(&args));
    assert!(
        printed.contains("mask                found from the photo"),
        "{printed}"
    );
}

#[test]
fn a_calibration_made_with_the_beams_load_fills_in_the_fringe_value_and_thickness_of_later_commands(
) {
    let s = scenario();
    let (edge, moment, depth) = (
        s["beam"]["field"]["edge_order"].as_f64().unwrap(),
        s["beam"]["moment_n_mm"].as_f64().unwrap(),
        s["beam"]["depth_mm"].as_f64().unwrap(),
    );
    let table_file = path("beam-with-law.json");
    calibrate_demo_beam(
        &table_file,
        &[
            "--edge-order",
            &edge.to_string(),
            "--moment-n-mm",
            &moment.to_string(),
            "--depth-mm",
            &depth.to_string(),
            "--thickness-mm",
            "6",
        ],
    );
    // source: pure bending, f_σ = 6M/(N_edge·d²) (beam theory; common practice, no source).
    let closed_form = 6.0 * moment / (edge * depth * depth);
    let table: Value = serde_json::from_slice(&std::fs::read(&table_file).unwrap()).unwrap();
    let stored = table["source"]["fringe_value_n_per_mm"].as_f64().unwrap();
    assert!(
        (stored - closed_form).abs() < 1e-9 * closed_form,
        "{stored}"
    );
    assert_eq!(table["metadata"]["thickness_mm"], 6.0);

    let boundary = |extra: &[&str]| -> Value {
        let (photo, mask) = (path("plate-hole.png"), path("plate-hole-mask.png"));
        let mut args = vec![
            "boundary",
            "--calibration",
            &table_file,
            "--photo",
            &photo,
            "--mask",
            &mask,
            "--json",
        ];
        args.extend_from_slice(extra);
        serde_json::from_str(ok(isotint(&args)).trim()).expect("one JSON object")
    };
    let defaulted = boundary(&[]);
    assert_eq!(
        defaulted["inputs_from"]["fringe_value_n_per_mm"],
        "calibration"
    );
    assert_eq!(defaulted["inputs_from"]["thickness_mm"], "calibration");
    let given = boundary(&[
        "--fringe-value-n-per-mm",
        &closed_form.to_string(),
        "--thickness-mm",
        "6",
    ]);
    assert_eq!(given["inputs_from"]["fringe_value_n_per_mm"], "given");
    assert_eq!(defaulted["max_stress_mpa"], given["max_stress_mpa"]);
    // Only h given: f_σ still the calibration's; σ scales as 1/h (stress-optic law).
    let thinner = boundary(&["--thickness-mm", "3"]);
    assert_eq!(
        thinner["inputs_from"]["fringe_value_n_per_mm"],
        "calibration"
    );
    assert_eq!(thinner["inputs_from"]["thickness_mm"], "given");
    let ratio =
        thinner["max_stress_mpa"].as_f64().unwrap() / given["max_stress_mpa"].as_f64().unwrap();
    assert!((ratio - 2.0).abs() < 1e-9, "{ratio}");

    let (photo, mask, out) = (
        path("disc.png"),
        path("disc-mask.png"),
        path("disc-defaulted.npy"),
    );
    let printed = ok(isotint(&[
        "map",
        "--calibration",
        &table_file,
        "--photo",
        &photo,
        "--mask",
        &mask,
        "--out",
        &out,
    ]));
    let from = printed
        .lines()
        .find(|l| l.contains("inputs from"))
        .expect(&printed);
    assert!(
        from.contains("f_sigma") && from.contains("calibration"),
        "{from}"
    );
    let per_fringe = format!("({:.4} MPa per fringe)", closed_form / 6.0);
    assert!(printed.contains(&per_fringe), "{per_fringe} in {printed}");
}

/// A beam in four-point bending (x 20–280, y 30–90 of a 300 × 120 photo; supports at x = 60
/// and 240, so its ends are zero order), photographed in dark field and in light field, with
/// the calibration of the same light and camera; written to `dir`. Answers the three paths.
fn beam_in_both_fields(dir: &Path) -> (PathBuf, PathBuf, PathBuf) {
    use isotint_core::calibration::CalibrationMetadata;
    use isotint_core::geometry::PixelRect;
    use isotint_core::render::{
        develop, render_light_field, render_scene, rendered_table, BendingBeamField, PhotoEffects,
        PhotoEncoding, QuarterWavePlates, RenderSetup, Renderer,
    };
    let beam = BendingBeamField::new(
        PixelRect::new(20.0, 30.0, 280.0, 90.0).unwrap(),
        (60.0, 240.0),
        (120.0, 180.0),
        1.5,
    )
    .unwrap();
    let renderer = Renderer::new(RenderSetup::default()).unwrap();
    let fx = PhotoEffects {
        blur_sigma_px: 0.7,
        ..PhotoEffects::default()
    };
    let dark = render_scene(&beam, &renderer, 300, 120, 2).unwrap().image;
    let light = render_light_field(&beam, &renderer, 300, 120, 2).unwrap();
    let paths = (
        dir.join("beam-dark.png"),
        dir.join("beam-light.png"),
        dir.join("beam-calibration.json"),
    );
    std::fs::write(&paths.0, develop(&dark, &fx, PhotoEncoding::Png8).unwrap()).unwrap();
    std::fs::write(&paths.1, develop(&light, &fx, PhotoEncoding::Png8).unwrap()).unwrap();
    let table = rendered_table(
        LightSource::Daylight,
        CameraModel::Colorimetric,
        QuarterWavePlates::Ideal,
        3.0,
        0.01,
        CalibrationMetadata {
            name: "bench beam, daylight".into(),
            ..CalibrationMetadata::default()
        },
    )
    .unwrap();
    std::fs::write(&paths.2, table.to_json()).unwrap();
    paths
}

#[test]
fn map_with_a_light_field_photo_keeps_the_beams_zero_order_ends_and_says_so() {
    let dir = tempfile::tempdir().unwrap();
    let (dark, light, calibration) = beam_in_both_fields(dir.path());
    let (dark, light, calibration) = (
        dark.to_str().unwrap(),
        light.to_str().unwrap(),
        calibration.to_str().unwrap(),
    );
    let out = dir.path().join("orders.npy");
    let out = out.to_str().unwrap();
    let map = |extra: &[&str]| {
        let mut args = vec![
            "map",
            "--calibration",
            calibration,
            "--photo",
            dark,
            "--out",
            out,
        ];
        args.extend_from_slice(extra);
        isotint(&args)
    };
    // Pixel (40, 60): the middle of the left end, 20 px from the beam's end and its support.
    let value_at_left_end = || {
        let (_, cols, orders) = read_npy_f32(&std::fs::read(out).unwrap()).unwrap();
        orders[60 * cols + 40]
    };

    let printed = ok(map(&[]));
    let (alone, line) = mask_line(&printed);
    assert!(line.contains("found from the photo,"), "{line}");
    assert!(printed.contains("--light-field-photo FILE"), "{printed}");
    assert!(
        value_at_left_end().is_nan(),
        "the dark field alone cuts the end away"
    );

    let printed = ok(map(&["--light-field-photo", light]));
    let (helped, line) = mask_line(&printed);
    assert!(
        line.contains("found from the photo and its light-field photo"),
        "{line}"
    );
    // The beam is 260 × 60 px of 300 × 120: 43.3 % of the photo (its geometry above).
    assert!((helped - 260.0 * 60.0 / 36_000.0).abs() < 0.01, "{line}");
    assert!(helped > alone + 0.05, "{helped} against {alone}");
    // common practice, no source: an unloaded zone reads as order 0.
    let end = value_at_left_end();
    assert!(end.abs() < 0.1, "the left end reads {end}");

    for (flag, value) in [("--mask", light), ("--whole-photo", "")] {
        let mut extra = vec!["--light-field-photo", light, flag];
        if !value.is_empty() {
            extra.push(value);
        }
        let stderr = refused(&map(&extra), format!("{flag} was taken"));
        assert!(
            stderr.contains("--light-field-photo") && stderr.contains(flag),
            "{stderr}"
        );
    }
    // Never written over, and never of another size than the photo.
    let stderr = refused(
        &isotint(&[
            "map",
            "--calibration",
            calibration,
            "--photo",
            dark,
            "--light-field-photo",
            light,
            "--out",
            light,
        ]),
        "the light-field photo was overwritten",
    );
    assert!(
        stderr.contains("--light-field-photo file; refusing to overwrite"),
        "{stderr}"
    );
    let other_size = path("plate-hole.png");
    let stderr = refused(
        &map(&["--light-field-photo", &other_size]),
        "a light-field photo of another size was taken",
    );
    assert!(
        stderr.contains("--light-field-photo") && stderr.contains("pixels, the photo 300×120"),
        "{stderr}"
    );
}
