//! Calibration tables: fringe order → mean CIELAB colour, in a JSON format of our own.
//!
//! A table is a uniform grid of fringe orders from 0 to `max_order` in steps of `order_step`.
//! Each entry holds the mean colour (CIELAB, D65), its per-channel standard deviation and the
//! number of pixels behind it. Tables are immutable values: build one, validate it, share it.

use serde::{Deserialize, Serialize};
use time::OffsetDateTime;

use crate::colour::Lab;
use crate::error::{CoreError, CoreResult};
use crate::geometry::PixelRect;
use crate::stress::StressDefaults;

/// The `format_version` this build writes and reads.
pub const FORMAT_VERSION: u32 = 1;

/// The `format` tag that identifies our calibration files.
pub const FORMAT_TAG: &str = "isotint-calibration";

/// Finest and coarsest accepted `order_step`, fringes.
pub const ORDER_STEP_RANGE: (f64, f64) = (0.001, 0.1);

/// Largest accepted `max_order`, fringes (past ≈ 5 orders white-light colours wash out).
pub const MAX_TABLE_ORDER: f64 = 12.0;

/// Most characters `metadata.notes` may hold.
pub const MAX_NOTES_CHARS: usize = 4000;

/// Who, what and how: descriptive metadata of a calibration.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
#[serde(deny_unknown_fields)]
pub struct CalibrationMetadata {
    /// Short human name, 1–200 characters.
    pub name: String,
    /// Model or coating material, e.g. "cast epoxy, batch 7".
    #[serde(default)]
    pub material: String,
    /// Specimen (or coating) thickness in millimetres, if known.
    #[serde(default)]
    pub thickness_mm: Option<f64>,
    /// Light source, e.g. "halogen 3200 K", "fluorescent tube".
    #[serde(default)]
    pub light_source: String,
    /// Camera and exposure settings.
    #[serde(default)]
    pub camera: String,
    /// Free text.
    #[serde(default)]
    pub notes: String,
}

/// Where a table came from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum TableSource {
    /// Measured on a photo of a beam in four-point bending.
    BeamPhoto {
        /// Photo width, pixels.
        photo_width: u32,
        /// Photo height, pixels.
        photo_height: u32,
        /// Constant-moment zone used, pixel-edge coordinates (after edge refinement).
        region: PixelRect,
        /// Fringe order at the beam edges.
        edge_order: f64,
        /// Mean CIEDE2000 between row colours and the smoothed table.
        residual_de2000: f64,
        /// Material fringe value f_σ the table was made for, N/mm per fringe: implied by the
        /// beam's load (6M/(N_edge·d²)) when the edge order came with a moment and depth, or
        /// given with the load or beside the edge order (absent otherwise and in older tables).
        /// With `metadata.thickness_mm` it is the default of the stress inputs.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        fringe_value_n_per_mm: Option<f64>,
    },
    /// Computed by the spectral renderer for a light source and camera.
    Rendered {
        /// Light source in the renderer's words (`LightSource::description`); tables written
        /// before hold its short name (`halogen`, …), which `LightSource::from_name` still reads.
        light: String,
        /// Camera model in the renderer's words (`CameraModel::description`); tables written
        /// before hold its short name (`gaussian-sensor`, …).
        camera: String,
        /// Wavelength (nm) at which the quarter-wave plates are exact; absent for ideal plates
        /// (exact at every wavelength). Tables written before this field was optional say 0
        /// for ideal plates, which reads as absent.
        #[serde(
            default,
            skip_serializing_if = "Option::is_none",
            deserialize_with = "design_wavelength"
        )]
        plate_design_nm: Option<f64>,
    },
}

/// Reads `plate_design_nm`, taking the 0 that older tables wrote for ideal plates as absent.
fn design_wavelength<'de, D: serde::Deserializer<'de>>(d: D) -> Result<Option<f64>, D::Error> {
    Ok(Option::<f64>::deserialize(d)?.filter(|nm| *nm != 0.0))
}

/// One grid point of a table.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TableEntry {
    /// Fringe order (dimensionless).
    pub order: f64,
    /// Mean colour, CIELAB (D65) as [L*, a*, b*].
    pub lab: [f32; 3],
    /// Standard deviation of the pixels behind the mean, per channel [L*, a*, b*].
    pub spread: [f32; 3],
    /// Number of pixels behind the mean (0 for rendered tables).
    pub samples: u32,
}

impl TableEntry {
    /// The mean colour as a palette value.
    pub fn colour(&self) -> Lab {
        Lab::new(self.lab[0], self.lab[1], self.lab[2])
    }
}

