//! The demo scenario, invented for isotint: the "Birchfield test bay", a small lab that casts
//! epoxy brackets and checks them in a halogen-lit transmission polariscope. It photographs a
//! calibration beam in four-point bending, a disc in diametral compression and a plate with a
//! hole. Every number here is made up; none comes from a real product or publication.

use serde::Serialize;

use super::effects::{develop, encode_mask_png, PhotoEffects, PhotoEncoding};
use super::fields::{BendingBeamField, DiscField, HoleField, OrderField};
use super::scene::{render_light_field, render_scene};
use super::{CameraModel, LightSource, QuarterWavePlates, RenderSetup, Renderer};
use crate::comparison::PointPair;
use crate::error::CoreResult;
use crate::export::npy_f32;
use crate::geometry::{PixelPoint, PixelRect};
use crate::stress::{DiscInCompression, PlateWithHole, StressOpticLaw};

/// Samples per pixel along each axis in the demo photos.
const SUPERSAMPLING: u32 = 3;

/// Material of the demo: cast epoxy sheet, batch "BT-7".
const FRINGE_VALUE_N_PER_MM: f64 = 10.5;
/// Thickness of every demo specimen, mm.
const THICKNESS_MM: f64 = 6.0;

/// One file of the demo, ready to be written to a directory.
#[derive(Debug, Clone)]
pub struct DemoFile {
    /// File name, no directory (e.g. `beam.png`).
    pub name: String,
    /// What the file holds, one line.
    pub description: String,
    /// Encoded bytes (PNG, JPEG, NPY or JSON).
    pub bytes: Vec<u8>,
}

/// Machine-readable description of the scenario, written as `scenario.json`.
#[derive(Debug, Clone, Serialize)]
pub struct ScenarioDescription {
    /// Name of the (invented) lab.
    pub lab: String,
    /// Model material.
    pub material: String,
    /// Material fringe value, N/mm per fringe.
    pub fringe_value_n_per_mm: f64,
    /// Thickness of every specimen, mm.
    pub thickness_mm: f64,
    /// Light, camera, plates and exposure used.
    pub setup: RenderSetup,
    /// Supersampling per axis.
    pub supersampling: u32,
    /// The calibration beam.
    pub beam: BeamDescription,
    /// The disc.
    pub disc: DiscDescription,
    /// The plate with a hole.
    pub plate: PlateDescription,
}

/// Files and load of the demo beam. Pixel rectangles use pixel-edge coordinates.
#[derive(Debug, Clone, Serialize)]
pub struct BeamDescription {
    /// Photo files (PNG 8-bit and JPEG 4:2:0).
    pub photos: Vec<String>,
    /// Mask file (non-zero = specimen).
    pub mask: String,
    /// True order per pixel, NPY float32, NaN off the specimen.
    pub true_order: String,
    /// Photo size, pixels.
    pub width: u32,
    /// Photo size, pixels.
    pub height: u32,
    /// The field drawn (beam rectangle, supports, loads, edge order).
    pub field: BendingBeamField,
    /// Constant-moment zone to calibrate from.
    pub constant_moment_zone: PixelRect,
    /// Image scale, mm per pixel.
    pub mm_per_px: f64,
    /// Beam depth, mm.
    pub depth_mm: f64,
    /// Bending moment in the zone, N·mm.
    pub moment_n_mm: f64,
    /// Total load of the rig (two equal inner loads), N.
    pub total_load_n: f64,
    /// Effects applied to the photos.
    pub effects: PhotoEffects,
}

/// Files and load of the demo disc.
#[derive(Debug, Clone, Serialize)]
pub struct DiscDescription {
    /// Photo file (PNG 16-bit).
    pub photo: String,
    /// Mask file.
    pub mask: String,
    /// True order per pixel, NPY float32.
    pub true_order: String,
    /// The same disc in light field (analyser turned 90°; PNG 16-bit, same effects), whose
    /// outline keeps the disc's stress-free rim when the specimen is found from the photo.
    pub light_field_photo: String,
    /// Photo size, pixels.
    pub width: u32,
    /// Photo size, pixels.
    pub height: u32,
    /// The field drawn.
    pub field: DiscField,
    /// Order at the centre, 8P/(πD·f_σ).
    pub centre_order: f64,
    /// Effects applied to the photo.
    pub effects: PhotoEffects,
    /// A stand-in for a finite-element prediction: the closed-form σ1 − σ2 on a polar grid of
    /// nodes (CSV x_mm,y_mm,stress_mpa; origin at the centre, y up).
    pub prediction: String,
    /// Point pairs registering that prediction to the photo (centre, right and top points).
    pub prediction_pairs: Vec<PointPair>,
}

/// Files and load of the demo plate with a hole.
#[derive(Debug, Clone, Serialize)]
pub struct PlateDescription {
    /// Photo file (PNG 8-bit).
    pub photo: String,
    /// Mask file.
    pub mask: String,
    /// True order per pixel, NPY float32.
    pub true_order: String,
    /// Photo size, pixels.
    pub width: u32,
    /// Photo size, pixels.
    pub height: u32,
    /// The field drawn.
    pub field: HoleField,
    /// Order far from the hole.
    pub remote_order: f64,
    /// Largest order, at the hole edge beside the hole (3× remote).
    pub max_order: f64,
    /// Effects applied to the photo.
    pub effects: PhotoEffects,
}

