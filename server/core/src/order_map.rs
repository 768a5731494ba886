//! Fringe-order maps: every specimen pixel's colour matched to a calibration table under a
//! continuity constraint.

use serde::{Deserialize, Serialize};

use crate::calibration::CalibrationTable;
use crate::colour::Photo;
use crate::error::{CoreError, CoreResult};
use crate::exposure::ExposureCorrection;
use crate::geometry::{Mask, PixelPoint};

/// Per-pixel flags of an [`OrderMap`] (bit set; 0 = a good value).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
pub struct PixelFlags(pub u8);

impl PixelFlags {
    /// Not part of the specimen (mask is zero there).
    pub const OUTSIDE_MASK: u8 = 1;
    /// The order exceeds the calibration table's range (e.g. near contact points).
    pub const BEYOND_RANGE: u8 = 2;
    /// Too steep or too washed out to be sure; no value is given.
    pub const UNRELIABLE: u8 = 4;

    /// Whether any of `bits` is set.
    pub fn has(self, bits: u8) -> bool {
        self.0 & bits != 0
    }
}

/// A point of known fringe order supplied by the user (pixel-edge coordinates).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct OrderHint {
    /// Where, in pixel-edge coordinates.
    #[serde(flatten)]
    pub at: PixelPoint,
    /// Known fringe order there.
    pub order: f64,
}

/// Options of [`map_orders`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct MapOptions {
    /// Fit and apply an exposure / white-balance / vignetting correction (on by default).
    pub exposure_compensation: bool,
    /// Largest order to consider, fringes; `None` = the table's maximum.
    pub max_order: Option<f64>,
    /// Largest plausible change of order between neighbouring pixels, fringes per pixel.
    pub max_gradient: f64,
    /// Points of known order.
    pub hints: Vec<OrderHint>,
}

impl Default for MapOptions {
    fn default() -> Self {
        MapOptions {
            exposure_compensation: true,
            max_order: None,
            max_gradient: 0.2,
            hints: Vec::new(),
        }
    }
}

/// Most hints one map accepts (more than anyone places by hand; common practice, no source).
pub const MAX_HINTS: usize = 1000;

/// The smallest span of the table a map must be able to read, fringes (four steps of the
/// matcher's search grid).
const MIN_READABLE_SPAN: f64 = 4.0 * crate::matcher::SEARCH_STEP;

impl MapOptions {
    /// The highest order a map with these options can read from `table`: the table's last
    /// order, or `max_order` where that is lower.
    pub fn top_order(&self, table: &CalibrationTable) -> f64 {
        self.max_order
            .map_or(table.max_order(), |m| m.min(table.max_order()))
    }

    /// Checks every number against its range and against `table` (hints at orders the map can
    /// read, at most [`MAX_HINTS`] of them); messages name the field. Hint positions are
    /// checked against the photo by [`MapOptions::check_hints_inside`].
    pub fn validate(&self, table: &CalibrationTable) -> CoreResult<()> {
        if let Some(m) = self.max_order {
            if !(m.is_finite() && m > 0.0) {
                return Err(CoreError::invalid(
                    "max_order",
                    format!("must be a positive number, got {m}"),
                ));
            }
        }
        let top = self.top_order(table);
        if top < MIN_READABLE_SPAN {
            return Err(CoreError::invalid(
                "max_order",
                format!("{top} leaves too little of the table to match against"),
            ));
        }
        if !(self.max_gradient.is_finite() && self.max_gradient > 0.0 && self.max_gradient <= 1.0) {
            return Err(CoreError::invalid(
                "max_gradient",
                format!(
                    "must lie in (0, 1] fringe per pixel, got {}",
                    self.max_gradient
                ),
            ));
        }
        if self.hints.len() > MAX_HINTS {
            return Err(CoreError::invalid(
                "hints",
                format!(
                    "{} hints given; at most {MAX_HINTS} are accepted",
                    self.hints.len()
                ),
            ));
        }
        for (i, h) in self.hints.iter().enumerate() {
            if !(h.order.is_finite() && h.order >= 0.0) {
                return Err(CoreError::invalid(
                    "hints",
                    format!("hint {i} has order {}", h.order),
                ));
            }
            if h.order > top {
                return Err(CoreError::invalid(
                    "hints",
                    format!(
                        "hint {i} has order {}, above {top:.2}, the highest order this map can \
                         read (the calibration's last order, or max_order if lower)",
                        h.order
                    ),
                ));
            }
        }
        Ok(())
    }

