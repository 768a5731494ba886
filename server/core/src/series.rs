//! Load series: several photos of one specimen at known loads, fitted pixel by pixel.
//!
//! In a linear-elastic, stress-free-when-unloaded model every fringe order grows in proportion
//! to the load, N = s · P. Each specimen pixel gets the least-squares slope **through the
//! origin**, s = Σ PᵢNᵢ / Σ Pᵢ², over the photos in which it has a value (at least two), and the
//! rms of its residuals Nᵢ − s·Pᵢ, fringes. The fit has no intercept on purpose: an unloaded
//! model shows order 0, the orders the solver reads are unsigned magnitudes (so a residual
//! birefringence does not simply add to them), and with two photos an intercept would leave no
//! residual at all. Locked-in stress, a slipping fixture or a photo given the wrong load shows
//! instead as a residual: pixels whose residual rms exceeds [`NONLINEAR_TOLERANCE_FRINGES`] are
//! counted as not scaling linearly.
//!
//! With a disc in diametral compression, f_σ follows from the slope at its centre, where
//! σ1 − σ2 = 8P/(πDh) (Timoshenko & Goodier, Theory of Elasticity, §41), so
//! N = 8P/(πD f_σ) and f_σ = 8 / (π D s_centre); the thickness cancels. The centre is the
//! centroid of the mask, the disc's radius in pixels that of a circle of the mask's area; the
//! slope is averaged over the pixels within [`CENTRE_RADIUS_SHARE`] of the radius of the centre
//! and divided by the closed form's mean over the same pixels (relative to its centre value),
//! which removes the field's curvature there (about −0.75 % over a tenth of the radius).
//!
//! Pixel convention: x right, y down, pixel (x, y) covers [x, x+1) × [y, y+1); arrays are
//! row-major. Loads in N, lengths in mm, slopes in fringes per N.

use rayon::prelude::*;
use serde::Serialize;

use crate::calibration::CalibrationTable;
use crate::colour::Photo;
use crate::error::{CoreError, CoreResult};
use crate::geometry::Mask;
use crate::order_map::{map_orders, MapOptions};
use crate::stress::{positive, DiscInCompression, STRESS_CAUTION};

/// Most photos in one series (each photo's orders are kept until the fit, 4 bytes a pixel).
pub const MAX_SERIES_PHOTOS: usize = 12;
/// Residual rms above which a pixel counts as not scaling linearly with the load, fringes:
/// several times the solver's typical error on clean photos.
pub const NONLINEAR_TOLERANCE_FRINGES: f64 = 0.1;
/// Radius of the central region a disc's slope is averaged over, as a share of its radius.
pub const CENTRE_RADIUS_SHARE: f64 = 0.1;
/// Smallest radius of that central region, px.
const MIN_CENTRE_RADIUS_PX: f64 = 2.0;
/// Largest share of a disc mask's pixels allowed outside 1.05 × its equivalent radius.
const DISC_OUTSIDE_SHARE: f64 = 0.02;

/// A disc in diametral compression photographed in the series.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct DiscGeometry {
    /// Diameter D, mm.
    pub diameter_mm: f64,
    /// Thickness h, mm, if given: adds the model's stress per fringe f_σ/h.
    pub thickness_mm: Option<f64>,
}

/// What a series is asked to be, checked before any photo is read.
#[derive(Debug, Clone, PartialEq)]
pub struct SeriesSpec {
    loads_n: Vec<f64>,
    disc: Option<DiscGeometry>,
}

impl SeriesSpec {
    /// A series of `photos` photos at `loads_n` (N, one per photo, each positive), with a disc
    /// when `disc_diameter_mm` is given (`thickness_mm` only with it). Refused naming `photo`
    /// (fewer than two, more than [`MAX_SERIES_PHOTOS`]), `load_n` (a count other than the
    /// photos', a load that is not a positive number), `disc_diameter_mm` or `thickness_mm`.
    pub fn new(
        photos: usize,
        loads_n: Vec<f64>,
        disc_diameter_mm: Option<f64>,
        thickness_mm: Option<f64>,
    ) -> CoreResult<Self> {
        if photos < 2 {
            return Err(CoreError::invalid(
                "photo",
                format!("a load series needs at least two photos, got {photos}"),
            ));
        }
        if photos > MAX_SERIES_PHOTOS {
            return Err(CoreError::invalid(
                "photo",
                format!("a load series takes at most {MAX_SERIES_PHOTOS} photos, got {photos}"),
            ));
        }
        if loads_n.len() != photos {
            return Err(CoreError::invalid(
                "loads_n",
                format!(
                    "give one load per photo, in the photos' order: {photos} photos but {} loads",
                    loads_n.len()
                ),
            ));
        }
        for (i, load) in loads_n.iter().enumerate() {
            if !(load.is_finite() && *load > 0.0) {
                return Err(CoreError::invalid(
                    "loads_n",
                    format!("load {} must be a positive number of N, got {load}", i + 1),
                ));
            }
        }
        let disc = match (disc_diameter_mm, thickness_mm) {
            (None, None) => None,
            (None, Some(_)) => {
                return Err(CoreError::invalid(
                    "disc_diameter_mm",
                    "is required with thickness_mm (the thickness is the disc's)",
                ))
            }
            (Some(d), h) => Some(DiscGeometry {
                diameter_mm: positive("disc_diameter_mm", d)?,
                thickness_mm: h.map(|h| positive("thickness_mm", h)).transpose()?,
            }),
        };
        Ok(SeriesSpec { loads_n, disc })
    }

