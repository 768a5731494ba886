//! isotint's pure measurement core: colour, calibration tables, fringe-order maps, stress and
//! spectral rendering. No async runtime, database or HTTP code lives here.
//!
//! Pixel convention everywhere: x to the right, y down; pixel (x, y) covers [x, x+1) × [y, y+1).

pub mod beam;
pub mod boundary;
pub mod calibration;
pub mod colour;
pub mod compact;
pub mod comparison;
pub mod error;
pub mod export;
pub mod exposure;
pub mod geometry;
mod matcher;
pub mod order_map;
pub mod render;
pub mod report;
pub mod series;
pub mod specimen;
pub mod stress;

pub use calibration::{CalibrationMetadata, CalibrationTable, TableEntry, TableSource};
pub use colour::{DecodeLimits, Lab, Photo};
pub use error::{CoreError, CoreResult};
pub use geometry::{Mask, PixelPoint, PixelRect, Scale};
pub use order_map::{map_orders, MapOptions, OrderHint, OrderMap, PixelFlags};