    /// Checks that every hint lies on a photo of `width` × `height` pixels.
    pub fn check_hints_inside(&self, width: u32, height: u32) -> CoreResult<()> {
        for (i, h) in self.hints.iter().enumerate() {
            if h.at.pixel(width, height).is_none() {
                return Err(CoreError::invalid(
                    "hints",
                    format!(
                        "hint {i} at ({}, {}) lies outside the {width}×{height} photo",
                        h.at.x, h.at.y
                    ),
                ));
            }
        }
        Ok(())
    }
}

/// Summary figures of an [`OrderMap`].
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct MapStatistics {
    /// Pixels inside the mask.
    pub specimen_pixels: u64,
    /// Pixels inside the mask with a value.
    pub valued_pixels: u64,
    /// Share of specimen pixels flagged beyond range.
    pub beyond_range_share: f64,
    /// Share of specimen pixels flagged unreliable.
    pub unreliable_share: f64,
    /// Smallest, largest and mean order over valued pixels (NaN if none).
    pub min_order: f64,
    /// See `min_order`.
    pub max_order: f64,
    /// See `min_order`.
    pub mean_order: f64,
    /// Mean CIEDE2000 (ΔE00) between valued pixels and their matched table colour (maps
    /// stored before it was CIEDE2000 hold ΔE\*ab until they expire).
    pub mean_residual: f64,
    /// Highest order the map could read, fringes: the table's last order, or
    /// [`MapOptions::max_order`] where that is lower (NaN for results stored before it was
    /// recorded).
    pub table_max_order: f64,
    /// The photo shows one colour that orders more than half a fringe apart explain about
    /// equally well at plausible exposures: no pixel got a value (a hint settles it).
    #[serde(default)]
    pub ambiguous_colour: bool,
}

/// Orders within this many fringes of [`MapStatistics::table_max_order`] may be aliases of
/// orders past the table, whose colours repeat in paler form.
pub const NEAR_TABLE_TOP: f64 = 1.0;

impl MapStatistics {
    /// Whether `max_order` is only a lower bound of the specimen's largest order: true when
    /// part of the specimen lies beyond the calibration's range, where the true maximum may be.
    pub fn max_is_lower_bound(&self) -> bool {
        self.beyond_range_share > 0.0
    }

    /// A caution when the photo's one colour is ambiguous, when part of the specimen lies past
    /// the calibration's range or when the orders come within [`NEAR_TABLE_TOP`] of its last
    /// order: there the stress may be higher than read.
    pub fn caution(&self) -> Option<String> {
        if self.ambiguous_colour {
            return Some(
                "The specimen shows a single colour that orders more than half a fringe apart \
                 explain about equally well at plausible exposures, so no pixel was given a \
                 value. Give a known order at one point (a hint) to settle it."
                    .to_string(),
            );
        }
        let beyond = self.beyond_range_share > 0.0;
        let near_top = self.max_order > self.table_max_order - NEAR_TABLE_TOP;
        let top = self.table_max_order;
        match (beyond, near_top) {
            (false, false) => None,
            (true, _) => Some(format!(
                "{} of the specimen lies beyond this calibration's last order ({top:.2}): \
                 the stress there is higher than the map can tell, and values up to a fringe \
                 below that order next to those zones may be aliases of higher orders. \
                 Calibrate to a higher edge order before judging them.",
                if self.beyond_range_share < 0.001 {
                    "Less than 0.1 %".to_string()
                } else {
                    format!("{:.1} %", 100.0 * self.beyond_range_share)
                }
            )),
            (false, true) => Some(format!(
                "Orders reach {:.2}, within a fringe of this calibration's last order \
                 ({top:.2}): near contacts and load points such values may be aliases of \
                 higher orders. Calibrate to a higher edge order before judging them.",
                self.max_order
            )),
        }
    }
}

