//! The API's one error type. Every client mistake answers 4xx with
//! `{"error": {"code": "...", "message": "..."}}` naming the problem; internal failures answer
//! an opaque 500 and are logged.

use std::time::Duration;

use axum::extract::multipart::MultipartError;
use axum::extract::multipart::MultipartRejection;
use axum::extract::rejection::{BytesRejection, QueryRejection};
use axum::extract::{Request, State};
use axum::http::{header, HeaderValue, Method, StatusCode, Uri};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};
use axum::Json;
use isotint_core::CoreError;
use serde::Serialize;
use utoipa::ToSchema;

use super::jobs::RETRY_AFTER_S;
use super::metrics::DatabaseFailure;
use crate::domain::CalibrationId;
use crate::storage::StorageError;

/// An API failure; converts into the JSON error response.
#[derive(Debug)]
pub enum ApiError {
    /// 400: the request is malformed (missing field, bad JSON, bad query).
    BadRequest {
        /// Stable machine-readable code.
        code: &'static str,
        /// What is wrong, naming the field.
        message: String,
    },
    /// 401 with `WWW-Authenticate: Bearer`: no token, or one the service does not know (or
    /// that was revoked).
    Unauthorized {
        /// Stable machine-readable code.
        code: &'static str,
        /// What is wrong with the credentials.
        message: String,
    },
    /// 403: the token's role may not do this.
    Forbidden(String),
    /// 404: no such resource or route.
    NotFound(String),
    /// 405: the route exists but not with this method.
    MethodNotAllowed(String),
    /// 408: the request body stopped arriving (paused longer than the body time-out).
    BodyStalled,
    /// 409: the request contradicts stored state.
    Conflict(String),
    /// 409 (`conflict`) with `latest`: a correction of a calibration that is corrected
    /// already; the latest version of its chain is the one to correct.
    Superseded {
        /// What is wrong, naming the calibrations.
        message: String,
        /// The latest version of the chain of corrections.
        latest: CalibrationId,
    },
    /// 410: the resource existed but has expired.
    Gone(String),
    /// 413: the body or an image is too large.
    TooLarge(String),
    /// 415: wrong content type.
    UnsupportedMediaType(String),
    /// 422: well-formed but invalid values.
    Unprocessable {
        /// Stable machine-readable code.
        code: &'static str,
        /// What is wrong, naming the field.
        message: String,
    },
    /// 503: the service cannot take the request now (admission wait or queue memory past its
    /// limit, the download cap reached); retry after the given seconds.
    Busy {
        /// What is full, and when to retry.
        message: String,
        /// Seconds to wait before retrying.
        retry_after_s: u64,
    },
    /// The database failed: 503 with `Retry-After` when it stays busy, an opaque 500
    /// otherwise. The detail is logged and the kind counted in the metrics.
    Database(StorageError),
    /// 504: the request took longer than the time limit.
    TimedOut(Duration),
    /// 500: a bug or an infrastructure failure; the detail is logged, not returned.
    Internal(String),
}

/// JSON body of every error response.
#[derive(Debug, Serialize, ToSchema)]
pub struct ErrorBody {
    /// The error.
    pub error: ErrorDetail,
}

/// Code and message of an error response.
#[derive(Debug, Serialize, ToSchema)]
pub struct ErrorDetail {
    /// Stable machine-readable code, e.g. `missing_field`, `image_too_large`.
    pub code: String,
    /// Human-readable explanation naming the offending input.
    pub message: String,
    /// With a correction of a calibration that is corrected already: the id of the latest
    /// version of its chain of corrections, the one to correct instead.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schema(value_type = Option<String>, format = Uuid)]
    pub latest: Option<CalibrationId>,
}

impl ApiError {
    /// 400 with a code and message.
    pub fn bad_request(code: &'static str, message: impl Into<String>) -> Self {
        ApiError::BadRequest {
            code,
            message: message.into(),
        }
    }

    /// 422 with a code and message.
    pub fn unprocessable(code: &'static str, message: impl Into<String>) -> Self {
        ApiError::Unprocessable {
            code,
            message: message.into(),
        }
    }