/// A calibration table as stored in `calibration-sets/` and exchanged over the API.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CalibrationTable {
    /// Always [`FORMAT_TAG`].
    pub format: String,
    /// Always [`FORMAT_VERSION`] for files this build writes.
    pub format_version: u32,
    /// Descriptive metadata.
    pub metadata: CalibrationMetadata,
    /// Creation time, RFC 3339, UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
    /// Order spacing of the grid, fringes.
    pub order_step: f64,
    /// Where the table came from.
    pub source: TableSource,
    /// Grid entries, orders 0, step, 2·step, … up to the largest calibrated order.
    pub entries: Vec<TableEntry>,
}

impl CalibrationTable {
    /// Builds and validates a table from its parts, stamping the current time.
    pub fn new(
        metadata: CalibrationMetadata,
        order_step: f64,
        source: TableSource,
        entries: Vec<TableEntry>,
    ) -> CoreResult<Self> {
        let table = CalibrationTable {
            format: FORMAT_TAG.to_string(),
            format_version: FORMAT_VERSION,
            metadata,
            created_at: OffsetDateTime::now_utc(),
            order_step,
            source,
            entries,
        };
        table.validate()?;
        Ok(table)
    }

    /// Parses and validates a JSON table.
    pub fn from_json(text: &[u8]) -> CoreResult<Self> {
        let table: CalibrationTable = serde_json::from_slice(text)
            .map_err(|e| CoreError::Table(format!("not a calibration file: {e}")))?;
        table.validate()?;
        Ok(table)
    }

