//! One error type for the HTTP layer and the one place it becomes a response.

use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use schemars::JsonSchema;
use serde::Serialize;

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
}

impl ErrorBody {
    /// An error without a field.
    pub fn new(code: &'static str, message: impl Into<String>) -> Self {
        ErrorBody {
            error: ErrorDetail {
                code,
                field: None,
                message: message.into(),
            },
        }
    }
}

/// Every way a request can fail, in the words of the API contract.
#[derive(Debug, thiserror::Error)]
pub enum ApiError {
    /// No or unknown credentials (401).
    #[error("sign in or send Authorization: Bearer TOKEN")]
    Unauthorized,
    /// Authenticated, but the role is too low (403).
    #[error("{0}")]
    Forbidden(String),
    /// Unknown id, or an id of another team (404).
    #[error("{0}")]
    NotFound(String),
    /// The body breaks a rule (422), naming the field where one applies.
    #[error("{message}")]
    Invalid {
        /// snake_case code.
        code: &'static str,
        /// For a person.
        message: String,
        /// JSON path of the offending field.
        field: Option<String>,
    },
    /// A body larger than the route admits (413).
    #[error("{0}")]
    TooLarge(String),
    /// A content type the route does not take (415).
    #[error("{0}")]
    UnsupportedMediaType(String),
    /// A write without `If-Match` (428).
    #[error("send If-Match with the ETag of the latest revision")]
    PreconditionRequired,
    /// A write whose `If-Match` is stale (412).
    #[error("{0}")]
    PreconditionFailed(String),
    /// A request that conflicts with stored state (409).
    #[error("{0}")]
    Conflict(String),
    /// The database cannot be reached (503).
    #[error("the database is unavailable")]
    Unavailable,
    /// Too many heavy requests at once (503 with `Retry-After: 1`).
    #[error("the server is busy with other heavy requests; retry in a second")]
    Busy,
    /// Anything unexpected (500); details go to the log only.
    #[error("internal error")]
    Internal(String),
}

impl ApiError {
    /// A 422 with a field.
    pub fn invalid(
        code: &'static str,
        field: impl Into<String>,
        message: impl Into<String>,
    ) -> Self {
        Self::Invalid {
            code,
            message: message.into(),
            field: Some(field.into()),
        }
    }

    /// A 422 without a field.
    pub fn invalid_body(code: &'static str, message: impl Into<String>) -> Self {
        Self::Invalid {
            code,
            message: message.into(),
            field: None,
        }
    }

    /// HTTP status of this error.
    pub fn status(&self) -> StatusCode {
        match self {
            ApiError::Unauthorized => StatusCode::UNAUTHORIZED,
            ApiError::Forbidden(_) => StatusCode::FORBIDDEN,
            ApiError::NotFound(_) => StatusCode::NOT_FOUND,
            ApiError::Invalid { .. } => StatusCode::UNPROCESSABLE_ENTITY,
            ApiError::TooLarge(_) => StatusCode::PAYLOAD_TOO_LARGE,
            ApiError::UnsupportedMediaType(_) => StatusCode::UNSUPPORTED_MEDIA_TYPE,
            ApiError::PreconditionRequired => StatusCode::PRECONDITION_REQUIRED,
            ApiError::PreconditionFailed(_) => StatusCode::PRECONDITION_FAILED,
            ApiError::Conflict(_) => StatusCode::CONFLICT,
            ApiError::Unavailable | ApiError::Busy => StatusCode::SERVICE_UNAVAILABLE,
            ApiError::Internal(_) => StatusCode::INTERNAL_SERVER_ERROR,
        }
    }

    /// snake_case code of this error.
    pub fn code(&self) -> &'static str {
        match self {
            ApiError::Unauthorized => "unauthorized",
            ApiError::Forbidden(_) => "forbidden",
            ApiError::NotFound(_) => "not_found",
            ApiError::Invalid { code, .. } => code,
            ApiError::TooLarge(_) => "too_large",
            ApiError::UnsupportedMediaType(_) => "unsupported_media_type",
            ApiError::PreconditionRequired => "precondition_required",
            ApiError::PreconditionFailed(_) => "stale_revision",
            ApiError::Conflict(_) => "conflict",
            ApiError::Unavailable => "unavailable",
            ApiError::Busy => "busy",
            ApiError::Internal(_) => "internal",
        }
    }

    /// The field, where one applies.
    pub fn field(&self) -> Option<&str> {
        match self {
            ApiError::Invalid { field, .. } => field.as_deref(),
            _ => None,
        }
    }
}

impl From<crate::store::StoreError> for ApiError {
    fn from(e: crate::store::StoreError) -> Self {
        use crate::store::StoreError;
        match e {
            StoreError::Database(sqlx::Error::PoolTimedOut | sqlx::Error::PoolClosed) => {
                ApiError::Unavailable
            }
            StoreError::Database(sqlx::Error::Io(_)) => ApiError::Unavailable,
            StoreError::Constraint(c) if c.contains("fkey") || c.contains("FOREIGN") => {
                ApiError::invalid_body("unknown_reference", "a referenced object does not exist")
            }
            other => ApiError::Internal(other.to_string()),
        }
    }
}

impl From<goalsmith_core::goal::GoalError> for ApiError {
    fn from(e: goalsmith_core::goal::GoalError) -> Self {
        ApiError::Invalid {
            code: e.code,
            message: e.message,
            field: Some(e.field),
        }
    }
}

impl IntoResponse for ApiError {
    fn into_response(self) -> Response {
        let status = self.status();
        let message = match &self {
            ApiError::Internal(detail) => {
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
            },
        };
        let mut resp = (status, axum::Json(body)).into_response();
        if status == StatusCode::UNAUTHORIZED {
            resp.headers_mut()
                .insert(header::WWW_AUTHENTICATE, HeaderValue::from_static("Bearer"));
        }
        if matches!(self, ApiError::Busy) {
            resp.headers_mut()
                .insert(header::RETRY_AFTER, HeaderValue::from_static("1"));
        }
        resp
    }
}

/// Shorthand for handler results.
pub type ApiResult<T> = Result<T, ApiError>;