    /// The loads, N, in the photos' order.
    pub fn loads_n(&self) -> &[f64] {
        &self.loads_n
    }
}

/// The fit of a load series.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LoadSeries {
    /// Photos in the series.
    pub photos: usize,
    /// Their loads, N.
    pub loads_n: Vec<f64>,
    /// Material fringe value f_σ = 8/(π D s_centre), N/mm per fringe; with a disc only.
    pub fringe_value: Option<f64>,
    /// The model's stress per fringe f_σ/h, MPa; with a disc and its thickness only.
    pub stress_per_fringe_mpa: Option<f64>,
    /// Slope dN/dP at the mask's centroid, fringes per N (mean over the central pixels; for a
    /// disc, corrected to its centre value by the closed form); `None` when no central pixel
    /// was fitted.
    pub slope_fringes_per_n: Option<f64>,
    /// Mean slope over every fitted pixel, fringes per N (NaN if none).
    pub mean_slope_fringes_per_n: f64,
    /// Rms of the residuals N − s·P over every reading of every fitted pixel, fringes.
    pub linearity_rms: f64,
    /// Share of the fitted pixels whose own residual rms exceeds `nonlinear_tolerance`.
    pub nonlinear_share: f64,
    /// How many fitted pixels that is.
    pub nonlinear_pixels: usize,
    /// The tolerance, fringes ([`NONLINEAR_TOLERANCE_FRINGES`]).
    pub nonlinear_tolerance: f64,
    /// Specimen pixels (the mask's).
    pub specimen_pixels: usize,
    /// Specimen pixels with a value in at least two photos: those fitted.
    pub fitted_pixels: usize,
    /// The mask's centroid, pixel-edge coordinates.
    pub centre_x: f64,
    /// See `centre_x`.
    pub centre_y: f64,
    /// Fitted pixels the centre slope is averaged over.
    pub centre_pixels: usize,
    /// The disc, when one was given.
    pub disc: Option<DiscGeometry>,
    /// Results support, and do not replace, engineering judgement.
    pub caution: String,
    /// Width of the photos, pixels.
    #[serde(skip)]
    pub width: u32,
    /// Height of the photos, pixels.
    #[serde(skip)]
    pub height: u32,
    /// Slope of each pixel, fringes per N, row-major; NaN where not fitted.
    #[serde(skip)]
    pub slope: Vec<f32>,
    /// Residual rms of each pixel, fringes, row-major; NaN where not fitted.
    #[serde(skip)]
    pub residual_rms: Vec<f32>,
}

/// Maps each photo of a series with `table` and fits it. The photos are taken one at a time
/// (decoded by the iterator, mapped, reduced to their orders), so only one photo is held at
/// once. Every photo must have the mask's size: refused naming `mask` when the first does not,
/// `photo` when a later one differs from the first. A photo that cannot be decoded is named by
/// its place in the series.
pub fn map_series(
    spec: &SeriesSpec,
    photos: impl IntoIterator<Item = CoreResult<Photo>>,
    mask: &Mask,
    table: &CalibrationTable,
    options: &MapOptions,
) -> CoreResult<LoadSeries> {
    let mut orders = Vec::with_capacity(spec.loads_n.len());
    for (i, photo) in photos.into_iter().enumerate() {
        let photo = photo.map_err(|e| match e {
            CoreError::Decode(m) => CoreError::Decode(format!("photo {}: {m}", i + 1)),
            CoreError::TooLarge(m) => CoreError::TooLarge(format!("photo {}: {m}", i + 1)),
            other => other,
        })?;
        let size = (photo.width(), photo.height());
        if size != (mask.width(), mask.height()) {
            let (field, other) = if i == 0 {
                ("mask", "the mask")
            } else {
                ("photo", "the first photo (and the mask)")
            };
            return Err(CoreError::invalid(
                field,
                format!(
                    "photo {} is {}×{} but {other} is {}×{}; every photo of a series shows the \
                     same view",
                    i + 1,
                    size.0,
                    size.1,
                    mask.width(),
                    mask.height()
                ),
            ));
        }
        orders.push(map_orders(&photo, table, Some(mask), options)?.order);
    }
    fit_series(spec, mask, &orders)
}

