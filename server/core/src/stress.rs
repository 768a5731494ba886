//! Stress from fringe orders, and the closed-form plane-stress fields the renderer draws.
//!
//! Units everywhere: stresses in MPa (N/mm²), lengths in mm, forces in N, moments in N·mm,
//! material fringe value f_σ in N/mm per fringe, fringe orders dimensionless.
//! Sign convention: tension positive. Coordinates of the closed-form fields: origin at the
//! centre of the disc or hole, x to the right, y down (like pixels), in mm.

use std::f64::consts::PI;

use serde::{Deserialize, Serialize};

use crate::error::{CoreError, CoreResult};
use crate::order_map::MapStatistics;

/// The caution printed beside every maximum stress and stress-concentration factor (the same
/// words as the README's caution).
pub const STRESS_CAUTION: &str = "stresses and K_t support, and do not replace, engineering \
    judgement: check them against independent evidence and follow local codes and licensed \
    engineering practice before any decision on a real part";

/// Checks that `value` is a finite number greater than zero; the error names `field`.
pub(crate) fn positive(field: &'static str, value: f64) -> CoreResult<f64> {
    if value.is_finite() && value > 0.0 {
        Ok(value)
    } else {
        Err(CoreError::invalid(
            field,
            format!("must be a positive number, got {value}"),
        ))
    }
}

/// Pure bending: edge fringe order N = 6M / (f_σ · d²); M in N·mm, d in mm, f_σ in N/mm.
pub fn pure_bending_edge_order(moment_n_mm: f64, depth_mm: f64, fringe_value_n_per_mm: f64) -> f64 {
    6.0 * moment_n_mm / (fringe_value_n_per_mm * depth_mm * depth_mm)
}

/// The stress-optic law of a transmission model: σ1 − σ2 = N · f_σ / h.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct StressOpticLaw {
    /// Material fringe value f_σ, N/mm per fringe.
    pub fringe_value_n_per_mm: f64,
    /// Model thickness h along the light path, mm.
    pub thickness_mm: f64,
}

impl StressOpticLaw {
    /// A law from a fringe value (N/mm per fringe) and a thickness (mm); both must be positive.
    pub fn new(fringe_value_n_per_mm: f64, thickness_mm: f64) -> CoreResult<Self> {
        Ok(StressOpticLaw {
            fringe_value_n_per_mm: positive("fringe_value_n_per_mm", fringe_value_n_per_mm)?,
            thickness_mm: positive("thickness_mm", thickness_mm)?,
        })
    }

    /// A law from optional fields, as requests and command lines give them: `None` when
    /// neither is given; an error naming the missing one when only one is.
    pub fn from_fields(
        fringe_value_n_per_mm: Option<f64>,
        thickness_mm: Option<f64>,
    ) -> CoreResult<Option<Self>> {
        match (fringe_value_n_per_mm, thickness_mm) {
            (None, None) => Ok(None),
            (Some(f), Some(h)) => Self::new(f, h).map(Some),
            (None, Some(_)) => Err(CoreError::invalid(
                "fringe_value_n_per_mm",
                "is required with thickness_mm",
            )),
            (Some(_), None) => Err(CoreError::invalid(
                "thickness_mm",
                "is required with fringe_value_n_per_mm",
            )),
        }
    }

    /// Principal stress difference σ1 − σ2 in MPa at fringe order `order`.
    pub fn stress_difference_mpa(&self, order: f64) -> f64 {
        order * self.fringe_value_n_per_mm / self.thickness_mm
    }

    /// Fringe order produced by a principal stress difference σ1 − σ2 (MPa).
    pub fn order(&self, stress_difference_mpa: f64) -> f64 {
        stress_difference_mpa * self.thickness_mm / self.fringe_value_n_per_mm
    }

    /// σ1 − σ2 in MPa of every pixel of an order array (row-major; NaN where the order is).
    pub fn stress_map_mpa(&self, orders: &[f32]) -> Vec<f32> {
        let per_order = (self.fringe_value_n_per_mm / self.thickness_mm) as f32;
        orders.iter().map(|n| n * per_order).collect()
    }

    /// The stress figures of a map with `statistics`.
    pub fn statistics(&self, statistics: &MapStatistics) -> StressStatistics {
        StressStatistics {
            fringe_value_n_per_mm: self.fringe_value_n_per_mm,
            thickness_mm: self.thickness_mm,
            min_stress_mpa: self.stress_difference_mpa(statistics.min_order),
            mean_stress_mpa: self.stress_difference_mpa(statistics.mean_order),
            max_stress_mpa: self.stress_difference_mpa(statistics.max_order),
            max_is_lower_bound: statistics.max_is_lower_bound(),
        }
    }

