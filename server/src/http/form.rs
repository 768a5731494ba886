//! Parsing request input at the edge: multipart forms, JSON parts and path ids, with errors
//! that name the field.

use axum::body::Bytes;
use axum::extract::multipart::MultipartRejection;
use axum::extract::Multipart;
use serde::de::DeserializeOwned;

use isotint_core::DecodeLimits;

use super::error::ApiError;
use super::jobs::JobSize;
use crate::domain::{shorten, Id, IdKind};

/// The parts of a multipart form, by name.
#[derive(Debug)]
pub struct Form {
    parts: Vec<(String, Bytes)>,
    /// The file name each file part came with, by part name (the first of a repeated part).
    file_names: Vec<(String, String)>,
    expected: &'static [&'static str],
}

impl Form {
    /// Reads every part of `multipart`. Parts not in `expected` and repeated parts are refused.
    pub async fn read(
        multipart: Result<Multipart, MultipartRejection>,
        expected: &'static [&'static str],
    ) -> Result<Form, ApiError> {
        Form::read_repeating(multipart, expected, &[]).await
    }

    /// Reads every part of `multipart`, in order. Parts not in `expected` are refused, and
    /// repeated parts unless named in `repeatable`.
    pub async fn read_repeating(
        multipart: Result<Multipart, MultipartRejection>,
        expected: &'static [&'static str],
        repeatable: &[&str],
    ) -> Result<Form, ApiError> {
        let mut multipart = multipart?;
        let mut parts: Vec<(String, Bytes)> = Vec::new();
        let mut file_names: Vec<(String, String)> = Vec::new();
        while let Some(field) = multipart.next_field().await? {
            let name = field.name().unwrap_or_default().to_string();
            if !expected.contains(&name.as_str()) {
                return Err(ApiError::bad_request(
                    "unknown_field",
                    format!(
                        "unknown multipart field {:?}; expected {}",
                        shorten(&name, 40),
                        expected.join(", ")
                    ),
                ));
            }
            if !repeatable.contains(&name.as_str()) && parts.iter().any(|(n, _)| *n == name) {
                return Err(ApiError::bad_request(
                    "repeated_field",
                    format!("multipart field {name:?} appears more than once"),
                ));
            }
            if let Some(file_name) = field.file_name() {
                if !file_names.iter().any(|(n, _)| *n == name) {
                    file_names.push((name.clone(), file_name.to_string()));
                }
            }
            let bytes = field.bytes().await?;
            parts.push((name, bytes));
        }
        Ok(Form {
            parts,
            file_names,
            expected,
        })
    }

    /// What a job on `photo` (taken from this form) needs: its memory estimate from the photo's
    /// header, this request's bytes included, and the bytes held while it waits.
    pub fn job_size(&self, photo: &[u8], limits: &DecodeLimits) -> Result<JobSize, ApiError> {
        let held = photo.len() + self.parts.iter().map(|(_, b)| b.len()).sum::<usize>();
        Ok(JobSize {
            memory_bytes: crate::pipeline::job_memory(photo, held, limits)?,
            waiting_bytes: held as u64,
        })
    }

    /// The file name the part `name` came with (its `filename`), if it had one.
    pub fn file_name(&self, name: &str) -> Option<&str> {
        self.file_names
            .iter()
            .find(|(n, _)| n == name)
            .map(|(_, f)| f.as_str())
    }

    /// Removes and returns the part `name`, if present; the other parts keep their order (a
    /// series' photos are matched to its loads by it).
    pub fn take(&mut self, name: &str) -> Option<Bytes> {
        let i = self.parts.iter().position(|(n, _)| n == name)?;
        Some(self.parts.remove(i).1)
    }

    /// Removes and returns every part `name`, in the order they came.
    pub fn take_all(&mut self, name: &str) -> Vec<Bytes> {
        let (taken, kept) = std::mem::take(&mut self.parts)
            .into_iter()
            .partition(|(n, _)| n == name);
        self.parts = kept;
        taken.into_iter().map(|(_, bytes)| bytes).collect()
    }

    /// Removes the part `name` and parses it as an id; 400 naming it if missing, 422 naming it
    /// if it is not one.
    pub fn require_id<K: IdKind>(&mut self, name: &'static str) -> Result<Id<K>, ApiError> {
        let bytes = self.require(name)?;
        let text = std::str::from_utf8(&bytes)
            .map_err(|_| isotint_core::CoreError::invalid(name, "is not UTF-8 text"))?;
        Ok(text.parse()?)
    }

    /// Removes and returns the part `name`; 400 naming it if missing.
    pub fn require(&mut self, name: &'static str) -> Result<Bytes, ApiError> {
        self.take(name).ok_or_else(|| {
            ApiError::bad_request(
                "missing_field",
                format!(
                    "multipart field {name:?} is missing (fields: {})",
                    self.expected.join(", ")
                ),
            )
        })
    }

    /// Removes the part `name` and parses it as UTF-8 text; 400 if it is not.
    pub fn text(&mut self, name: &'static str) -> Result<Option<String>, ApiError> {
        self.take(name)
            .map(|b| {
                String::from_utf8(b.to_vec()).map_err(|_| {
                    ApiError::bad_request(
                        "invalid_text",
                        format!("field {name:?} is not UTF-8 text"),
                    )
                })
            })
            .transpose()
    }
}

/// Parses an id from a URL path; a malformed one is simply not found.
pub fn path_id<K: IdKind>(text: &str) -> Result<Id<K>, ApiError> {
    text.parse()
        .map_err(|e: isotint_core::CoreError| ApiError::NotFound(e.to_string()))
}

/// Parses `bytes` as the JSON of `what`: syntax errors answer 400, values of the wrong shape
/// (missing or unknown fields, wrong types) 422; both name the problem and where it is.
pub fn parse_json<T: DeserializeOwned>(what: &str, bytes: &[u8]) -> Result<T, ApiError> {
    let mut de = serde_json::Deserializer::from_slice(bytes);
    let value = serde_path_to_error::deserialize(&mut de).map_err(|e| {
        let path = e.path().to_string();
        let place = if path == "." {
            what.to_string()
        } else {
            format!("{what}.{path}")
        };
        json_error(&place, e.into_inner())
    })?;
    de.end().map_err(|e| json_error(what, e))?;
    Ok(value)
}

fn json_error(place: &str, e: serde_json::Error) -> ApiError {
    let message = format!("{place}: {e}");
    match e.classify() {
        serde_json::error::Category::Data => ApiError::unprocessable("invalid_json", message),
        _ => ApiError::bad_request("malformed_json", message),
    }
}