/// Fits orders of a series (one row-major array of the mask's size per load, NaN = no value)
/// as described in the module documentation.
pub fn fit_series(spec: &SeriesSpec, mask: &Mask, orders: &[Vec<f32>]) -> CoreResult<LoadSeries> {
    let (w, h) = (mask.width() as usize, mask.height() as usize);
    if orders.len() != spec.loads_n.len() {
        return Err(CoreError::invalid(
            "loads_n",
            format!(
                "{} order maps for {} loads",
                orders.len(),
                spec.loads_n.len()
            ),
        ));
    }
    if let Some(i) = orders.iter().position(|o| o.len() != w * h) {
        return Err(CoreError::invalid(
            "photo",
            format!("photo {} does not have the mask's {w}×{h} pixels", i + 1),
        ));
    }
    let inside = mask.as_slice();
    let loads = &spec.loads_n;
    let mut slope = vec![f32::NAN; w * h];
    let mut residual_rms = vec![f32::NAN; w * h];
    // Per row: (fitted pixels, nonlinear pixels, Σ slope, Σ residual², readings).
    let sums: Vec<(usize, usize, f64, f64, usize)> = slope
        .par_chunks_mut(w)
        .zip(residual_rms.par_chunks_mut(w))
        .enumerate()
        .map(|(y, (slope_row, rms_row))| {
            let mut row = (0, 0, 0.0, 0.0, 0);
            for x in 0..w {
                let i = y * w + x;
                if !inside[i] {
                    continue;
                }
                let Some(fit) = PixelFit::of(loads, orders.iter().map(|o| o[i])) else {
                    continue;
                };
                slope_row[x] = fit.slope as f32;
                rms_row[x] = fit.rms() as f32;
                row.0 += 1;
                row.1 += usize::from(fit.rms() > NONLINEAR_TOLERANCE_FRINGES);
                row.2 += fit.slope;
                row.3 += fit.sum_sq;
                row.4 += fit.readings;
            }
            row
        })
        .collect();
    let (fitted, nonlinear, slope_sum, sq_sum, readings) = sums
        .iter()
        .fold((0, 0, 0.0, 0.0, 0), |(a, b, c, d, e), (f, g, s, q, r)| {
            (a + f, b + g, c + s, d + q, e + r)
        });
    let specimen_pixels = inside.iter().filter(|&&v| v).count();
    if fitted == 0 {
        return Err(CoreError::invalid(
            "photo",
            format!(
                "no specimen pixel has a value in two or more photos ({specimen_pixels} specimen \
                 pixels); check the calibration and the photos"
            ),
        ));
    }
    let centre = Centre::of(mask).ok_or_else(|| CoreError::invalid("mask", "has no specimen"))?;
    let central = centre.pixels(mask, &slope);
    let measured_slope = (!central.is_empty())
        .then(|| central.iter().map(|&(_, _, s)| s).sum::<f64>() / central.len() as f64);
    let (slope_fringes_per_n, fringe_value) = match spec.disc {
        None => (measured_slope, None),
        Some(disc) => {
            centre.check_disc(mask)?;
            let Some(measured) = measured_slope else {
                return Err(CoreError::invalid(
                    "photo",
                    "no pixel at the disc's centre has a value in two or more photos",
                ));
            };
            let at_centre = measured / centre.curvature(&central, disc.diameter_mm);
            if at_centre <= 0.0 {
                return Err(CoreError::invalid(
                    "loads_n",
                    format!(
                        "the orders at the disc's centre do not grow with the load (slope \
                         {at_centre:.3e} fringes per N)"
                    ),
                ));
            }
            let f = 8.0 / (std::f64::consts::PI * disc.diameter_mm * at_centre);
            (Some(at_centre), Some(f))
        }
    };
    Ok(LoadSeries {
        photos: loads.len(),
        loads_n: loads.clone(),
        stress_per_fringe_mpa: fringe_value
            .zip(spec.disc.and_then(|d| d.thickness_mm))
            .map(|(f, h)| f / h),
        fringe_value,
        slope_fringes_per_n,
        mean_slope_fringes_per_n: slope_sum / fitted as f64,
        linearity_rms: (sq_sum / readings as f64).sqrt(),
        nonlinear_share: nonlinear as f64 / fitted as f64,
        nonlinear_pixels: nonlinear,
        nonlinear_tolerance: NONLINEAR_TOLERANCE_FRINGES,
        specimen_pixels,
        fitted_pixels: fitted,
        centre_x: centre.x,
        centre_y: centre.y,
        centre_pixels: central.len(),
        disc: spec.disc,
        caution: STRESS_CAUTION.to_string(),
        width: mask.width(),
        height: mask.height(),
        slope,
        residual_rms,
    })
}