    fn parts(&self) -> (StatusCode, &'static str, String) {
        match self {
            ApiError::BadRequest { code, message } => {
                (StatusCode::BAD_REQUEST, code, message.clone())
            }
            ApiError::Unauthorized { code, message } => {
                (StatusCode::UNAUTHORIZED, code, message.clone())
            }
            ApiError::Forbidden(m) => (StatusCode::FORBIDDEN, "forbidden", m.clone()),
            ApiError::NotFound(m) => (StatusCode::NOT_FOUND, "not_found", m.clone()),
            ApiError::MethodNotAllowed(m) => (
                StatusCode::METHOD_NOT_ALLOWED,
                "method_not_allowed",
                m.clone(),
            ),
            ApiError::BodyStalled => (
                StatusCode::REQUEST_TIMEOUT,
                "body_timeout",
                "the request body stopped arriving before it was complete".to_string(),
            ),
            ApiError::Conflict(m) | ApiError::Superseded { message: m, .. } => {
                (StatusCode::CONFLICT, "conflict", m.clone())
            }
            ApiError::Gone(m) => (StatusCode::GONE, "expired", m.clone()),
            ApiError::TooLarge(m) => (StatusCode::PAYLOAD_TOO_LARGE, "too_large", m.clone()),
            ApiError::UnsupportedMediaType(m) => (
                StatusCode::UNSUPPORTED_MEDIA_TYPE,
                "unsupported_media_type",
                m.clone(),
            ),
            ApiError::Unprocessable { code, message } => {
                (StatusCode::UNPROCESSABLE_ENTITY, code, message.clone())
            }
            ApiError::Busy { message, .. } => {
                (StatusCode::SERVICE_UNAVAILABLE, "busy", message.clone())
            }
            ApiError::TimedOut(limit) => (
                StatusCode::GATEWAY_TIMEOUT,
                "timeout",
                format!(
                    "the request exceeded the time limit of {}",
                    humantime::format_duration(*limit)
                ),
            ),
            ApiError::Database(StorageError::Busy(_)) => (
                StatusCode::SERVICE_UNAVAILABLE,
                "unavailable",
                format!("the database is busy; retry in {RETRY_AFTER_S} s"),
            ),
            ApiError::Internal(_) | ApiError::Database(_) => (
                StatusCode::INTERNAL_SERVER_ERROR,
                "internal",
                "internal error; it has been logged".to_string(),
            ),
        }
    }
}

impl IntoResponse for ApiError {
    fn into_response(self) -> Response {
        match &self {
            ApiError::Internal(detail) => tracing::error!(error = %detail, "internal error"),
            ApiError::Database(e @ StorageError::Busy(_)) => {
                tracing::warn!(error = %e, "database busy")
            }
            ApiError::Database(e) => tracing::error!(error = %e, "database failure"),
            _ => {}
        }
        let (status, code, message) = self.parts();
        let body = ErrorBody {
            error: ErrorDetail {
                code: code.to_string(),
                message,
                latest: match self {
                    ApiError::Superseded { latest, .. } => Some(latest),
                    _ => None,
                },
            },
        };
        let mut response = (status, Json(body)).into_response();
        if matches!(self, ApiError::Unauthorized { .. }) {
            response
                .headers_mut()
                .insert(header::WWW_AUTHENTICATE, HeaderValue::from_static("Bearer"));
        }
        if let ApiError::Database(e) = &self {
            response.extensions_mut().insert(DatabaseFailure(e.kind()));
        }
        let retry_after_s = match self {
            ApiError::Busy { retry_after_s, .. } => Some(retry_after_s),
            ApiError::Database(StorageError::Busy(_)) => Some(RETRY_AFTER_S),
            _ => None,
        };
        if let Some(seconds) = retry_after_s {
            response
                .headers_mut()
                .insert(header::RETRY_AFTER, HeaderValue::from(seconds));
        }
        response
    }
}

impl From<CoreError> for ApiError {
    fn from(e: CoreError) -> Self {
        let message = e.to_string();
        match e {
            CoreError::Decode(_) => ApiError::unprocessable("undecodable_image", message),
            CoreError::TooLarge(_) => ApiError::TooLarge(message),
            CoreError::Invalid { .. } => ApiError::unprocessable("invalid_input", message),
            CoreError::Table(_) => ApiError::unprocessable("invalid_calibration", message),
            CoreError::Encode(_) => ApiError::Internal(message),
        }
    }
}

impl From<StorageError> for ApiError {
    fn from(e: StorageError) -> Self {
        match e {
            StorageError::NotFound { .. } => ApiError::NotFound(e.to_string()),
            StorageError::Conflict(m) => ApiError::Conflict(m),
            StorageError::Superseded { latest, .. } => ApiError::Superseded {
                message: e.to_string(),
                latest,
            },
            failure => ApiError::Database(failure),
        }
    }
}

