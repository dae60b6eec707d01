//! Errors of the pages, rendered as readable HTML with the right status (never raw JSON).

use super::render::{ErrorPage, render};
use crate::service::ServiceError;
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
    /// Any other refusal of the service, kept with its status.
    Refused(StatusCode, String),
    /// 429 with `Retry-After`: too many sign-in attempts.
    TooMany {
        /// What to tell the person.
        message: String,
        /// Seconds until the next attempt may succeed.
        retry_after_s: u64,
    },
    /// 503 with `Retry-After`: every password-hashing slot is taken.
    Busy {
        /// Seconds to wait before trying again.
        retry_after_s: u64,
    },
    /// 500; the detail goes to the log only.
    Internal(String),
}

impl From<crate::security::SecurityError> for PageError {
    fn from(e: crate::security::SecurityError) -> Self {
        use crate::security::SecurityError as S;
        match e {
            S::TooMany {
                message,
                retry_after_s,
            } => PageError::TooMany {
                message,
                retry_after_s,
            },
            S::Busy { retry_after_s } => PageError::Busy { retry_after_s },
            S::Internal(detail) => PageError::Internal(detail),
        }
    }
}

impl PageError {
    /// A 500 with a detail for the log.
    pub fn internal(detail: impl Into<String>) -> Self {
        PageError::Internal(detail.into())
    }
}

impl From<ServiceError> for PageError {
    fn from(e: ServiceError) -> Self {
        match e {
            ServiceError::Unauthorized => PageError::SignIn { next: "/".into() },
            ServiceError::Forbidden(m) => PageError::Forbidden(m),
            ServiceError::NotFound(m) => PageError::NotFound(m),
            ServiceError::TooLarge(m) => PageError::TooLarge(m),
            ServiceError::UnsupportedMediaType(m) => PageError::UnsupportedMediaType(m),
            ServiceError::Internal(d) => PageError::Internal(d),
            ServiceError::TooMany {
                message,
                retry_after_s,
            } => PageError::TooMany {
                message,
                retry_after_s,
            },
            ServiceError::HashingBusy { retry_after_s } => PageError::Busy { retry_after_s },
            ServiceError::Busy => PageError::Busy { retry_after_s: 1 },
            other => {
                let status = match other {
                    ServiceError::Invalid { .. } => StatusCode::UNPROCESSABLE_ENTITY,
                    ServiceError::PreconditionRequired => StatusCode::PRECONDITION_REQUIRED,
                    ServiceError::PreconditionFailed(_) => StatusCode::PRECONDITION_FAILED,
                    ServiceError::Conflict(_) => StatusCode::CONFLICT,
                    _ => StatusCode::SERVICE_UNAVAILABLE,
                };
                PageError::Refused(status, other.to_string())
            }
        }
    }
}

/// Only local paths are followed after sign-in, so a crafted link cannot bounce a person to
/// another site; anything else becomes the home page.
pub fn safe_next(next: &str) -> &str {
    if is_local_path(next) { next } else { "/" }
}

/// A path on this site: starts with exactly one `/`, and stays so however often it is
/// percent-decoded. Browsers drop tabs and newlines and read `\` as `/` in a `Location`, so
/// `/\t/evil` or `/\\evil` would become `//evil`, another host; such values are refused rather
/// than cleaned up. Printable ASCII only, so the value is also safe in a header.
fn is_local_path(next: &str) -> bool {
    if !next.bytes().all(|b| (0x21..=0x7e).contains(&b)) {
        return false;
    }
    let mut current = std::borrow::Cow::Borrowed(next);
    // Three rounds cover a value encoded twice over; one that still changes is refused.
    for _ in 0..3 {
        let bad = !current.starts_with('/')
            || current.starts_with("//")
            || current.contains('\\')
            || current.chars().any(|c| c.is_control() || c.is_whitespace());
        if bad {
            return false;
        }
        let decoded = percent_encoding::percent_decode_str(&current)
            .decode_utf8_lossy()
            .into_owned();
        if decoded == current {
            return true;
        }
        current = std::borrow::Cow::Owned(decoded);
    }
    false
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
            PageError::Refused(status, m) => (status, "That did not work", m),
            PageError::TooMany {
                message,
                retry_after_s,
            } => {
                return with_retry_after(
                    StatusCode::TOO_MANY_REQUESTS,
                    "Too many attempts",
                    message,
                    retry_after_s,
                );
            }
            PageError::Busy { retry_after_s } => {
                return with_retry_after(
                    StatusCode::SERVICE_UNAVAILABLE,
                    "Busy",
                    "The server is checking many passwords right now. Try again in a moment."
                        .into(),
                    retry_after_s,
                );
            }
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

fn with_retry_after(status: StatusCode, title: &'static str, message: String, s: u64) -> Response {
    let mut resp = render(
        status,
        &ErrorPage {
            chrome: Default::default(),
            status: status.as_u16(),
            title,
            message,
        },
    );
    resp.headers_mut()
        .insert(header::RETRY_AFTER, HeaderValue::from(s));
    resp
}

/// Characters kept as they are in a query value: the unreserved ones of RFC 3986 and `/`.
const QUERY_VALUE: &percent_encoding::AsciiSet = &percent_encoding::NON_ALPHANUMERIC
    .remove(b'-')
    .remove(b'_')
    .remove(b'.')
    .remove(b'~')
    .remove(b'/');

/// Percent-encodes everything but unreserved characters and `/` (for a query value).
pub fn percent_encode(s: &str) -> String {
    percent_encoding::utf8_percent_encode(s, QUERY_VALUE).to_string()
}

/// A page's query string (`?frame=…`), as axum's `Query`, but refused with a readable 400 page
/// that says which part of the address is missing or wrong, instead of a bare status: the
/// pages that need one are reached from links, and a person who typed or trimmed the address
/// is told to use the link.
pub struct PageQuery<T>(pub T);

impl<T, S> axum::extract::FromRequestParts<S> for PageQuery<T>
where
    T: serde::de::DeserializeOwned,
    S: Send + Sync,
{
    type Rejection = PageError;

    async fn from_request_parts(
        parts: &mut axum::http::request::Parts,
        state: &S,
    ) -> Result<Self, Self::Rejection> {
        match axum::extract::Query::<T>::from_request_parts(parts, state).await {
            Ok(axum::extract::Query(q)) => Ok(Self(q)),
            Err(e) => {
                let detail = e.body_text();
                let detail = detail
                    .strip_prefix("Failed to deserialize query string: ")
                    .unwrap_or(&detail);
                Err(PageError::BadRequest(format!(
                    "This page's address is incomplete ({detail}). Open the page from its link \
                     (the team home links to every goal, frame, camera and set) rather than \
                     typing the address."
                )))
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::safe_next;

    #[test]
    fn next_keeps_local_paths_only() {
        for bad in [
            "//evil.example",
            "/\\evil.example",
            "/\t/evil.example",
            "/%09/evil.example",
            "/%2F/evil.example",
            "/%2f/evil.example",
            "/%252F/evil.example",
            "%2F%2Fevil.example",
            "https://evil.example",
            "javascript:alert(1)",
            " /x",
            "/x%0d%0aSet-Cookie:a=b",
            "/x\r\nSet-Cookie:a=b",
            "/%5Cevil.example",
            "",
        ] {
            assert_eq!(safe_next(bad), "/", "{bad:?}");
        }
        for good in ["/", "/goals/abc?x=1", "/team", "/?q=pot"] {
            assert_eq!(safe_next(good), good);
        }
    }
}