/// The least-squares line through the origin of one pixel's orders against the loads.
struct PixelFit {
    slope: f64,
    sum_sq: f64,
    readings: usize,
}

impl PixelFit {
    /// The fit over the readings with a finite order; `None` with fewer than two.
    fn of(loads: &[f64], orders: impl Iterator<Item = f32>) -> Option<PixelFit> {
        let mut valued = [(0.0, 0.0); MAX_SERIES_PHOTOS];
        let mut n = 0;
        for (p, o) in loads.iter().zip(orders) {
            if o.is_finite() {
                valued[n] = (*p, f64::from(o));
                n += 1;
            }
        }
        if n < 2 {
            return None;
        }
        let valued = &valued[..n];
        let (pn, pp) = valued
            .iter()
            .fold((0.0, 0.0), |(pn, pp), (p, o)| (pn + p * o, pp + p * p));
        let slope = pn / pp;
        let sum_sq = valued.iter().map(|(p, o)| (o - slope * p).powi(2)).sum();
        Some(PixelFit {
            slope,
            sum_sq,
            readings: n,
        })
    }

    /// Rms of the residuals, fringes.
    fn rms(&self) -> f64 {
        (self.sum_sq / self.readings as f64).sqrt()
    }
}

/// The mask's centroid and equivalent radius.
struct Centre {
    x: f64,
    y: f64,
    radius_px: f64,
}

impl Centre {
    fn of(mask: &Mask) -> Option<Centre> {
        let w = mask.width() as usize;
        let (mut sx, mut sy, mut n) = (0.0, 0.0, 0usize);
        for (i, _) in mask.as_slice().iter().enumerate().filter(|(_, &v)| v) {
            sx += (i % w) as f64 + 0.5;
            sy += (i / w) as f64 + 0.5;
            n += 1;
        }
        (n > 0).then(|| Centre {
            x: sx / n as f64,
            y: sy / n as f64,
            radius_px: (n as f64 / std::f64::consts::PI).sqrt(),
        })
    }

    /// Fitted pixels whose centres lie within the central region: (dx, dy, slope), offsets
    /// from the centroid in px.
    fn pixels(&self, mask: &Mask, slope: &[f32]) -> Vec<(f64, f64, f64)> {
        let r = (CENTRE_RADIUS_SHARE * self.radius_px).max(MIN_CENTRE_RADIUS_PX);
        let w = mask.width() as usize;
        let (x0, x1) = ((self.x - r).floor().max(0.0), (self.x + r).ceil());
        let (y0, y1) = ((self.y - r).floor().max(0.0), (self.y + r).ceil());
        let mut out = Vec::new();
        for y in (y0 as usize)..(y1 as usize).min(mask.height() as usize) {
            for x in (x0 as usize)..(x1 as usize).min(w) {
                let (dx, dy) = (x as f64 + 0.5 - self.x, y as f64 + 0.5 - self.y);
                let s = slope[y * w + x];
                if dx.hypot(dy) <= r && s.is_finite() {
                    out.push((dx, dy, f64::from(s)));
                }
            }
        }
        out
    }

    /// Refuses a mask that is not one disc (too many pixels outside 1.05 × its radius).
    fn check_disc(&self, mask: &Mask) -> CoreResult<()> {
        let w = mask.width() as usize;
        let limit = 1.05 * self.radius_px + 1.0;
        let (mut outside, mut all) = (0usize, 0usize);
        for (i, _) in mask.as_slice().iter().enumerate().filter(|(_, &v)| v) {
            let (dx, dy) = ((i % w) as f64 + 0.5 - self.x, (i / w) as f64 + 0.5 - self.y);
            outside += usize::from(dx.hypot(dy) > limit);
            all += 1;
        }
        let share = outside as f64 / all as f64;
        if share > DISC_OUTSIDE_SHARE {
            return Err(CoreError::invalid(
                "mask",
                format!(
                    "is not one disc: {:.1} % of its pixels lie outside the circle of its area \
                     around its centroid; mask the disc alone to use disc_diameter_mm",
                    100.0 * share
                ),
            ));
        }
        Ok(())
    }

