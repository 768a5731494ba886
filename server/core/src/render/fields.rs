//! Closed-form fringe-order fields in pixel-edge coordinates (x right, y down; pixel (x, y)
//! covers [x, x+1) × [y, y+1), its centre at (x + 0.5, y + 0.5)).
//!
//! Each field says, at any point, whether the specimen is there and, if so, its fringe order
//! and isoclinic angle. Points off the specimen (background, holes) are dark in a dark-field
//! polariscope; they are not zero order.

use std::f64::consts::FRAC_PI_2;

use serde::{Deserialize, Serialize};

use crate::error::{CoreError, CoreResult};
use crate::geometry::{PixelPoint, PixelRect};
use crate::stress::{positive, DiscInCompression, PlaneStress, PlateWithHole, StressOpticLaw};

/// The specimen at one point.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FieldSample {
    /// Fringe order N ≥ 0.
    pub order: f64,
    /// Direction of the larger principal stress σ1, radians from +x towards +y (down).
    pub isoclinic_rad: f64,
}

impl FieldSample {
    /// The specimen's optical fast axis, radians: for a material with a positive stress-optic
    /// coefficient (epoxy, polycarbonate) the slow axis follows σ1, so the fast axis lies along
    /// σ2, at right angles to the isoclinic.
    pub fn fast_axis_rad(&self) -> f64 {
        self.isoclinic_rad + FRAC_PI_2
    }

    fn from_stress(stress: PlaneStress, law: &StressOpticLaw) -> FieldSample {
        FieldSample {
            order: law.order(stress.principal_difference()),
            isoclinic_rad: stress.principal_angle(),
        }
    }
}

/// A fringe-order field over the image plane.
pub trait OrderField: Sync {
    /// The specimen at (x, y) in pixel-edge coordinates, or `None` off the specimen.
    fn sample(&self, x: f64, y: f64) -> Option<FieldSample>;
}

/// A beam in four-point bending, seen side on. Between the inner loads the moment is constant:
/// the order grows linearly from 0 on the mid-line to `edge_order` at the top and bottom
/// edges, with σ1 along the beam (θ = 0) in the tension half and across it in the compression
/// half. Between each inner load and its support the moment falls linearly to zero and the
/// parabolic shear stress of beam theory is added; past the supports the beam is unloaded.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct BendingBeamField {
    /// The whole beam in the photo, pixel-edge coordinates; `top` and `bottom` are its edges.
    pub beam: PixelRect,
    /// x of the outer supports (left, right), pixels.
    pub supports_x: (f64, f64),
    /// x of the inner loads (left, right), pixels: the constant-moment zone lies between.
    pub loads_x: (f64, f64),
    /// Fringe order at the top and bottom edges inside the constant-moment zone.
    pub edge_order: f64,
}

impl BendingBeamField {
    /// Checks beam.left ≤ supports.0 < loads.0 < loads.1 < supports.1 ≤ beam.right and a
    /// positive edge order.
    pub fn new(
        beam: PixelRect,
        supports_x: (f64, f64),
        loads_x: (f64, f64),
        edge_order: f64,
    ) -> CoreResult<Self> {
        beam.validate()?;
        positive("edge_order", edge_order)?;
        let xs = [
            beam.left,
            supports_x.0,
            loads_x.0,
            loads_x.1,
            supports_x.1,
            beam.right,
        ];
        let ordered = xs.windows(2).enumerate().all(|(i, w)| {
            w[0].is_finite()
                && w[1].is_finite()
                && if i == 0 || i == 4 {
                    w[0] <= w[1]
                } else {
                    w[0] < w[1]
                }
        });
        if !ordered {
            return Err(CoreError::invalid(
                "beam",
                "expected left edge ≤ left support < left load < right load < right support ≤ right edge",
            ));
        }
        Ok(BendingBeamField {
            beam,
            supports_x,
            loads_x,
            edge_order,
        })
    }

    /// The constant-moment zone between the inner loads, edge to edge (pixel-edge coordinates).
    pub fn constant_moment_zone(&self) -> PixelRect {
        PixelRect {
            left: self.loads_x.0,
            top: self.beam.top,
            right: self.loads_x.1,
            bottom: self.beam.bottom,
        }
    }

    /// Moment relative to the constant-moment zone, and its x-derivative (per pixel).
    fn moment(&self, x: f64) -> (f64, f64) {
        let ((s0, s1), (l0, l1)) = (self.supports_x, self.loads_x);
        if x < s0 || x > s1 {
            (0.0, 0.0)
        } else if x < l0 {
            ((x - s0) / (l0 - s0), 1.0 / (l0 - s0))
        } else if x > l1 {
            ((s1 - x) / (s1 - l1), -1.0 / (s1 - l1))
        } else {
            (1.0, 0.0)
        }
    }
}

impl OrderField for BendingBeamField {
    fn sample(&self, x: f64, y: f64) -> Option<FieldSample> {
        let b = &self.beam;
        if x < b.left || x >= b.right || y < b.top || y >= b.bottom {
            return None;
        }
        let half = 0.5 * b.height();
        let eta = (y - 0.5 * (b.top + b.bottom)) / half;
        let (m, slope) = self.moment(x);
        // Stresses relative to the edge stress of the zone; loads press on the top edge, so
        // the lower half is in tension. Shear from equilibrium: ∂τ/∂y = −∂σx/∂x.
        let stress = PlaneStress {
            sx: m * eta,
            sy: 0.0,
            txy: 0.5 * slope * half * (1.0 - eta * eta),
        };
        Some(FieldSample {
            order: self.edge_order * stress.principal_difference(),
            isoclinic_rad: stress.principal_angle(),
        })
    }
}

