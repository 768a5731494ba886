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

/// Elastic constants of the part under a coating: σ1 − σ2 = E/(1 + ν) · (ε1 − ε2) in plane
/// stress on its surface.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct PartElasticity {
    /// Young's modulus E of the part, MPa.
    pub youngs_modulus_mpa: f64,
    /// Poisson's ratio ν of the part (0 ≤ ν < 0.5).
    pub poisson_ratio: f64,
}

impl PartElasticity {
    /// Elastic constants from E (MPa, positive) and ν (0 ≤ ν < 0.5); errors name the field.
    pub fn new(youngs_modulus_mpa: f64, poisson_ratio: f64) -> CoreResult<Self> {
        if !(poisson_ratio.is_finite() && (0.0..0.5).contains(&poisson_ratio)) {
            return Err(CoreError::invalid(
                "poisson_ratio",
                format!("must be at least 0 and below 0.5, got {poisson_ratio}"),
            ));
        }
        Ok(PartElasticity {
            youngs_modulus_mpa: positive("youngs_modulus_mpa", youngs_modulus_mpa)?,
            poisson_ratio,
        })
    }

    /// σ1 − σ2 in MPa of a principal strain difference ε1 − ε2 (m/m) on a free surface.
    pub fn stress_difference_mpa(&self, strain_difference: f64) -> f64 {
        self.youngs_modulus_mpa / (1.0 + self.poisson_ratio) * strain_difference
    }
}

/// A coating and the part it is bonded to.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct CoatedPart {
    /// The coating (strain fringe value, thickness).
    pub coating: Coating,
    /// The part's elastic constants.
    pub part: PartElasticity,
}

/// What the photo shows, and so how a fringe order N becomes σ1 − σ2. Every kind is linear in
/// N, so each amounts to one [`StressOpticLaw`] ([`Specimen::law`]) that the stress map, its
/// files, the boundary stress and the report all go through.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Specimen {
    /// A transmission model: σ1 − σ2 = N·f_σ/h.
    Transmission(StressOpticLaw),
    /// A frozen-stress slice, read like a thin transmission model: f_σ is the material's
    /// fringe value at its critical (stress-freezing) temperature and h the slice's
    /// thickness, so σ1 − σ2 = N·f_σ/h is the model's stress at that temperature.
    Slice(StressOpticLaw),
    /// A birefringent coating seen in reflection: ε1 − ε2 = N·f_ε/(2 t_c) and the part's
    /// σ1 − σ2 = E/(1 + ν)·(ε1 − ε2).
    Coating(CoatedPart),
}

/// The kinds of [`Specimen`], as requests and command lines name them.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SpecimenKind {
    /// A transmission model (the default).
    #[default]
    Transmission,
    /// A birefringent coating in reflection.
    Coating,
    /// A frozen-stress slice.
    Slice,
}

impl SpecimenKind {
    /// Every kind, in the order help texts list them.
    pub const ALL: [SpecimenKind; 3] = [
        SpecimenKind::Transmission,
        SpecimenKind::Coating,
        SpecimenKind::Slice,
    ];

    /// The kind's name: `transmission`, `coating` or `slice`.
    pub fn name(self) -> &'static str {
        match self {
            SpecimenKind::Transmission => "transmission",
            SpecimenKind::Coating => "coating",
            SpecimenKind::Slice => "slice",
        }
    }

    /// Parses a kind's name; an unknown one is refused naming `specimen`.
    pub fn from_name(name: &str) -> CoreResult<Self> {
        SpecimenKind::ALL
            .into_iter()
            .find(|k| k.name() == name)
            .ok_or_else(|| {
                let shown: String = name.chars().take(40).collect();
                CoreError::invalid(
                    "specimen",
                    format!("{shown:?} is not one of transmission, coating, slice"),
                )
            })
    }
}