    /// Tangential stress at an unloaded free edge, MPa. There one principal stress is zero, so
    /// |σ_t| = N · f_σ / h; the sign (tension or compression) cannot be seen in the colours and
    /// is given by the caller.
    pub fn free_edge_stress_mpa(&self, order: f64, sign: EdgeSign) -> f64 {
        sign.factor() * self.stress_difference_mpa(order)
    }
}

/// σ1 − σ2 figures of an order map, MPa, over its valued pixels (NaN if none).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct StressStatistics {
    /// The material fringe value used, N/mm per fringe.
    pub fringe_value_n_per_mm: f64,
    /// The model thickness used, mm.
    pub thickness_mm: f64,
    /// Smallest σ1 − σ2 over valued pixels, MPa.
    pub min_stress_mpa: f64,
    /// Mean σ1 − σ2 over valued pixels, MPa.
    pub mean_stress_mpa: f64,
    /// Largest σ1 − σ2 over valued pixels, MPa; only a lower bound of the specimen's maximum
    /// when `max_is_lower_bound`.
    pub max_stress_mpa: f64,
    /// True when part of the specimen lies beyond the calibration's range: the true maximum
    /// may lie there, so `max_stress_mpa` is at least the maximum, not the maximum.
    pub max_is_lower_bound: bool,
}

/// How a report writes a maximum: `value` alone, or "at least `value`" followed by why when it
/// is only a lower bound (`unit` such as "MPa" or "fringes"; empty for a ratio such as K_t).
pub fn maximum_text(value: f64, unit: &str, lower_bound: bool) -> String {
    let value = format!("{value:.3} {unit}").trim_end().to_string();
    if lower_bound {
        format!("at least {value} (beyond-range pixels may hold higher values)")
    } else {
        value
    }
}

/// Whether a free edge is in tension or in compression.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum EdgeSign {
    /// σ_t > 0.
    Tension,
    /// σ_t < 0.
    Compression,
}

impl EdgeSign {
    fn factor(self) -> f64 {
        match self {
            EdgeSign::Tension => 1.0,
            EdgeSign::Compression => -1.0,
        }
    }
}

/// A birefringent coating on a part, seen in reflection (light crosses the coating twice).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Coating {
    /// Strain fringe value of the coating material f_ε, µm per fringe (λ / K).
    pub strain_fringe_value_um: f64,
    /// Coating thickness t_c, mm.
    pub thickness_mm: f64,
}

impl Coating {
    /// A coating from its strain fringe value (µm) and thickness (mm); both must be positive.
    pub fn new(strain_fringe_value_um: f64, thickness_mm: f64) -> CoreResult<Self> {
        Ok(Coating {
            strain_fringe_value_um: positive("strain_fringe_value_um", strain_fringe_value_um)?,
            thickness_mm: positive("thickness_mm", thickness_mm)?,
        })
    }

    /// Principal strain difference ε1 − ε2 (dimensionless, m/m) at fringe order `order`:
    /// N · f_ε / (2 t_c), the factor 2 for the double pass.
    pub fn strain_difference(&self, order: f64) -> f64 {
        order * self.strain_fringe_value_um * 1e-3 / (2.0 * self.thickness_mm)
    }
}

/// Stress-concentration factor K_t = σ_max / σ_nom (dimensionless). Fails unless σ_nom is a
/// non-zero finite number and σ_max finite.
pub fn stress_concentration_factor(
    max_stress_mpa: f64,
    nominal_stress_mpa: f64,
) -> CoreResult<f64> {
    if !(nominal_stress_mpa.is_finite() && nominal_stress_mpa != 0.0) {
        return Err(CoreError::invalid(
            "nominal_stress_mpa",
            format!("must be a non-zero number, got {nominal_stress_mpa}"),
        ));
    }
    if !max_stress_mpa.is_finite() {
        return Err(CoreError::invalid(
            "max_stress_mpa",
            format!("must be a finite number, got {max_stress_mpa}"),
        ));
    }
    Ok(max_stress_mpa / nominal_stress_mpa)
}

/// A plane stress state in x–y (MPa; x right, y down, tension positive).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PlaneStress {
    /// Normal stress σx, MPa.
    pub sx: f64,
    /// Normal stress σy, MPa.
    pub sy: f64,
    /// Shear stress τxy, MPa.
    pub txy: f64,
}

impl PlaneStress {
    /// Principal stress difference σ1 − σ2 ≥ 0, MPa.
    pub fn principal_difference(&self) -> f64 {
        (self.sx - self.sy).hypot(2.0 * self.txy)
    }