/// The whole demo: description and files.
#[derive(Debug, Clone)]
pub struct DemoScenario {
    /// What was drawn, with which numbers.
    pub description: ScenarioDescription,
    /// Photos, masks, true orders and `scenario.json`.
    pub files: Vec<DemoFile>,
}

/// A rendered specimen's files: photo(s), mask and true order.
struct Rendered {
    files: Vec<DemoFile>,
}

fn render_files(
    renderer: &Renderer,
    field: &dyn OrderField,
    (width, height): (u32, u32),
    stem: &str,
    what: &str,
    photos: &[(PhotoEncoding, &PhotoEffects, &str)],
) -> CoreResult<Rendered> {
    let scene = render_scene(field, renderer, width, height, SUPERSAMPLING)?;
    let mut files = Vec::new();
    for (encoding, effects, suffix) in photos {
        files.push(DemoFile {
            name: format!("{stem}{suffix}.{}", encoding.extension()),
            description: format!("{what}: photo, {}", encoding_label(*encoding)),
            bytes: develop(&scene.image, effects, *encoding)?,
        });
    }
    files.push(DemoFile {
        name: format!("{stem}-mask.png"),
        description: format!("{what}: mask, 8-bit PNG, non-zero = specimen"),
        bytes: encode_mask_png(&scene.mask)?,
    });
    files.push(DemoFile {
        name: format!("{stem}-true-order.npy"),
        description: format!(
            "{what}: true fringe order at pixel centres, NPY float32, NaN off the specimen"
        ),
        bytes: npy_f32(&scene.true_order, height as usize, width as usize),
    });
    Ok(Rendered { files })
}

fn encoding_label(encoding: PhotoEncoding) -> String {
    match encoding {
        PhotoEncoding::Png8 => "8-bit sRGB PNG".into(),
        PhotoEncoding::Png16 => "16-bit sRGB PNG".into(),
        PhotoEncoding::Jpeg { quality } => format!("JPEG quality {quality}, 4:2:0"),
        PhotoEncoding::JpegFullChroma { quality } => format!("JPEG quality {quality}, 4:4:4"),
    }
}

/// The closed-form σ1 − σ2 of `disc` (Timoshenko & Goodier) on a polar grid of nodes — the
/// centre, then 50 rings of 96 nodes out to the rim — as a prediction CSV (header
/// `x_mm,y_mm,stress_mpa`), in a model frame with its origin at the disc's centre and its y
/// axis pointing up, as finite-element models usually have it.
pub fn disc_prediction_csv(disc: &DiscInCompression) -> String {
    use std::fmt::Write;
    let radius = 0.5 * disc.diameter_mm;
    let mut csv = String::from("x_mm,y_mm,stress_mpa\n");
    let node = |csv: &mut String, x: f64, y_up: f64| {
        // The closed form's y points down.
        let s = disc.stress_at(x, -y_up).principal_difference();
        let _ = writeln!(csv, "{x:.6},{y_up:.6},{s:.6}");
    };
    node(&mut csv, 0.0, 0.0);
    for ring in 1..=50 {
        let rho = radius * f64::from(ring) / 50.0;
        for k in 0..96 {
            let theta = f64::from(k) * std::f64::consts::TAU / 96.0;
            node(&mut csv, rho * theta.cos(), rho * theta.sin());
        }
    }
    csv
}

/// Three point pairs registering [`disc_prediction_csv`] to a photo of `disc`: its centre, its
/// right-hand point and its top point.
pub fn disc_registration_pairs(disc: &DiscField) -> [PointPair; 3] {
    let (c, r, radius_mm) = (disc.centre, disc.radius_px, 0.5 * disc.disc.diameter_mm);
    [
        (c.x, c.y, 0.0, 0.0),
        (c.x + r, c.y, radius_mm, 0.0),
        (c.x, c.y - r, 0.0, radius_mm),
    ]
    .map(|(x_px, y_px, x_mm, y_mm)| PointPair {
        x_px,
        y_px,
        x_mm,
        y_mm,
    })
}