/// A specimen's inputs as requests and command lines give them, each optional; see
/// [`SpecimenFields::specimen`].
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct SpecimenFields {
    /// The kind (default transmission).
    pub specimen: Option<SpecimenKind>,
    /// Material fringe value f_σ, N/mm per fringe (of a slice: at the critical temperature).
    pub fringe_value_n_per_mm: Option<f64>,
    /// Model thickness h along the light path, mm (of a slice: the slice's thickness).
    pub thickness_mm: Option<f64>,
    /// Strain fringe value of a coating f_ε, µm per fringe.
    pub strain_fringe_value_um: Option<f64>,
    /// Coating thickness t_c, mm.
    pub coating_thickness_mm: Option<f64>,
    /// Young's modulus of the coated part E, MPa.
    pub youngs_modulus_mpa: Option<f64>,
    /// Poisson's ratio of the coated part ν.
    pub poisson_ratio: Option<f64>,
}

impl SpecimenFields {
    /// The specimen these fields describe: `None` when no field is given; a transmission model
    /// or slice from `fringe_value_n_per_mm` and `thickness_mm` (both or neither); a coating
    /// from all four coating fields. A missing field, a field of another kind or a value out
    /// of range is refused naming the field.
    pub fn specimen(&self) -> CoreResult<Option<Specimen>> {
        let coating_fields = [
            ("strain_fringe_value_um", self.strain_fringe_value_um),
            ("coating_thickness_mm", self.coating_thickness_mm),
            ("youngs_modulus_mpa", self.youngs_modulus_mpa),
            ("poisson_ratio", self.poisson_ratio),
        ];
        let law_fields = [
            ("fringe_value_n_per_mm", self.fringe_value_n_per_mm),
            ("thickness_mm", self.thickness_mm),
        ];
        let kind = self.specimen.unwrap_or_else(|| {
            if coating_fields.iter().any(|(_, v)| v.is_some()) {
                SpecimenKind::Coating
            } else {
                SpecimenKind::Transmission
            }
        });
        let refuse_others = |others: &[(&'static str, Option<f64>)]| -> CoreResult<()> {
            match others.iter().find(|(_, v)| v.is_some()) {
                Some((field, _)) => Err(CoreError::invalid(
                    field,
                    format!("does not apply to a {} specimen", kind.name()),
                )),
                None => Ok(()),
            }
        };
        match kind {
            SpecimenKind::Transmission | SpecimenKind::Slice => {
                refuse_others(&coating_fields)?;
                let law =
                    StressOpticLaw::from_fields(self.fringe_value_n_per_mm, self.thickness_mm)?;
                match (law, kind) {
                    (None, SpecimenKind::Slice) => Err(CoreError::invalid(
                        "fringe_value_n_per_mm",
                        "is required (at the critical temperature, with thickness_mm) for a slice",
                    )),
                    (law, SpecimenKind::Slice) => Ok(law.map(Specimen::Slice)),
                    (law, _) => Ok(law.map(Specimen::Transmission)),
                }
            }
            SpecimenKind::Coating => {
                refuse_others(&law_fields)?;
                let need = |(field, value): (&'static str, Option<f64>)| {
                    value.ok_or_else(|| CoreError::invalid(field, "is required for a coating"))
                };
                let [f, t, e, nu] = coating_fields;
                Ok(Some(Specimen::Coating(CoatedPart {
                    coating: Coating::new(need(f)?, need(t)?)
                        .map_err(|e| rename_field(e, "thickness_mm", "coating_thickness_mm"))?,
                    part: PartElasticity::new(need(e)?, need(nu)?)?,
                })))
            }
        }
    }
}

/// The stress inputs a calibration was made for (see `CalibrationTable::stress_defaults`):
/// material fringe value f_σ (N/mm per fringe) and thickness h (mm), each when known.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize)]
pub struct StressDefaults {
    /// Material fringe value f_σ, N/mm per fringe.
    pub fringe_value_n_per_mm: Option<f64>,
    /// Model thickness h, mm.
    pub thickness_mm: Option<f64>,
}

/// Where a stress input came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum InputOrigin {
    /// Given with the request or on the command line.
    Given,
    /// Not given: the value the calibration was made for.
    Calibration,
}

impl InputOrigin {
    /// `given` or `calibration`.
    pub fn name(self) -> &'static str {
        match self {
            InputOrigin::Given => "given",
            InputOrigin::Calibration => "calibration",
        }
    }
}

