//! The contract's error body, and the one place a service error becomes an HTTP response.

use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use schemars::JsonSchema;
use serde::Serialize;

pub use crate::service::error::{ServiceError, ServiceResult};

/// The body of every error response.
// Fields in alphabetical order: the key order of these bodies when they were built as a
// `serde_json::Value` (a sorted map in release builds), so the served bytes did not change.
#[derive(Debug, Serialize, JsonSchema)]
#[schemars(rename = "Error")]
pub struct ErrorBody {
    /// What went wrong.
    pub error: ErrorDetail,
}

/// The `error` of an [`ErrorBody`].
#[derive(Debug, Serialize, JsonSchema)]
pub struct ErrorDetail {
    /// snake_case code, stable for programs.
    pub code: &'static str,
    /// JSON path of the offending field (`terms[2].target`), where one applies.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub field: Option<String>,
    /// For a person.
    pub message: String,
    /// The request's id (also in the `X-Request-Id` response header), to quote when asking
    /// about the error: the server's log lines of the request carry it. Added by the layer
    /// around both edges.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub request_id: Option<String>,
}

impl ErrorBody {
    /// An error without a field.
    pub fn new(code: &'static str, message: impl Into<String>) -> Self {
        ErrorBody {
            error: ErrorDetail {
                code,
                field: None,
                message: message.into(),
                request_id: None,
            },
        }
    }
}

/// The HTTP status of a service error.
pub fn status(e: &ServiceError) -> StatusCode {
    match e {
        ServiceError::Unauthorized => StatusCode::UNAUTHORIZED,
        ServiceError::Forbidden(_) => StatusCode::FORBIDDEN,
        ServiceError::NotFound(_) => StatusCode::NOT_FOUND,
        ServiceError::Invalid { .. } => StatusCode::UNPROCESSABLE_ENTITY,
        ServiceError::TooLarge(_) => StatusCode::PAYLOAD_TOO_LARGE,
        ServiceError::UnsupportedMediaType(_) => StatusCode::UNSUPPORTED_MEDIA_TYPE,
        ServiceError::PreconditionRequired => StatusCode::PRECONDITION_REQUIRED,
        ServiceError::PreconditionFailed(_) => StatusCode::PRECONDITION_FAILED,
        ServiceError::Conflict(_) => StatusCode::CONFLICT,
        ServiceError::Unavailable | ServiceError::Busy | ServiceError::HashingBusy { .. } => {
            StatusCode::SERVICE_UNAVAILABLE
        }
        ServiceError::TooMany { .. } => StatusCode::TOO_MANY_REQUESTS,
        ServiceError::Internal(_) => StatusCode::INTERNAL_SERVER_ERROR,
    }
}

impl IntoResponse for ServiceError {
    fn into_response(self) -> Response {
        let status = status(&self);
        let message = match &self {
            ServiceError::Internal(detail) => {
                // Opaque to the client, complete in the log.
                tracing::error!(%detail, "internal error");
                "something went wrong on the server; it has been logged".to_string()
            }
            other => other.to_string(),
        };
        let body = ErrorBody {
            error: ErrorDetail {
                code: self.code(),
                field: self.field().map(str::to_string),
                message,
                request_id: None,
            },
        };
        let mut resp = (status, axum::Json(body)).into_response();
        if status == StatusCode::UNAUTHORIZED {
            resp.headers_mut()
                .insert(header::WWW_AUTHENTICATE, HeaderValue::from_static("Bearer"));
        }
        let retry_after = match &self {
            ServiceError::Busy => Some(1),
            ServiceError::HashingBusy { retry_after_s }
            | ServiceError::TooMany { retry_after_s, .. } => Some(*retry_after_s),
            _ => None,
        };
        if let Some(s) = retry_after
            && let Ok(v) = HeaderValue::from_str(&s.to_string())
        {
            resp.headers_mut().insert(header::RETRY_AFTER, v);
        }
        resp
    }
}