    /// Pretty JSON of the table.
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("a calibration table always serialises")
    }

    /// The stress inputs this table was made for: its material fringe value (a beam table's
    /// `source.fringe_value_n_per_mm`) and `metadata.thickness_mm`, each when known.
    pub fn stress_defaults(&self) -> StressDefaults {
        let fringe_value_n_per_mm = match self.source {
            TableSource::BeamPhoto {
                fringe_value_n_per_mm,
                ..
            } => fringe_value_n_per_mm,
            TableSource::Rendered { .. } => None,
        };
        StressDefaults {
            fringe_value_n_per_mm,
            thickness_mm: self.metadata.thickness_mm,
        }
    }

    /// Largest calibrated order, fringes.
    pub fn max_order(&self) -> f64 {
        self.entries.last().map_or(0.0, |e| e.order)
    }

    /// Mean colour at any order inside the table, linearly interpolated between grid points.
    pub fn colour_at(&self, order: f64) -> Lab {
        let pos = (order / self.order_step).clamp(0.0, (self.entries.len() - 1) as f64);
        // pos ≥ 0: truncation is floor (and avoids a library call in the per-pixel path).
        let i = (pos as usize).min(self.entries.len() - 2);
        let t = (pos - i as f64) as f32;
        let (a, b) = (self.entries[i].lab, self.entries[i + 1].lab);
        Lab::new(
            a[0] + t * (b[0] - a[0]),
            a[1] + t * (b[1] - a[1]),
            a[2] + t * (b[2] - a[2]),
        )
    }

    /// Checks every rule of the format; the message names the first broken one.
    pub fn validate(&self) -> CoreResult<()> {
        let fail = |m: String| Err(CoreError::Table(m));
        if self.format != FORMAT_TAG {
            return fail(format!(
                "format must be {FORMAT_TAG:?}, got {:?}",
                self.format
            ));
        }
        if self.format_version != FORMAT_VERSION {
            return fail(format!(
                "format_version {} is not supported (this build reads {FORMAT_VERSION})",
                self.format_version
            ));
        }
        let name = self.metadata.name.trim();
        if name.is_empty() || self.metadata.name.chars().count() > 200 {
            return fail("metadata.name must have 1 to 200 characters".into());
        }
        if self.metadata.name.chars().any(char::is_control) {
            return fail("metadata.name must not contain control characters".into());
        }
        for (field, text) in [
            ("material", &self.metadata.material),
            ("light_source", &self.metadata.light_source),
            ("camera", &self.metadata.camera),
        ] {
            if text.chars().count() > 200 {
                return fail(format!("metadata.{field} is longer than 200 characters"));
            }
        }
        if self.metadata.notes.chars().count() > MAX_NOTES_CHARS {
            return fail(format!(
                "metadata.notes is longer than {MAX_NOTES_CHARS} characters"
            ));
        }
        if let Some(t) = self.metadata.thickness_mm {
            if !(t.is_finite() && t > 0.0) {
                return fail(format!("metadata.thickness_mm must be positive, got {t}"));
            }
        }
        let (lo, hi) = ORDER_STEP_RANGE;
        if !(self.order_step.is_finite() && self.order_step >= lo && self.order_step <= hi) {
            return fail(format!(
                "order_step must lie in [{lo}, {hi}] fringes, got {}",
                self.order_step
            ));
        }
        if self.entries.len() < 3 {
            return fail(format!(
                "needs at least 3 entries, has {}",
                self.entries.len()
            ));
        }
        for (i, e) in self.entries.iter().enumerate() {
            let expected = i as f64 * self.order_step;
            if !e.order.is_finite() || (e.order - expected).abs() > self.order_step * 1e-3 {
                return fail(format!(
                    "entry {i} has order {}; entries must run 0, {step}, {}, … in steps of {step}",
                    e.order,
                    2.0 * self.order_step,
                    step = self.order_step
                ));
            }
            if e.lab.iter().chain(&e.spread).any(|v| !v.is_finite()) {
                return fail(format!(
                    "entry {i} (order {:.3}) has a non-finite value",
                    e.order
                ));
            }
            if !(0.0..=100.0).contains(&e.lab[0]) {
                return fail(format!("entry {i} has L* = {} outside 0–100", e.lab[0]));
            }
            if e.lab[1].abs() > 200.0 || e.lab[2].abs() > 200.0 {
                return fail(format!("entry {i} has a* or b* beyond ±200"));
            }
            if e.spread.iter().any(|s| *s < 0.0) {
                return fail(format!("entry {i} has a negative spread"));
            }
        }
        if self.max_order() > MAX_TABLE_ORDER {
            return fail(format!(
                "max order {} exceeds {MAX_TABLE_ORDER} fringes",
                self.max_order()
            ));
        }
        if let TableSource::BeamPhoto {
            edge_order,
            residual_de2000,
            region,
            fringe_value_n_per_mm,
            ..
        } = &self.source
        {
            region
                .validate()
                .map_err(|e| CoreError::Table(format!("source.{e}")))?;
            if !(edge_order.is_finite() && *edge_order > 0.0 && residual_de2000.is_finite()) {
                return fail("source.edge_order and source.residual_de2000 must be finite, edge_order positive".into());
            }
            if fringe_value_n_per_mm.is_some_and(|f| !(f.is_finite() && f > 0.0)) {
                return fail("source.fringe_value_n_per_mm must be a positive number".into());
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> CalibrationTable {
        let entries = (0..5)
            .map(|i| TableEntry {
                order: i as f64 * 0.01,
                lab: [10.0 * i as f32, 1.0, -1.0],
                spread: [0.5; 3],
                samples: 12,
            })
            .collect();
        CalibrationTable::new(
            CalibrationMetadata {
                name: "test strip".into(),
                ..Default::default()
            },
            0.01,
            TableSource::Rendered {
                light: "d65".into(),
                camera: "cie1931".into(),
                plate_design_nm: Some(560.0),
            },
            entries,
        )
        .unwrap()
    }

    #[test]
    fn a_table_round_trips_through_json() {
        let t = sample();
        let back = CalibrationTable::from_json(t.to_json().as_bytes()).unwrap();
        assert_eq!(t, back);
    }

    #[test]
    fn rendered_tables_for_ideal_plates_carry_no_design_wavelength_and_older_zeros_read_as_none() {
        let mut t = sample();
        t.source = TableSource::Rendered {
            light: "d65".into(),
            camera: "cie1931".into(),
            plate_design_nm: None,
        };
        let json = t.to_json();
        assert!(!json.contains("plate_design_nm"), "{json}");
        assert_eq!(CalibrationTable::from_json(json.as_bytes()).unwrap(), t);
        let older = json.replace(
            "\"camera\": \"cie1931\"",
            "\"camera\": \"cie1931\",\n    \"plate_design_nm\": 0.0",
        );
        assert!(older.contains("plate_design_nm"), "{older}");
        assert_eq!(CalibrationTable::from_json(older.as_bytes()).unwrap(), t);
    }

    #[test]
    fn a_table_with_a_gap_in_its_orders_is_refused_with_the_entry_named() {
        let mut t = sample();
        t.entries[2].order = 0.05;
        let msg = t.validate().unwrap_err().to_string();
        assert!(msg.contains("entry 2"), "{msg}");
    }

    #[test]
    fn an_unknown_version_is_refused() {
        let mut t = sample();
        t.format_version = 99;
        assert!(t
            .validate()
            .unwrap_err()
            .to_string()
            .contains("format_version 99"));
    }

    #[test]
    fn colours_between_grid_points_are_interpolated() {
        let t = sample();
        assert!((t.colour_at(0.015).l - 15.0).abs() < 1e-4);
        assert!((t.colour_at(1.0).l - 40.0).abs() < 1e-4);
    }
}