impl From<MultipartRejection> for ApiError {
    fn from(e: MultipartRejection) -> Self {
        ApiError::UnsupportedMediaType(format!(
            "expected a multipart/form-data body: {}",
            e.body_text()
        ))
    }
}

/// Whether a body-reading error comes from the body time-out (`RequestBodyTimeoutLayer`).
fn stalled(e: &(dyn std::error::Error + 'static)) -> bool {
    let mut cause = Some(e);
    while let Some(c) = cause {
        if c.is::<tower_http::timeout::TimeoutError>() {
            return true;
        }
        cause = c.source();
    }
    false
}

impl From<MultipartError> for ApiError {
    fn from(e: MultipartError) -> Self {
        if stalled(&e) {
            ApiError::BodyStalled
        } else if e.status() == StatusCode::PAYLOAD_TOO_LARGE {
            ApiError::TooLarge("the request body exceeds the upload limit".into())
        } else {
            ApiError::bad_request(
                "malformed_multipart",
                format!("malformed multipart body: {}", e.body_text()),
            )
        }
    }
}

impl From<BytesRejection> for ApiError {
    fn from(e: BytesRejection) -> Self {
        if stalled(&e) {
            ApiError::BodyStalled
        } else if e.status() == StatusCode::PAYLOAD_TOO_LARGE {
            ApiError::TooLarge("the request body exceeds the upload limit".into())
        } else {
            ApiError::bad_request("unreadable_body", e.body_text())
        }
    }
}

impl From<QueryRejection> for ApiError {
    fn from(e: QueryRejection) -> Self {
        ApiError::bad_request("invalid_query", e.body_text())
    }
}

/// Fallback for unknown routes: 404 JSON naming the path.
pub async fn no_route(method: Method, uri: Uri) -> ApiError {
    ApiError::NotFound(format!("no route for {method} {}", uri.path()))
}

/// Fallback for known routes asked with the wrong method: 405 JSON.
pub async fn wrong_method(method: Method, uri: Uri) -> ApiError {
    ApiError::MethodNotAllowed(format!("{method} is not allowed on {}", uri.path()))
}

/// Middleware: answers 504 JSON when the rest of the stack takes longer than `limit`.
pub async fn time_limit(State(limit): State<Duration>, request: Request, next: Next) -> Response {
    match tokio::time::timeout(limit, next.run(request)).await {
        Ok(response) => response,
        Err(_) => ApiError::TimedOut(limit).into_response(),
    }
}

/// Response for a handler that panicked: opaque 500 JSON (the panic is logged).
pub fn panic_response(panic: Box<dyn std::any::Any + Send + 'static>) -> Response {
    let detail = panic
        .downcast_ref::<String>()
        .cloned()
        .or_else(|| panic.downcast_ref::<&str>().map(|s| s.to_string()))
        .unwrap_or_else(|| "unknown panic".into());
    ApiError::Internal(format!("handler panicked: {detail}")).into_response()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_busy_database_answers_503_with_retry_after() {
        let response =
            ApiError::from(StorageError::Busy(sqlx::Error::PoolTimedOut)).into_response();
        assert_eq!(response.status(), StatusCode::SERVICE_UNAVAILABLE);
        assert_eq!(
            response.headers()[header::RETRY_AFTER],
            RETRY_AFTER_S.to_string()
        );
    }

    #[test]
    fn a_database_failure_answers_with_its_kind_for_the_metrics_and_a_missing_row_without() {
        let kind = |e: StorageError| {
            let response = ApiError::from(e).into_response();
            let kind = response.extensions().get::<DatabaseFailure>().map(|f| f.0);
            (response.status(), kind)
        };
        assert_eq!(
            kind(StorageError::Busy(sqlx::Error::PoolTimedOut)),
            (StatusCode::SERVICE_UNAVAILABLE, Some("busy"))
        );
        assert_eq!(
            kind(StorageError::Database(sqlx::Error::PoolClosed)),
            (StatusCode::INTERNAL_SERVER_ERROR, Some("fault"))
        );
        let missing = StorageError::NotFound {
            what: "calibration",
            id: "c1".into(),
        };
        assert_eq!(kind(missing), (StatusCode::NOT_FOUND, None));
    }
}
