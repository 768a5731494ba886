//! Theoretical calibration tables and load planning from the renderer.

use palette::Srgb;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::camera::CameraModel;
use super::effects::{develop, PhotoEffects, PhotoEncoding};
use super::fields::BendingBeamField;
use super::fields::OrderField;
use super::light::LightSource;
use super::polariscope::QuarterWavePlates;
use super::renderer::{clip, encode_srgb8, RenderSetup, Renderer};
use super::scene::render_scene;
use crate::beam::{calibrate_beam, BeamSpec, EdgeLoad};
use crate::calibration::{
    CalibrationMetadata, CalibrationTable, TableEntry, TableSource, MAX_TABLE_ORDER,
    ORDER_STEP_RANGE,
};
use crate::colour::lab_from_linear;
use crate::colour::{DecodeLimits, Photo};
use crate::error::{CoreError, CoreResult};
use crate::geometry::{PixelPoint, PixelRect};

/// Edge order of the beam in [`photographed_beam`], fringes.
pub const PHOTOGRAPHED_BEAM_EDGE_ORDER: f64 = 4.5;

/// A rendered *photo* of a beam in four-point bending (1000 × 400 px; beam edges at y = 80
/// and 320, inner loads at x = 280 and 720, supports at 50 and 950; edge order
/// [`PHOTOGRAPHED_BEAM_EDGE_ORDER`]), taken with `renderer`, `effects` and `encoding`, and the
/// region a lab would calibrate on: the constant-moment zone 20 px in from each inner load,
/// edge to edge (pixel-edge coordinates).
pub fn photographed_beam(
    renderer: &Renderer,
    effects: &PhotoEffects,
    encoding: PhotoEncoding,
) -> CoreResult<(Photo, PixelRect)> {
    let beam = BendingBeamField::new(
        PixelRect::new(20.0, 80.0, 980.0, 320.0)?,
        (50.0, 950.0),
        (280.0, 720.0),
        PHOTOGRAPHED_BEAM_EDGE_ORDER,
    )?;
    let scene = render_scene(&beam, renderer, 1000, 400, 3)?;
    let photo = Photo::decode(
        &develop(&scene.image, effects, encoding)?,
        &DecodeLimits::default(),
    )?;
    let zone = beam.constant_moment_zone();
    let region = PixelRect::new(zone.left + 20.0, zone.top, zone.right - 20.0, zone.bottom)?;
    Ok((photo, region))
}

/// A table measured the way a lab measures one, on [`photographed_beam`] with its known edge
/// order. Unlike [`rendered_table`] it includes what the photo pipeline does to colours (blur,
/// noise, gamut clipping, compression).
pub fn photographed_beam_table(
    renderer: &Renderer,
    effects: &PhotoEffects,
    encoding: PhotoEncoding,
    metadata: CalibrationMetadata,
) -> CoreResult<CalibrationTable> {
    let (photo, region) = photographed_beam(renderer, effects, encoding)?;
    let spec = BeamSpec {
        region,
        load: EdgeLoad::EdgeOrder(PHOTOGRAPHED_BEAM_EDGE_ORDER),
        refine_edges: false,
        order_step: 0.01,
        metadata,
    };
    Ok(calibrate_beam(&photo, &spec)?.table)
}

/// Fast-axis angles averaged over for the spread of a rendered table entry (plates that are
/// not ideal make the colour depend on the isoclinic).
const SPREAD_ANGLES: usize = 16;

/// A calibration table computed by the renderer: for every order 0, step, 2·step, … ≤
/// `max_order` the CIELAB (D65) colour of the 8-bit-gamut-clipped linear sRGB that the camera
/// gives at exposure 1, averaged over isoclinic angles. `spread` is the standard deviation
/// over isoclinic angles (zero for ideal plates), `samples` is 0. The source carries no
/// `plate_design_nm` for ideal plates.
pub fn rendered_table(
    light: LightSource,
    camera: CameraModel,
    plates: QuarterWavePlates,
    max_order: f64,
    order_step: f64,
    metadata: CalibrationMetadata,
) -> CoreResult<CalibrationTable> {
    if !(max_order.is_finite() && max_order > 0.0 && max_order <= MAX_TABLE_ORDER) {
        return Err(CoreError::invalid(
            "max_order",
            format!("must lie in (0, {MAX_TABLE_ORDER}] fringes, got {max_order}"),
        ));
    }
    let (lo, hi) = ORDER_STEP_RANGE;
    if !(order_step.is_finite() && (lo..=hi).contains(&order_step)) {
        return Err(CoreError::invalid(
            "order_step",
            format!("must lie in [{lo}, {hi}] fringes, got {order_step}"),
        ));
    }
    let renderer = Renderer::new(RenderSetup {
        light,
        camera,
        plates,
        dispersion: 0.0,
        exposure: 1.0,
    })?;
    let count = (max_order / order_step + 1e-9).floor() as usize;
    let entries = (0..=count)
        .into_par_iter()
        .map(|i| {
            // Rounded to 1e-9 fringe so the JSON shows 0.35, not 0.35000000000000003.
            let order = (i as f64 * order_step * 1e9).round() / 1e9;
            let mean = lab_from_linear(clip(renderer.linear_isoclinic_mean(order)));
            let spread = if plates.design_nm().is_none() {
                [0.0; 3]
            } else {
                let labs: Vec<[f32; 3]> = (0..SPREAD_ANGLES)
                    .map(|a| {
                        let theta = std::f64::consts::PI * a as f64 / SPREAD_ANGLES as f64;
                        let lab = lab_from_linear(clip(renderer.linear(order, theta)));
                        [lab.l, lab.a, lab.b]
                    })
                    .collect();
                std::array::from_fn(|k| {
                    let m = labs.iter().map(|l| l[k]).sum::<f32>() / labs.len() as f32;
                    (labs.iter().map(|l| (l[k] - m).powi(2)).sum::<f32>() / labs.len() as f32)
                        .sqrt()
                })
            };
            TableEntry {
                order,
                lab: [mean.l, mean.a, mean.b],
                spread,
                samples: 0,
            }
        })
        .collect();
    CalibrationTable::new(
        metadata,
        order_step,
        TableSource::Rendered {
            light: light.description().to_string(),
            camera: camera.description().to_string(),
            plate_design_nm: plates.design_nm(),
        },
        entries,
    )
}