impl DemoScenario {
    /// Renders the Birchfield test bay (about a second in release mode).
    pub fn birchfield() -> CoreResult<DemoScenario> {
        let setup = RenderSetup {
            light: LightSource::Halogen,
            camera: CameraModel::Sensor,
            plates: QuarterWavePlates::designed(560.0)?,
            dispersion: 0.0,
            exposure: 0.9,
        };
        let renderer = Renderer::new(setup)?;
        let law = StressOpticLaw::new(FRINGE_VALUE_N_PER_MM, THICKNESS_MM)?;
        let photo_fx = PhotoEffects {
            blur_sigma_px: 0.6,
            corner_brightness: 0.9,
            exposure: 1.0,
            noise_sigma_codes: 1.0,
            seed: 7,
        };

        // Beam: 24 mm deep at 0.1 mm/px, constant-moment zone 440 × 240 px, edge order 4.5.
        let mm_per_px = 0.1;
        let beam = BendingBeamField::new(
            PixelRect::new(40.0, 80.0, 960.0, 320.0)?,
            (70.0, 930.0),
            (280.0, 720.0),
            4.5,
        )?;
        let depth_mm = beam.beam.height() * mm_per_px;
        let moment_n_mm = beam.edge_order * law.fringe_value_n_per_mm * depth_mm * depth_mm / 6.0;
        let shear_span_mm = (beam.loads_x.0 - beam.supports_x.0) * mm_per_px;
        let beam_files = render_files(
            &renderer,
            &beam,
            (1000, 400),
            "beam",
            "calibration beam in four-point bending",
            &[
                (PhotoEncoding::Png8, &photo_fx, ""),
                (PhotoEncoding::Jpeg { quality: 90 }, &photo_fx, ""),
            ],
        )?;

        // Disc: 50 mm across, 600 N.
        let disc = DiscField::new(
            PixelPoint { x: 300.0, y: 300.0 },
            260.0,
            DiscInCompression::new(50.0, THICKNESS_MM, 600.0)?,
            FRINGE_VALUE_N_PER_MM,
        )?;
        let disc_files = render_files(
            &renderer,
            &disc,
            (600, 600),
            "disc",
            "disc in diametral compression",
            &[(PhotoEncoding::Png16, &photo_fx, "")],
        )?;

        // Plate: hole of 7 mm radius at 0.1 mm/px, remote order 1.
        let remote_stress = law.stress_difference_mpa(1.0);
        let plate = HoleField::new(
            PixelPoint { x: 400.0, y: 250.0 },
            70.0,
            PlateWithHole::new(7.0, remote_stress)?,
            law,
        )?;
        let plate_files = render_files(
            &renderer,
            &plate,
            (800, 500),
            "plate-hole",
            "plate with a hole in vertical tension",
            &[(PhotoEncoding::Png8, &photo_fx, "")],
        )?;

        let description = ScenarioDescription {
            lab: "Birchfield test bay (invented demo lab)".into(),
            material: "cast epoxy sheet, batch BT-7 (invented)".into(),
            fringe_value_n_per_mm: FRINGE_VALUE_N_PER_MM,
            thickness_mm: THICKNESS_MM,
            setup,
            supersampling: SUPERSAMPLING,
            beam: BeamDescription {
                photos: vec!["beam.png".into(), "beam.jpg".into()],
                mask: "beam-mask.png".into(),
                true_order: "beam-true-order.npy".into(),
                width: 1000,
                height: 400,
                field: beam,
                constant_moment_zone: beam.constant_moment_zone(),
                mm_per_px,
                depth_mm,
                moment_n_mm,
                total_load_n: 2.0 * moment_n_mm / shear_span_mm,
                effects: photo_fx,
            },
            disc: DiscDescription {
                photo: "disc.png".into(),
                mask: "disc-mask.png".into(),
                true_order: "disc-true-order.npy".into(),
                light_field_photo: "disc-light-field.png".into(),
                width: 600,
                height: 600,
                field: disc,
                centre_order: disc.law.order(disc.disc.centre_stress_difference_mpa()),
                effects: photo_fx,
                prediction: "disc-prediction.csv".into(),
                prediction_pairs: disc_registration_pairs(&disc).to_vec(),
            },
            plate: PlateDescription {
                photo: "plate-hole.png".into(),
                mask: "plate-hole-mask.png".into(),
                true_order: "plate-hole-true-order.npy".into(),
                width: 800,
                height: 500,
                field: plate,
                remote_order: 1.0,
                max_order: 3.0,
                effects: photo_fx,
            },
        };
        let mut files: Vec<DemoFile> = [beam_files, disc_files, plate_files]
            .into_iter()
            .flat_map(|r| r.files)
            .collect();
        files.push(DemoFile {
            name: description.disc.prediction.clone(),
            description: "closed-form σ1−σ2 of the disc on scattered nodes, as a stand-in for a \
                          finite-element prediction (mm, MPa, y up)"
                .into(),
            bytes: disc_prediction_csv(&disc.disc).into_bytes(),
        });
        let light_field = render_light_field(&disc, &renderer, 600, 600, SUPERSAMPLING)?;
        files.push(DemoFile {
            name: description.disc.light_field_photo.clone(),
            description: "disc in diametral compression: light-field photo (analyser turned 90°), \
                          16-bit sRGB PNG"
                .into(),
            bytes: develop(&light_field, &photo_fx, PhotoEncoding::Png16)?,
        });
        files.push(DemoFile {
            name: "scenario.json".into(),
            description: "what was drawn: regions, loads, material, light and camera".into(),
            bytes: serde_json::to_vec_pretty(&description)
                .expect("the description always serialises"),
        });
        Ok(DemoScenario { description, files })
    }
}