/// Where a transmission model's f_σ and h came from; `None` where the input is not used.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize)]
pub struct InputOrigins {
    /// Origin of `fringe_value_n_per_mm`.
    pub fringe_value_n_per_mm: Option<InputOrigin>,
    /// Origin of `thickness_mm`.
    pub thickness_mm: Option<InputOrigin>,
}

impl InputOrigins {
    /// True when some input was taken from the calibration.
    pub fn any_from_calibration(&self) -> bool {
        [self.fringe_value_n_per_mm, self.thickness_mm].contains(&Some(InputOrigin::Calibration))
    }

    /// One line per input taken from the calibration, as the CLI and the report print them.
    pub fn lines(&self) -> Vec<String> {
        let from = |origin: Option<InputOrigin>, what: &str| {
            (origin == Some(InputOrigin::Calibration))
                .then(|| format!("{what}: not given, the calibration's value"))
        };
        [
            from(self.fringe_value_n_per_mm, "f_sigma"),
            from(self.thickness_mm, "h"),
        ]
        .into_iter()
        .flatten()
        .collect()
    }
}

impl SpecimenFields {
    /// These fields with a transmission model's missing f_σ and h taken from `defaults` (the
    /// calibration's), and where each came from. Nothing is filled for a slice (its f_σ is the
    /// critical temperature's) or a coating; when neither f_σ nor h is given, both are filled
    /// or neither, so a calibration that knows one of them alone does not ask for stresses.
    pub fn with_defaults(self, defaults: StressDefaults) -> (SpecimenFields, InputOrigins) {
        let coating = [
            self.strain_fringe_value_um,
            self.coating_thickness_mm,
            self.youngs_modulus_mpa,
            self.poisson_ratio,
        ]
        .iter()
        .any(Option::is_some);
        let transmission = match self.specimen {
            Some(kind) => kind == SpecimenKind::Transmission,
            None => !coating,
        };
        let given = |v: Option<f64>| v.map(|_| InputOrigin::Given);
        let mut fields = self;
        let mut origins = InputOrigins {
            fringe_value_n_per_mm: given(self.fringe_value_n_per_mm),
            thickness_mm: given(self.thickness_mm),
        };
        let none_given = self.fringe_value_n_per_mm.is_none() && self.thickness_mm.is_none();
        let both_stored =
            defaults.fringe_value_n_per_mm.is_some() && defaults.thickness_mm.is_some();
        if transmission && (!none_given || both_stored) {
            let fill = |value: &mut Option<f64>, stored: Option<f64>, origin: &mut _| {
                if value.is_none() && stored.is_some() {
                    *value = stored;
                    *origin = Some(InputOrigin::Calibration);
                }
            };
            fill(
                &mut fields.fringe_value_n_per_mm,
                defaults.fringe_value_n_per_mm,
                &mut origins.fringe_value_n_per_mm,
            );
            fill(
                &mut fields.thickness_mm,
                defaults.thickness_mm,
                &mut origins.thickness_mm,
            );
        }
        (fields, origins)
    }

    /// The specimen these fields describe ([`SpecimenFields::specimen`]) once missing inputs
    /// are taken from `defaults` ([`SpecimenFields::with_defaults`]), and where they came from.
    pub fn specimen_with(
        self,
        defaults: StressDefaults,
    ) -> CoreResult<(Option<Specimen>, InputOrigins)> {
        let (fields, origins) = self.with_defaults(defaults);
        Ok((fields.specimen()?, origins))
    }
}

/// `error` with its field `from` named `to` instead (other errors unchanged).
fn rename_field(error: CoreError, from: &str, to: &'static str) -> CoreError {
    match error {
        CoreError::Invalid { field, message } if field == from => {
            CoreError::Invalid { field: to, message }
        }
        other => other,
    }
}

impl Specimen {
    /// The specimen's kind.
    pub fn kind(&self) -> SpecimenKind {
        match self {
            Specimen::Transmission(_) => SpecimenKind::Transmission,
            Specimen::Slice(_) => SpecimenKind::Slice,
            Specimen::Coating(_) => SpecimenKind::Coating,
        }
    }