/// One colour of a load preview.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PreviewSwatch {
    /// Fringe order.
    pub order: f64,
    /// 8-bit sRGB, averaged over isoclinic angles, clipped to the gamut.
    pub srgb: Srgb<u8>,
}

/// The colours a planned load will show: `count` (2–10 000) evenly spaced orders from
/// `from_order` to `to_order` (both ≥ 0, inclusive), rendered with `renderer`.
pub fn load_preview(
    renderer: &Renderer,
    from_order: f64,
    to_order: f64,
    count: usize,
) -> CoreResult<Vec<PreviewSwatch>> {
    for (field, v) in [("from_order", from_order), ("to_order", to_order)] {
        if !(v.is_finite() && v >= 0.0) {
            return Err(CoreError::invalid(
                field,
                format!("must be a number ≥ 0, got {v}"),
            ));
        }
    }
    if !(2..=10_000).contains(&count) {
        return Err(CoreError::invalid(
            "count",
            format!("must lie in 2–10000, got {count}"),
        ));
    }
    Ok((0..count)
        .map(|i| {
            let order = from_order + (to_order - from_order) * i as f64 / (count - 1) as f64;
            PreviewSwatch {
                order,
                srgb: encode_srgb8(renderer.linear_isoclinic_mean(order)),
            }
        })
        .collect())
}

/// Result of [`check_order_limit`].
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct OrderLimitCheck {
    /// The limit checked against, fringes.
    pub limit: f64,
    /// Whether every specimen pixel centre has N ≤ limit.
    pub within_limit: bool,
    /// Largest order over specimen pixel centres (NaN if there are none).
    pub max_order: f64,
    /// Centre of the pixel with the largest order, pixel-edge coordinates.
    pub max_at: Option<PixelPoint>,
    /// Specimen pixels whose order exceeds the limit.
    pub pixels_over: u64,
    /// Specimen pixels in all.
    pub specimen_pixels: u64,
}

/// Checks whether `field` stays at or below `limit` fringes at every specimen pixel centre of a
/// `width` × `height` image (e.g. the largest order a calibration table covers).
pub fn check_order_limit(
    field: &dyn OrderField,
    width: u32,
    height: u32,
    limit: f64,
) -> CoreResult<OrderLimitCheck> {
    if !(limit.is_finite() && limit > 0.0) {
        return Err(CoreError::invalid(
            "limit",
            format!("must be a positive number, got {limit}"),
        ));
    }
    let (over, count, best) = (0..height)
        .into_par_iter()
        .map(|y| {
            let (mut over, mut count, mut best) = (0u64, 0u64, None::<(f64, PixelPoint)>);
            for x in 0..width {
                let p = PixelPoint {
                    x: f64::from(x) + 0.5,
                    y: f64::from(y) + 0.5,
                };
                if let Some(s) = field.sample(p.x, p.y) {
                    count += 1;
                    over += u64::from(s.order > limit);
                    if best.is_none_or(|(b, _)| s.order > b) {
                        best = Some((s.order, p));
                    }
                }
            }
            (over, count, best)
        })
        .reduce(
            || (0, 0, None),
            |a, b| {
                let best = match (a.2, b.2) {
                    (Some(p), Some(q)) => Some(if q.0 > p.0 { q } else { p }),
                    (p, q) => p.or(q),
                };
                (a.0 + b.0, a.1 + b.1, best)
            },
        );
    Ok(OrderLimitCheck {
        limit,
        within_limit: over == 0,
        max_order: best.map_or(f64::NAN, |b| b.0),
        max_at: best.map(|b| b.1),
        pixels_over: over,
        specimen_pixels: count,
    })
}