    /// Principal stresses (σ1, σ2) with σ1 ≥ σ2, MPa.
    pub fn principal(&self) -> (f64, f64) {
        let mean = 0.5 * (self.sx + self.sy);
        let half = 0.5 * self.principal_difference();
        (mean + half, mean - half)
    }

    /// Direction of σ1, radians from +x towards +y (down), in (−π/2, π/2].
    pub fn principal_angle(&self) -> f64 {
        0.5 * (2.0 * self.txy).atan2(self.sx - self.sy)
    }

    fn plus(self, other: PlaneStress) -> PlaneStress {
        PlaneStress {
            sx: self.sx + other.sx,
            sy: self.sy + other.sy,
            txy: self.txy + other.txy,
        }
    }
}

/// A disc in diametral compression: two equal and opposite loads P on the vertical diameter
/// (at the top and bottom of the disc). Closed form of Timoshenko & Goodier (Theory of
/// Elasticity, §41): two Flamant radial distributions plus a uniform biaxial tension
/// 2P/(πDh).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct DiscInCompression {
    /// Diameter D, mm.
    pub diameter_mm: f64,
    /// Thickness h, mm.
    pub thickness_mm: f64,
    /// Diametral load P, N.
    pub load_n: f64,
}

impl DiscInCompression {
    /// A disc from diameter (mm), thickness (mm) and load (N), all positive.
    pub fn new(diameter_mm: f64, thickness_mm: f64, load_n: f64) -> CoreResult<Self> {
        Ok(DiscInCompression {
            diameter_mm: positive("diameter_mm", diameter_mm)?,
            thickness_mm: positive("thickness_mm", thickness_mm)?,
            load_n: positive("load_n", load_n)?,
        })
    }

    /// Stress at (x, y) mm from the centre (x right, y down); points outside the disc give the
    /// analytic continuation. At the two load points the field is singular; points closer than
    /// 10⁻⁹ D to them are moved to that distance.
    pub fn stress_at(&self, x_mm: f64, y_mm: f64) -> PlaneStress {
        let (p, h, d) = (self.load_n, self.thickness_mm, self.diameter_mm);
        let r = 0.5 * d;
        let uniform = 2.0 * p / (PI * d * h);
        let mut s = PlaneStress {
            sx: uniform,
            sy: uniform,
            txy: 0.0,
        };
        // Each load point pushes into the disc along `inward`; the Flamant stress is purely
        // radial from the load point: σ_rr = −(2P/(πh)) · cos φ / ρ.
        for (y0, inward) in [(-r, 1.0), (r, -1.0)] {
            let (dx, dy) = (x_mm, y_mm - y0);
            let rho2 = (dx * dx + dy * dy).max((1e-9 * d).powi(2));
            let cos_over_rho = dy * inward / rho2;
            let radial = -2.0 * p / (PI * h) * cos_over_rho;
            s = s.plus(PlaneStress {
                sx: radial * dx * dx / rho2,
                sy: radial * dy * dy / rho2,
                txy: radial * dx * dy / rho2,
            });
        }
        s
    }

    /// σ1 − σ2 at the centre, 8P/(πDh), MPa.
    pub fn centre_stress_difference_mpa(&self) -> f64 {
        8.0 * self.load_n / (PI * self.diameter_mm * self.thickness_mm)
    }
}

/// An infinite plate with a circular hole under remote uniaxial stress S along y (vertical).
/// Closed form of Kirsch (1898): at the hole edge σ_θ = S(1 + 2 cos 2φ) with φ measured from x,
/// i.e. 3S beside the hole and −S above and below it (K_t = 3).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PlateWithHole {
    /// Hole radius a, mm.
    pub hole_radius_mm: f64,
    /// Remote stress S along y, MPa (tension positive).
    pub remote_stress_mpa: f64,
}

impl PlateWithHole {
    /// A plate from hole radius (mm, positive) and remote stress (MPa, finite, non-zero).
    pub fn new(hole_radius_mm: f64, remote_stress_mpa: f64) -> CoreResult<Self> {
        if !(remote_stress_mpa.is_finite() && remote_stress_mpa != 0.0) {
            return Err(CoreError::invalid(
                "remote_stress_mpa",
                format!("must be a non-zero number, got {remote_stress_mpa}"),
            ));
        }
        Ok(PlateWithHole {
            hole_radius_mm: positive("hole_radius_mm", hole_radius_mm)?,
            remote_stress_mpa,
        })
    }