/// Result of [`map_orders`]: row-major per-pixel arrays, pixel (x, y) at `y * width + x`.
#[derive(Debug, Clone)]
pub struct OrderMap {
    /// Width in pixels.
    pub width: u32,
    /// Height in pixels.
    pub height: u32,
    /// Fringe order; NaN where there is no value (outside the mask, beyond range, unreliable).
    pub order: Vec<f32>,
    /// CIEDE2000 (ΔE00) between the (corrected) pixel colour and the table colour at its order;
    /// NaN where there is no value.
    pub residual: Vec<f32>,
    /// Ambiguity margin: how much higher the aggregated cost of the best alternative more than
    /// half a fringe away is (ΔE units per scan direction; capped at 25; NaN outside the mask).
    pub margin: Vec<f32>,
    /// Flags per pixel.
    pub flags: Vec<PixelFlags>,
    /// Standard uncertainty (1 σ) of the order, fringes; NaN where there is no value.
    pub uncertainty: Vec<f32>,
    /// The exposure correction that was applied.
    pub exposure: ExposureCorrection,
    /// Summary figures.
    pub statistics: MapStatistics,
}

/// Maps every specimen pixel of `photo` to a fringe order using `table`.
pub fn map_orders(
    photo: &Photo,
    table: &CalibrationTable,
    mask: Option<&Mask>,
    options: &MapOptions,
) -> CoreResult<OrderMap> {
    options.validate(table)?;
    options.check_hints_inside(photo.width(), photo.height())?;
    if let Some(m) = mask {
        if m.width() != photo.width() || m.height() != photo.height() {
            return Err(CoreError::invalid(
                "mask",
                format!(
                    "mask is {}×{} but the photo is {}×{}",
                    m.width(),
                    m.height(),
                    photo.width(),
                    photo.height()
                ),
            ));
        }
    }
    crate::matcher::solve(photo, table, mask, options)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn statistics(beyond_range_share: f64, max_order: f64) -> MapStatistics {
        MapStatistics {
            specimen_pixels: 1000,
            valued_pixels: 900,
            beyond_range_share,
            unreliable_share: 0.0,
            min_order: 0.0,
            max_order,
            mean_order: 1.0,
            mean_residual: 1.0,
            table_max_order: 4.4,
            ambiguous_colour: false,
        }
    }

    #[test]
    fn a_hint_above_the_highest_readable_order_is_refused_naming_hints() {
        use crate::render::{
            camera::CameraModel, light::LightSource, polariscope::QuarterWavePlates,
        };
        let table = crate::render::rendered_table(
            LightSource::Daylight,
            CameraModel::Colorimetric,
            QuarterWavePlates::Ideal,
            3.0,
            0.01,
            crate::CalibrationMetadata {
                name: "hint range".into(),
                ..Default::default()
            },
        )
        .unwrap();
        let photo = Photo::from_srgb8(8, 8, vec![palette::Srgb::new(90, 90, 90); 64]).unwrap();
        let hinted = |order| MapOptions {
            hints: vec![OrderHint {
                at: PixelPoint { x: 4.5, y: 4.5 },
                order,
            }],
            ..MapOptions::default()
        };
        let capped = MapOptions {
            max_order: Some(2.0),
            ..hinted(2.5)
        };
        for options in [hinted(7.0), hinted(3.02), capped] {
            let err = map_orders(&photo, &table, None, &options).unwrap_err();
            assert!(
                matches!(err, CoreError::Invalid { field: "hints", .. }),
                "{err}"
            );
        }
        assert!(map_orders(&photo, &table, None, &hinted(3.0)).is_ok());
    }

    #[test]
    fn a_range_caution_is_given_past_the_table_or_within_a_fringe_of_its_top_and_not_otherwise() {
        assert_eq!(statistics(0.0, 3.3).caution(), None);
        let near = statistics(0.0, 3.5).caution().expect("near the top");
        assert!(
            near.contains("within a fringe") && near.contains("4.40"),
            "{near}"
        );
        let past = statistics(0.012, 4.3).caution().expect("past the table");
        assert!(past.contains("1.2 %") && past.contains("beyond"), "{past}");
        let speck = statistics(0.0002, 2.0)
            .caution()
            .expect("a small zone past it");
        assert!(speck.starts_with("Less than 0.1 %"), "{speck}");
        // Results stored before the table's top was recorded: only the beyond-range share counts.
        let old = MapStatistics {
            table_max_order: f64::NAN,
            ..statistics(0.0, 4.3)
        };
        assert_eq!(old.caution(), None);
    }

    #[test]
    fn an_ambiguous_colour_is_cautioned_before_anything_else() {
        let ambiguous = MapStatistics {
            ambiguous_colour: true,
            valued_pixels: 0,
            ..statistics(0.0, f64::NAN)
        };
        let text = ambiguous.caution().expect("a caution");
        assert!(
            text.contains("single colour") && text.contains("hint"),
            "{text}"
        );
    }
}