    /// The stress-optic law this specimen amounts to: σ1 − σ2 = N·f/h. For a coating,
    /// f = E·f_ε/(2(1 + ν)) (f_ε in mm) and h = t_c, so that N·f/h = E/(1 + ν)·N·f_ε/(2 t_c).
    pub fn law(&self) -> StressOpticLaw {
        match *self {
            Specimen::Transmission(law) | Specimen::Slice(law) => law,
            Specimen::Coating(CoatedPart { coating, part }) => StressOpticLaw {
                fringe_value_n_per_mm: part
                    .stress_difference_mpa(coating.strain_fringe_value_um * 1e-3 / 2.0),
                thickness_mm: coating.thickness_mm,
            },
        }
    }

    /// Principal strain difference ε1 − ε2 per fringe, µε, of a coating; `None` otherwise.
    pub fn microstrain_per_fringe(&self) -> Option<f64> {
        match self {
            Specimen::Coating(c) => Some(c.coating.strain_difference(1.0) * 1e6),
            _ => None,
        }
    }

    /// The stress (and, for a coating, strain) figures of a map with `statistics`.
    pub fn statistics(&self, statistics: &MapStatistics) -> SpecimenStatistics {
        let strain = self.microstrain_per_fringe().map(|k| StrainStatistics {
            min_strain_microstrain: statistics.min_order * k,
            mean_strain_microstrain: statistics.mean_order * k,
            max_strain_microstrain: statistics.max_order * k,
            max_is_lower_bound: statistics.max_is_lower_bound(),
        });
        let law = self.law();
        SpecimenStatistics {
            specimen: *self,
            stress_per_fringe_mpa: law.stress_difference_mpa(1.0),
            stress: law.statistics(statistics),
            strain,
        }
    }

    /// The inputs in words, one line each with units (as the CLI and the report print them).
    pub fn input_lines(&self) -> Vec<String> {
        match self {
            Specimen::Transmission(law) => vec![
                "specimen: transmission model, sigma1 - sigma2 = N f_sigma / h".into(),
                format!(
                    "material fringe value f_sigma: {} N/mm per fringe",
                    law.fringe_value_n_per_mm
                ),
                format!("model thickness h: {} mm", law.thickness_mm),
            ],
            Specimen::Slice(law) => vec![
                "specimen: frozen-stress slice, sigma1 - sigma2 = N f_sigma / h".into(),
                format!(
                    "fringe value at the critical temperature f_sigma: {} N/mm per fringe",
                    law.fringe_value_n_per_mm
                ),
                format!("slice thickness h: {} mm", law.thickness_mm),
            ],
            Specimen::Coating(c) => vec![
                "specimen: coating in reflection, eps1 - eps2 = N f_eps / (2 t_c), \
                 sigma1 - sigma2 = E / (1 + nu) (eps1 - eps2)"
                    .into(),
                format!(
                    "strain fringe value f_eps: {} um per fringe",
                    c.coating.strain_fringe_value_um
                ),
                format!("coating thickness t_c: {} mm", c.coating.thickness_mm),
                format!(
                    "part: E {} MPa, nu {}",
                    c.part.youngs_modulus_mpa, c.part.poisson_ratio
                ),
            ],
        }
    }
}

/// ε1 − ε2 figures of a coating's map, µε, over its valued pixels (NaN if none).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct StrainStatistics {
    /// Smallest ε1 − ε2, µε.
    pub min_strain_microstrain: f64,
    /// Mean ε1 − ε2, µε.
    pub mean_strain_microstrain: f64,
    /// Largest ε1 − ε2, µε; a lower bound when `max_is_lower_bound`.
    pub max_strain_microstrain: f64,
    /// True when beyond-range pixels may hold a higher maximum.
    pub max_is_lower_bound: bool,
}

/// The figures of a map through a [`Specimen`].
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct SpecimenStatistics {
    /// The specimen and its inputs (`kind` and its fields).
    pub specimen: Specimen,
    /// σ1 − σ2 per fringe, MPa.
    pub stress_per_fringe_mpa: f64,
    /// σ1 − σ2 figures, MPa (for a coating, the part's; `fringe_value_n_per_mm` and
    /// `thickness_mm` then are the equivalent law's, see [`Specimen::law`]).
    #[serde(flatten)]
    pub stress: StressStatistics,
    /// ε1 − ε2 figures of a coating, µε.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub strain: Option<StrainStatistics>,
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
