//! Temporary nearest-colour matcher (to be replaced).
use crate::calibration::CalibrationTable;
use crate::colour::Photo;
use crate::error::CoreResult;
use crate::geometry::Mask;
use crate::order_map::{MapOptions, OrderMap};

pub(crate) fn solve(_photo: &Photo, _table: &CalibrationTable, _mask: Option<&Mask>, _options: &MapOptions) -> CoreResult<OrderMap> {
    Err(crate::error::CoreError::invalid("matcher", "not built yet"))
}
