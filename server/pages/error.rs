//! Errors of the pages, rendered as readable HTML with the right status (never raw JSON).

use super::render::{ErrorPage, render};
use crate::api::error::ApiError;
use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};

/// Every way a page request can fail.
#[derive(Debug)]
pub enum PageError {
    /// Not signed in: redirect to the sign-in page, then back to `next`.
    SignIn {
        /// Where to go after signing in.
        next: String,
    },
    /// 400.
    BadRequest(String),
    /// 403.
    Forbidden(String),
    /// 404.
    NotFound(String),
    /// 413.
    TooLarge(String),
    /// 415.
    UnsupportedMediaType(String),
    /// Any other refusal of the API layer, kept with its status.
    Api(StatusCode, String),
    /// 500; the detail goes to the log only.
    Internal(String),
}

impl PageError {
    /// A 500 with a detail for the log.
    pub fn internal(detail: impl Into<String>) -> Self {
        PageError::Internal(detail.into())
    }
}

impl From<ApiError> for PageError {
    fn from(e: ApiError) -> Self {
        match e {
            ApiError::Unauthorized => PageError::SignIn { next: "/".into() },
            ApiError::Forbidden(m) => PageError::Forbidden(m),
            ApiError::NotFound(m) => PageError::NotFound(m),
            ApiError::TooLarge(m) => PageError::TooLarge(m),
            ApiError::UnsupportedMediaType(m) => PageError::UnsupportedMediaType(m),
            ApiError::Internal(d) => PageError::Internal(d),
            other => PageError::Api(other.status(), other.to_string()),
        }
    }
}

impl From<crate::store::StoreError> for PageError {
    fn from(e: crate::store::StoreError) -> Self {
        ApiError::from(e).into()
    }
}

/// Only local paths are followed after sign-in, so a crafted link cannot bounce a person to
/// another site.
pub fn safe_next(next: &str) -> &str {
    if next.starts_with('/') && !next.starts_with("//") && !next.contains('\\') {
        next
    } else {
        "/"
    }
}

impl IntoResponse for PageError {
    fn into_response(self) -> Response {
        let (status, title, message) = match self {
            PageError::SignIn { next } => {
                let target = format!("/signin?next={}", percent_encode(safe_next(&next)));
                let mut resp = StatusCode::SEE_OTHER.into_response();
                if let Ok(v) = HeaderValue::from_str(&target) {
                    resp.headers_mut().insert(header::LOCATION, v);
                }
                return resp;
            }
            PageError::BadRequest(m) => (
                StatusCode::BAD_REQUEST,
                "That request was not understood",
                m,
            ),
            PageError::Forbidden(m) => (StatusCode::FORBIDDEN, "Not allowed", m),
            PageError::NotFound(m) => (StatusCode::NOT_FOUND, "Not found", m),
            PageError::TooLarge(m) => (StatusCode::PAYLOAD_TOO_LARGE, "Too large", m),
            PageError::UnsupportedMediaType(m) => {
                (StatusCode::UNSUPPORTED_MEDIA_TYPE, "Wrong kind of file", m)
            }
            PageError::Api(status, m) => (status, "That did not work", m),
            PageError::Internal(detail) => {
                tracing::error!(%detail, "page failed");
                (
                    StatusCode::INTERNAL_SERVER_ERROR,
                    "Something went wrong",
                    "something went wrong on the server; it has been logged".to_string(),
                )
            }
        };
        render(
            status,
            &ErrorPage {
                chrome: Default::default(),
                status: status.as_u16(),
                title,
                message,
            },
        )
    }
}

/// Percent-encodes everything but unreserved characters (for a query value).
pub fn percent_encode(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for b in s.bytes() {
        if b.is_ascii_alphanumeric() || matches!(b, b'-' | b'_' | b'.' | b'~' | b'/') {
            out.push(b as char);
        } else {
            out.push_str(&format!("%{b:02X}"));
        }
    }
    out
}
