//! Extractors that turn malformed requests into the contract's error body, never the
//! framework's plain text.

use super::error::ServiceError;
use axum::body::Bytes;
use axum::extract::rejection::BytesRejection;
use axum::extract::{FromRequest, Request};
use axum::http::header;
use serde::de::DeserializeOwned;

/// Reads the body, mapping an over-limit body to 413.
pub async fn read_body<S: Send + Sync>(req: Request, state: &S) -> Result<Bytes, ServiceError> {
    Bytes::from_request(req, state).await.map_err(|e| match e {
        BytesRejection::FailedToBufferBody(inner) => {
            if inner.body_text().contains("length limit") || inner.status().as_u16() == 413 {
                ServiceError::TooLarge("the request body is larger than this route accepts".into())
            } else {
                ServiceError::invalid_body("bad_body", "the request body could not be read")
            }
        }
        other => ServiceError::invalid_body("bad_body", other.body_text()),
    })
}

/// The media type of a request without parameters, lowercased.
pub fn media_type(req: &Request) -> Option<String> {
    req.headers()
        .get(header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .map(|v| {
            v.split(';')
                .next()
                .unwrap_or("")
                .trim()
                .to_ascii_lowercase()
        })
}

/// A JSON body parsed strictly: `application/json` only, unknown fields refused, and the path of
/// the first bad field reported (`terms[2].target`).
pub struct JsonBody<T>(pub T);

impl<S, T> FromRequest<S> for JsonBody<T>
where
    S: Send + Sync,
    T: DeserializeOwned,
{
    type Rejection = ServiceError;

    async fn from_request(req: Request, state: &S) -> Result<Self, Self::Rejection> {
        match media_type(&req).as_deref() {
            Some("application/json") => {}
            Some(other) => {
                return Err(ServiceError::UnsupportedMediaType(format!(
                    "send application/json, not {other}"
                )));
            }
            None => {
                return Err(ServiceError::UnsupportedMediaType(
                    "send Content-Type: application/json".into(),
                ));
            }
        }
        let bytes = read_body(req, state).await?;
        parse_json(&bytes).map(JsonBody)
    }
}

/// Parses JSON with the path of the failing field in the error.
///
/// Strict: the body must be one JSON object (serde would also take an array for a struct, by
/// position) with nothing after it but whitespace.
pub fn parse_json<T: DeserializeOwned>(bytes: &[u8]) -> Result<T, ServiceError> {
    if bytes.iter().find(|b| !b.is_ascii_whitespace()) != Some(&b'{') {
        return Err(ServiceError::invalid_body(
            "bad_json",
            "the body must be one JSON object {…}",
        ));
    }
    let de = &mut serde_json::Deserializer::from_slice(bytes);
    let value: T = serde_path_to_error::deserialize(&mut *de).map_err(|e| {
        let path = e.path().to_string();
        let inner = e.into_inner();
        let message = match inner.classify() {
            serde_json::error::Category::Syntax | serde_json::error::Category::Eof => {
                format!("the body is not valid JSON: {inner}")
            }
            _ => format!("{inner}"),
        };
        let code = match inner.classify() {
            serde_json::error::Category::Data => "bad_field",
            _ => "bad_json",
        };
        if path == "." || path.is_empty() {
            ServiceError::invalid_body(code, message)
        } else {
            ServiceError::invalid(code, path, message)
        }
    })?;
    de.end().map_err(|e| {
        ServiceError::invalid_body(
            "bad_json",
            format!("the body holds more after its JSON object: {e}"),
        )
    })?;
    Ok(value)
}