    /// Mean over `central` of the disc's closed-form σ1 − σ2 relative to its centre value
    /// (loads on the vertical diameter; over a centred region the mean hardly depends on the
    /// loading direction).
    fn curvature(&self, central: &[(f64, f64, f64)], diameter_mm: f64) -> f64 {
        let Ok(disc) = DiscInCompression::new(diameter_mm, 1.0, 1.0) else {
            return 1.0;
        };
        let mm_per_px = 0.5 * diameter_mm / self.radius_px;
        let centre = disc.centre_stress_difference_mpa();
        central
            .iter()
            .map(|&(dx, dy, _)| {
                disc.stress_at(dx * mm_per_px, dy * mm_per_px)
                    .principal_difference()
                    / centre
            })
            .sum::<f64>()
            / central.len() as f64
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn full_mask(w: u32, h: u32) -> Mask {
        Mask::new(w, h, vec![true; (w * h) as usize]).unwrap()
    }

    #[test]
    fn orders_that_scale_with_the_load_fit_exactly_and_a_flat_pixel_is_flagged() {
        // 3 × 1 specimen at loads 1, 2, 3 N. Pixel 0: N = 0.5·P; pixel 1: N = 0.2·P; pixel 2:
        // orders 1, 1, 1 — slope 6/14 = 3/7, residuals 4/7, 1/7, −2/7, rms √(21/147) = √(1/7).
        let spec = SeriesSpec::new(3, vec![1.0, 2.0, 3.0], None, None).unwrap();
        let orders = vec![
            vec![0.5, 0.2, 1.0],
            vec![1.0, 0.4, 1.0],
            vec![1.5, 0.6, 1.0],
        ];
        let s = fit_series(&spec, &full_mask(3, 1), &orders).unwrap();
        assert!((s.slope[0] - 0.5).abs() < 1e-6 && (s.slope[1] - 0.2).abs() < 1e-6);
        assert!((f64::from(s.slope[2]) - 3.0 / 7.0).abs() < 1e-6);
        assert!(s.residual_rms[0].abs() < 1e-6);
        assert!((f64::from(s.residual_rms[2]) - (1.0f64 / 7.0).sqrt()).abs() < 1e-6);
        assert_eq!((s.fitted_pixels, s.nonlinear_pixels), (3, 1));
        assert!((s.nonlinear_share - 1.0 / 3.0).abs() < 1e-12);
        // Pooled over all nine readings: √((21/49) / 9).
        assert!((s.linearity_rms - (21.0f64 / 49.0 / 9.0).sqrt()).abs() < 1e-6);
        assert_eq!(s.fringe_value, None);
    }

    #[test]
    fn a_pixel_with_a_value_in_only_one_photo_is_not_fitted() {
        let spec = SeriesSpec::new(2, vec![10.0, 20.0], None, None).unwrap();
        let orders = vec![vec![1.0, f32::NAN], vec![2.0, 4.0]];
        let s = fit_series(&spec, &full_mask(2, 1), &orders).unwrap();
        assert_eq!(s.fitted_pixels, 1);
        assert!(s.slope[1].is_nan() && (s.slope[0] - 0.1).abs() < 1e-7);
    }

    #[test]
    fn a_series_spec_names_the_field_at_fault() {
        let field = |r: CoreResult<SeriesSpec>| match r {
            Err(CoreError::Invalid { field, .. }) => field,
            other => panic!("{other:?}"),
        };
        assert_eq!(field(SeriesSpec::new(1, vec![5.0], None, None)), "photo");
        assert_eq!(field(SeriesSpec::new(2, vec![5.0], None, None)), "loads_n");
        assert_eq!(
            field(SeriesSpec::new(2, vec![5.0, 0.0], None, None)),
            "loads_n"
        );
        assert_eq!(
            field(SeriesSpec::new(2, vec![5.0, f64::NAN], None, None)),
            "loads_n"
        );
        assert_eq!(
            field(SeriesSpec::new(2, vec![5.0, 6.0], Some(-40.0), None)),
            "disc_diameter_mm"
        );
        assert_eq!(
            field(SeriesSpec::new(2, vec![5.0, 6.0], None, Some(6.0))),
            "disc_diameter_mm"
        );
        assert_eq!(
            field(SeriesSpec::new(2, vec![5.0, 6.0], Some(40.0), Some(0.0))),
            "thickness_mm"
        );
    }
}