/// A disc in diametral compression (loads at its top and bottom), drawn as a circle.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct DiscField {
    /// Disc centre, pixel-edge coordinates.
    pub centre: PixelPoint,
    /// Disc radius, pixels.
    pub radius_px: f64,
    /// The physical disc and load.
    pub disc: DiscInCompression,
    /// Fringe value and thickness (the disc's).
    pub law: StressOpticLaw,
}

impl DiscField {
    /// A disc of `radius_px` pixels at `centre`, made of a material with fringe value
    /// `fringe_value_n_per_mm` (N/mm per fringe).
    pub fn new(
        centre: PixelPoint,
        radius_px: f64,
        disc: DiscInCompression,
        fringe_value_n_per_mm: f64,
    ) -> CoreResult<Self> {
        Ok(DiscField {
            centre,
            radius_px: positive("radius_px", radius_px)?,
            disc,
            law: StressOpticLaw::new(fringe_value_n_per_mm, disc.thickness_mm)?,
        })
    }
}

impl OrderField for DiscField {
    fn sample(&self, x: f64, y: f64) -> Option<FieldSample> {
        let (dx, dy) = (x - self.centre.x, y - self.centre.y);
        if dx * dx + dy * dy >= self.radius_px * self.radius_px {
            return None;
        }
        let mm_per_px = 0.5 * self.disc.diameter_mm / self.radius_px;
        let stress = self.disc.stress_at(dx * mm_per_px, dy * mm_per_px);
        Some(FieldSample::from_stress(stress, &self.law))
    }
}

/// A wide plate with a circular hole, loaded in tension along y; the plate fills the image.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct HoleField {
    /// Hole centre, pixel-edge coordinates.
    pub centre: PixelPoint,
    /// Hole radius, pixels.
    pub radius_px: f64,
    /// The physical plate and load.
    pub plate: PlateWithHole,
    /// Fringe value and plate thickness.
    pub law: StressOpticLaw,
}

impl HoleField {
    /// A hole of `radius_px` pixels at `centre` in `plate`, with the given stress-optic law.
    pub fn new(
        centre: PixelPoint,
        radius_px: f64,
        plate: PlateWithHole,
        law: StressOpticLaw,
    ) -> CoreResult<Self> {
        Ok(HoleField {
            centre,
            radius_px: positive("radius_px", radius_px)?,
            plate,
            law,
        })
    }
}

impl OrderField for HoleField {
    fn sample(&self, x: f64, y: f64) -> Option<FieldSample> {
        let (dx, dy) = (x - self.centre.x, y - self.centre.y);
        if dx * dx + dy * dy < self.radius_px * self.radius_px {
            return None;
        }
        let mm_per_px = self.plate.hole_radius_mm / self.radius_px;
        let stress = self.plate.stress_at(dx * mm_per_px, dy * mm_per_px);
        Some(FieldSample::from_stress(stress, &self.law))
    }
}

/// A uniform field: the same order and isoclinic everywhere inside `area` (a plate in uniform
/// tension, photographed away from its grips).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct UniformField {
    /// The plate in the photo, pixel-edge coordinates.
    pub area: PixelRect,
    /// Fringe order everywhere on the plate.
    pub order: f64,
    /// Direction of σ1, radians from +x towards +y.
    pub isoclinic_rad: f64,
}

impl OrderField for UniformField {
    fn sample(&self, x: f64, y: f64) -> Option<FieldSample> {
        let a = &self.area;
        (x >= a.left && x < a.right && y >= a.top && y < a.bottom).then_some(FieldSample {
            order: self.order,
            isoclinic_rad: self.isoclinic_rad,
        })
    }
}

/// A thick ring under internal pressure. Closed form of Lamé (Timoshenko & Goodier, Theory of
/// Elasticity, §28): σ_θ − σ_r = 2p·a²b² / ((b² − a²)·r²), so the order falls as 1/r² from
/// `inner_order` at the bore; σ1 is circumferential.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct RingField {
    /// Ring centre, pixel-edge coordinates.
    pub centre: PixelPoint,
    /// Bore radius a, pixels.
    pub inner_radius_px: f64,
    /// Outer radius b, pixels.
    pub outer_radius_px: f64,
    /// Fringe order at the bore.
    pub inner_order: f64,
}

impl OrderField for RingField {
    fn sample(&self, x: f64, y: f64) -> Option<FieldSample> {
        let (dx, dy) = (x - self.centre.x, y - self.centre.y);
        let r2 = dx * dx + dy * dy;
        let (a, b) = (self.inner_radius_px, self.outer_radius_px);
        if r2 < a * a || r2 >= b * b {
            return None;
        }
        Some(FieldSample {
            order: self.inner_order * a * a / r2,
            isoclinic_rad: dy.atan2(dx) + FRAC_PI_2,
        })
    }
}

/// A test field for a notch root: the Kirsch field of [`HoleField`] kept only right of the
/// vertical line through the hole centre, so the plate's left edge carries a semicircular
/// notch whose root (beside the hole, order 3 × the remote one) is the peak. Not the exact
/// edge-notch solution (the cut line carries Kirsch's stresses, and the exact peak factor is
/// about 3.07, Peterson's Stress Concentration Factors, from memory); it has the features a
/// mapper meets at a fillet or notch: a free edge, a steep rise to a peak, a gentle far field.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct EdgeNotchField(pub HoleField);

impl OrderField for EdgeNotchField {
    fn sample(&self, x: f64, y: f64) -> Option<FieldSample> {
        if x < self.0.centre.x {
            return None;
        }
        self.0.sample(x, y)
    }
}