    /// Stress at (x, y) mm from the hole centre (x right, y down). Inside the hole (r < a) the
    /// formula is evaluated at r = a along the same direction.
    pub fn stress_at(&self, x_mm: f64, y_mm: f64) -> PlaneStress {
        let (a, s) = (self.hole_radius_mm, self.remote_stress_mpa);
        let r = x_mm.hypot(y_mm).max(a);
        // Kirsch's frame has its first axis X' along the load (our y) and Y' along our x;
        // swapping axes is a reflection the field is symmetric under, so components map
        // σ_X'X' = σy, σ_Y'Y' = σx, τ_X'Y' = τxy. φ is the polar angle from X'.
        let phi = x_mm.atan2(y_mm);
        let (q2, q4) = ((a / r).powi(2), (a / r).powi(4));
        let (c2, s2) = ((2.0 * phi).cos(), (2.0 * phi).sin());
        let srr = 0.5 * s * (1.0 - q2) + 0.5 * s * (1.0 - 4.0 * q2 + 3.0 * q4) * c2;
        let stt = 0.5 * s * (1.0 + q2) - 0.5 * s * (1.0 + 3.0 * q4) * c2;
        let trt = -0.5 * s * (1.0 + 2.0 * q2 - 3.0 * q4) * s2;
        let (c, sn) = (phi.cos(), phi.sin());
        PlaneStress {
            sy: srr * c * c + stt * sn * sn - 2.0 * trt * sn * c,
            sx: srr * sn * sn + stt * c * c + 2.0 * trt * sn * c,
            txy: (srr - stt) * sn * c + trt * (c * c - sn * sn),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn far_from_the_hole_the_plate_carries_the_remote_stress_only() {
        let plate = PlateWithHole::new(1.0, 10.0).unwrap();
        let far = plate.stress_at(300.0, 400.0);
        assert!((far.sy - 10.0).abs() < 1e-3, "{far:?}");
        assert!(far.sx.abs() < 1e-3 && far.txy.abs() < 1e-3, "{far:?}");
    }

    fn map_statistics(beyond_range_share: f64) -> MapStatistics {
        MapStatistics {
            specimen_pixels: 100,
            valued_pixels: 90,
            beyond_range_share,
            unreliable_share: 0.0,
            min_order: 0.5,
            max_order: 3.0,
            mean_order: 1.0,
            mean_residual: 1.0,
            table_max_order: 4.4,
            ambiguous_colour: false,
        }
    }

    #[test]
    fn stress_statistics_are_the_order_figures_through_the_law_and_a_lower_bound_past_the_table() {
        // source: stress-optic law σ1 − σ2 = N·f_σ/h. Hand-worked: 10.5/6 = 1.75 MPa per fringe.
        let law = StressOpticLaw::new(10.5, 6.0).unwrap();
        let clean = law.statistics(&map_statistics(0.0));
        assert!((clean.max_stress_mpa - 5.25).abs() < 1e-12);
        assert!((clean.min_stress_mpa - 0.875).abs() < 1e-12);
        assert!(!clean.max_is_lower_bound);
        assert_eq!(maximum_text(5.25, "MPa", false), "5.250 MPa");
        let past = law.statistics(&map_statistics(0.01));
        assert!(past.max_is_lower_bound);
        assert!(maximum_text(5.25, "MPa", true).starts_with("at least 5.250 MPa"));
    }

    #[test]
    fn a_law_from_fields_needs_both_or_neither_and_names_the_missing_one() {
        assert_eq!(StressOpticLaw::from_fields(None, None).unwrap(), None);
        let e = StressOpticLaw::from_fields(None, Some(6.0)).unwrap_err();
        assert!(
            matches!(
                e,
                CoreError::Invalid {
                    field: "fringe_value_n_per_mm",
                    ..
                }
            ),
            "{e}"
        );
        let e = StressOpticLaw::from_fields(Some(10.5), None).unwrap_err();
        assert!(
            matches!(
                e,
                CoreError::Invalid {
                    field: "thickness_mm",
                    ..
                }
            ),
            "{e}"
        );
        let e = StressOpticLaw::from_fields(Some(10.5), Some(-1.0)).unwrap_err();
        assert!(
            matches!(
                e,
                CoreError::Invalid {
                    field: "thickness_mm",
                    ..
                }
            ),
            "{e}"
        );
    }

    #[test]
    fn invalid_inputs_name_their_field() {
        let e = StressOpticLaw::new(0.0, 5.0).unwrap_err().to_string();
        assert!(e.contains("fringe_value_n_per_mm"), "{e}");
        let e = DiscInCompression::new(40.0, f64::NAN, 1.0)
            .unwrap_err()
            .to_string();
        assert!(e.contains("thickness_mm"), "{e}");
        assert!(stress_concentration_factor(3.0, 0.0).is_err());
    }
}
