//! The PDF report: its text can be read back out of the file (with `pdftotext`, Debian's
//! poppler-utils: present under CI, where its absence fails the test; skipped elsewhere), and
//! it states the maximum free-edge stress, K_t and the caution.

mod common;

use std::process::Command;

use isotint_core::boundary::{boundary_stress, EdgePath};
use isotint_core::colour::thumbnail_size;
use isotint_core::render::HoleField;
use isotint_core::report::{report_pdf, ReportInputs, ReportOptions, PICTURE_SIDE_PX};
use isotint_core::stress::{maximum_text, InputOrigins, PlateWithHole, Specimen, StressOpticLaw};
use isotint_core::{map_orders, CoreError, MapOptions, OrderMap, Photo, PixelPoint};

/// A rendered plate with a hole of 60 px radius, remote order 1 along y (f_σ 10.5 N/mm, h 6 mm:
/// 1.75 MPa), its photo and its map.
fn plate() -> (Photo, OrderMap, StressOpticLaw) {
    let law = StressOpticLaw::new(10.5, 6.0).unwrap();
    let field = HoleField::new(
        PixelPoint { x: 150.0, y: 120.0 },
        60.0,
        PlateWithHole::new(12.0, law.stress_difference_mpa(1.0)).unwrap(),
        law,
    )
    .unwrap();
    let (photo, mask) = common::rendered_photo(&field, 300, 240, 11);
    let table = common::rendered_daylight_table();
    let map = map_orders(&photo, &table, Some(&mask), &MapOptions::default()).unwrap();
    (photo, map, law)
}

fn inputs(specimen: Specimen, edge: EdgePath) -> ReportInputs {
    ReportInputs {
        photo_name: "plate-hole.png".into(),
        calibration_name: "rendered daylight table".into(),
        calibration_id: "test-table-1".into(),
        material: "BT-7 epoxy".into(),
        specimen,
        origins: InputOrigins::default(),
        edge,
        options: ReportOptions {
            nominal_stress_mpa: Some(1.75),
            load_n: Some(420.0),
            mm_per_px: Some(0.2),
            title: Some("Birchfield plate P-3".into()),
        },
    }
}

/// The text of a PDF as `pdftotext` reads it, whitespace runs made single spaces; `None` when
/// the tool is missing outside CI.
fn pdf_text(pdf: &[u8]) -> Option<String> {
    let dir = tempfile_dir();
    let path = dir.join("report.pdf");
    std::fs::write(&path, pdf).unwrap();
    let out = match Command::new("pdftotext").arg(&path).arg("-").output() {
        Ok(out) => out,
        Err(e) if std::env::var_os("CI").is_none() => {
            eprintln!("skipped: pdftotext not available ({e}); apt-get install poppler-utils");
            return None;
        }
        Err(e) => panic!("pdftotext is needed under CI (poppler-utils): {e}"),
    };
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    std::fs::remove_dir_all(&dir).ok();
    let text = String::from_utf8(out.stdout).unwrap();
    Some(text.split_whitespace().collect::<Vec<_>>().join(" "))
}

