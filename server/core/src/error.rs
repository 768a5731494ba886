//! The measurement core's one error type.

use thiserror::Error;

/// Everything the measurement core can refuse. Messages name the offending input so that the
/// CLI and the HTTP layer can pass them on unchanged.
#[derive(Debug, Error)]
pub enum CoreError {
    /// The photo or mask bytes could not be decoded (truncated, forged, unknown format).
    #[error("image could not be decoded: {0}")]
    Decode(String),
    /// The image is larger than the configured limits (checked before any pixel is allocated).
    #[error("image is too large: {0}")]
    TooLarge(String),
    /// A caller-supplied value is out of range or inconsistent (names the field).
    #[error("invalid {field}: {message}")]
    Invalid {
        /// The field or argument at fault, as the caller spelled it.
        field: &'static str,
        /// What is wrong with it.
        message: String,
    },
    /// A calibration table that fails validation.
    #[error("invalid calibration table: {0}")]
    Table(String),
    /// Encoding an output (PNG, NPY, CSV) failed.
    #[error("could not encode output: {0}")]
    Encode(String),
}

impl CoreError {
    /// Shorthand for [`CoreError::Invalid`].
    pub fn invalid(field: &'static str, message: impl Into<String>) -> Self {
        CoreError::Invalid {
            field,
            message: message.into(),
        }
    }
}

/// Result alias of the measurement core.
pub type CoreResult<T> = Result<T, CoreError>;