/// A fresh directory under the system's temporary directory.
fn tempfile_dir() -> std::path::PathBuf {
    let dir = std::env::temp_dir().join(format!(
        "isotint-report-{}-{:?}",
        std::process::id(),
        std::thread::current().id()
    ));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

#[test]
fn the_reports_text_states_the_maximum_edge_stress_kt_inputs_and_caution() {
    let (photo, map, law) = plate();
    let specimen = Specimen::Transmission(law);
    let pdf = report_pdf(Some(&photo), &map, &inputs(specimen, EdgePath::Outline)).unwrap();
    assert!(pdf.starts_with(b"%PDF-"), "not a PDF");
    let edge = boundary_stress(&map, &law, Some(1.75), &EdgePath::Outline).unwrap();
    let Some(text) = pdf_text(&pdf) else { return };
    let maximum = maximum_text(edge.max_stress_mpa, "MPa", edge.max_is_lower_bound);
    assert!(text.contains(&maximum), "{maximum:?} missing from: {text}");
    let kt = maximum_text(edge.kt.unwrap(), "", edge.max_is_lower_bound);
    assert!(
        text.contains(&format!("K_t = sigma_max / sigma_nom: {kt}")),
        "{text}"
    );
    for needed in [
        "Birchfield plate P-3",
        "calibration: rendered daylight table (id test-table-1)",
        "material: BT-7 epoxy",
        "material fringe value f_sigma: 10.5 N/mm per fringe",
        "model thickness h: 6 mm",
        "load: 420 N",
        "nominal stress: 1.75 MPa",
        "scale: 0.2 mm per px",
        "beyond range: the order passes the calibration's last order",
        "Results support, and do not replace, engineering judgement.",
        "local codes and licensed engineering practice",
        "|sigma_t| (MPa)",
    ] {
        assert!(text.contains(needed), "{needed:?} missing from: {text}");
    }
}

#[test]
fn a_coatings_report_gives_its_inputs_and_strains_in_microstrain() {
    let (photo, map, _) = plate();
    let specimen = isotint_core::stress::SpecimenFields {
        strain_fringe_value_um: Some(4.0),
        coating_thickness_mm: Some(2.0),
        youngs_modulus_mpa: Some(200_000.0),
        poisson_ratio: Some(0.3),
        ..Default::default()
    }
    .specimen()
    .unwrap()
    .unwrap();
    let pdf = report_pdf(Some(&photo), &map, &inputs(specimen, EdgePath::Outline)).unwrap();
    let Some(text) = pdf_text(&pdf) else { return };
    for needed in [
        "strain fringe value f_eps: 4 um per fringe",
        "coating thickness t_c: 2 mm",
        "part: E 200000 MPa, nu 0.3",
        "eps1 - eps2: min",
        "microstrain",
    ] {
        assert!(text.contains(needed), "{needed:?} missing from: {text}");
    }
}

#[test]
fn a_report_refuses_a_bad_option_or_an_edge_off_the_photo_by_name() {
    let (photo, map, law) = plate();
    let mut bad = inputs(Specimen::Transmission(law), EdgePath::Outline);
    bad.options.mm_per_px = Some(-1.0);
    assert!(matches!(
        report_pdf(Some(&photo), &map, &bad),
        Err(CoreError::Invalid {
            field: "mm_per_px",
            ..
        })
    ));
    let off = inputs(
        Specimen::Transmission(law),
        EdgePath::Polyline(vec![
            PixelPoint { x: 10.0, y: 10.0 },
            PixelPoint { x: 900.0, y: 10.0 },
        ]),
    );
    assert!(matches!(
        report_pdf(Some(&photo), &map, &off),
        Err(CoreError::Invalid {
            field: "polyline",
            ..
        })
    ));
}

#[test]
fn the_reports_pictures_are_copies_no_longer_than_their_limit() {
    // Exact: a 4000 × 3000 photo becomes 640 × 480, a smaller one keeps its size.
    assert_eq!(thumbnail_size(4000, 3000, PICTURE_SIDE_PX), (640, 480));
    assert_eq!(thumbnail_size(300, 240, PICTURE_SIDE_PX), (300, 240));
    let photo = Photo::from_srgb8(
        4,
        2,
        (0..8u8).map(|i| palette::Srgb::new(i, i, i)).collect(),
    )
    .unwrap();
    // Halving 4 × 2: each copy pixel takes the photo's pixel under its centre: row 1,
    // columns 1 and 3, i.e. pixels 5 and 7.
    let (w, h, rgb) = photo.thumbnail_rgb8(2);
    assert_eq!((w, h), (2, 1));
    assert_eq!(rgb, vec![5, 5, 5, 7, 7, 7]);
}

#[test]
fn a_stored_maps_report_without_its_photo_says_so_and_still_gives_the_edge_maximum() {
    let (_, map, law) = plate();
    let mut given = inputs(Specimen::Transmission(law), EdgePath::Outline);
    given.photo_name = "stored order map".into();
    given.origins = InputOrigins {
        fringe_value_n_per_mm: Some(isotint_core::stress::InputOrigin::Calibration),
        thickness_mm: Some(isotint_core::stress::InputOrigin::Given),
    };
    let pdf = report_pdf(None, &map, &given).unwrap();
    assert!(pdf.starts_with(b"%PDF-"), "not a PDF");
    let Some(text) = pdf_text(&pdf) else { return };
    // source: Kirsch (1898), the same edge maximum as the report with its photo.
    let edge = boundary_stress(&map, &law, Some(1.75), &EdgePath::Outline).unwrap();
    let maximum = maximum_text(edge.max_stress_mpa, "MPa", edge.max_is_lower_bound);
    assert!(text.contains(&maximum), "{maximum:?} missing from: {text}");
    for needed in [
        "the photo is not kept with a stored map",
        "f_sigma: not given, the calibration's value",
    ] {
        assert!(text.contains(needed), "{needed:?} missing from: {text}");
    }
}
