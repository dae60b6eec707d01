//! The routes planners pull and push for one pinned revision: cost maps, batched costs, the
//! overlay, the reproducible bundle and outcomes. The work is the service's; here requests
//! become its calls and its results become responses.

use super::error::{ServiceError, ServiceResult};
use super::extract::{JsonBody, media_type};
use super::goals::if_none_match;
use crate::scoring;
use crate::service::AppState;
use crate::service::auth::Principal;
use crate::service::export::{self, ChunkSource, Download, Fetched};
use crate::service::outcomes::{self, OutcomeInput, OutcomeView, OutcomesView};
use axum::Json;
use axum::extract::{Path, Query, Request, State};
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use schemars::JsonSchema;
use serde::Deserialize;

/// A download as a response: 304 when `If-None-Match` holds its ETag, else the bytes with the
/// ETag, a file name, immutable caching and the caution.
pub fn download(d: Download, headers: &HeaderMap) -> Response {
    if if_none_match(headers, &d.etag) {
        return not_modified(&d.etag);
    }
    let mut resp = (
        [
            (
                header::CONTENT_TYPE,
                HeaderValue::from_static(d.content_type),
            ),
            (
                header::CACHE_CONTROL,
                HeaderValue::from_static("private, max-age=31536000, immutable"),
            ),
        ],
        d.bytes,
    )
        .into_response();
    if let Ok(v) = HeaderValue::from_str(&d.etag) {
        resp.headers_mut().insert(header::ETAG, v);
    }
    if let Ok(v) = HeaderValue::from_str(&format!("attachment; filename=\"{}\"", d.filename)) {
        resp.headers_mut().insert(header::CONTENT_DISPOSITION, v);
    }
    if let Ok(v) = HeaderValue::from_str(crate::SAFETY_CAUTION) {
        resp.headers_mut().insert(super::CAUTION_HEADER, v);
    }
    resp
}

/// A 304 with the ETag.
pub fn not_modified(etag: &str) -> Response {
    let mut resp = StatusCode::NOT_MODIFIED.into_response();
    if let Ok(v) = HeaderValue::from_str(etag) {
        resp.headers_mut().insert(header::ETAG, v);
    }
    resp
}

/// A [`Fetched`] download as a response.
pub fn fetched(f: Fetched, headers: &HeaderMap) -> Response {
    match f {
        Fetched::Current(etag) => not_modified(&etag),
        Fetched::File(d) => download(d, headers),
    }
}

/// Query of `cost-maps.npy`.
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct MapSize {
    // Strings, parsed in `parse_side`, so a bad number is a 422 naming the field rather than
    // the query extractor's rejection; the schema says what that parser takes.
    /// Map width (with `height`; both default to the frame's size).
    #[schemars(with = "Option<u32>", range(min = 1, max = 8192))]
    width: Option<String>,
    /// Map height (with `width`).
    #[schemars(with = "Option<u32>", range(min = 1, max = 8192))]
    height: Option<String>,
}

fn parse_side(v: &Option<String>, field: &str) -> ServiceResult<Option<usize>> {
    v.as_deref()
        .map(|s| {
            s.parse::<usize>()
                .ok()
                .filter(|n| (1..=8192).contains(n))
                .ok_or_else(|| {
                    ServiceError::invalid(
                        "bad_map_size",
                        field,
                        format!("{field} must be a whole number from 1 to 8192"),
                    )
                })
        })
        .transpose()
}

/// `POST /api/goals/{id}/revisions/{n}/cost`: JSON points or an NPY body → costs.
pub async fn cost(
    State(state): State<AppState>,
    who: Principal,
    Path((id, n)): Path<(String, String)>,
    req: Request,
) -> ServiceResult<Json<scoring::CostResponse>> {
    let content_type = media_type(&req).unwrap_or_default();
    if !matches!(
        content_type.as_str(),
        "application/json" | "application/x-npy" | "application/octet-stream"
    ) {
        let e = ServiceError::UnsupportedMediaType(format!(
            "send application/json {{\"points\": …}} or an application/x-npy body, not {content_type:?}"
        ));
        return Err(refuse(req, e).await);
    }
    let max = state.limits.cost_body_bytes;
    if content_type == "application/json" {
        // The body first (it is small and bounded), then the model: no permit is held while a
        // client uploads, and a model built here keeps the permit it was built under for the
        // scoring, so it never waits in the queue holding a model.
        // A small body on a cached model is light work and needs no permit
        // (`export::is_light_json`).
        let body = read_json_cost_body(req, state.limits.cost_json_bytes).await?;
        let (checked, permit) = export::checked_model(&state, &who, &id, &n).await?;
        let _permit = match permit {
            Some(p) => Some(p),
            None if export::is_light_json(&checked, body.len()) => None,
            None => Some(state.heavy_permits.acquire().await?),
        };
        let result = export::score_buffered(checked, content_type, body, max).await?;
        return Ok(Json(scoring::cost_response(&result)));
    }
    let declared = req
        .headers()
        .get(header::CONTENT_LENGTH)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.parse::<usize>().ok());
    let mut body = req.into_body();
    // The NPY header before the model and the permit: a body over a limit, or of the wrong
    // shape, is refused from its header whether or not the heavy queue has room.
    let result = match export::npy_head(&state, &who, &id, &n, &mut Chunks(&mut body)).await {
        Ok(head) => {
            score_npy_body(
                &state,
                &who,
                &id,
                &n,
                content_type,
                declared,
                head,
                &mut body,
            )
            .await
        }
        Err(e) => Err(e),
    };
    if result.is_err() {
        // Read what the client is still sending (the route's body limit bounds it), so that it
        // gets the error body rather than a reset connection halfway through its upload.
        drain(&mut body).await;
    }
    result.map(|r| Json(scoring::cost_response(&r.into())))
}

/// The rest of [`cost`] for an NPY body whose header [`export::npy_head`] has read and
/// checked: the model (built under a permit, or from the cache), a permit, and the scoring.
#[allow(clippy::too_many_arguments)]
async fn score_npy_body(
    state: &AppState,
    who: &Principal,
    id: &str,
    n: &str,
    content_type: String,
    declared: Option<usize>,
    head: Vec<u8>,
    body: &mut axum::body::Body,
) -> ServiceResult<goalsmith_core::cost::CostResult> {
    let (checked, permit) = export::checked_model(state, who, id, n).await?;
    let _permit = match permit {
        Some(p) => p,
        None => state.heavy_permits.acquire().await?,
    };
    export::score_npy(
        state,
        checked,
        content_type,
        declared,
        head,
        &mut Chunks(body),
    )
    .await
}

/// Reads a JSON cost body of at most `max` bytes, refusing (413) as soon as it is known to be
/// longer, from `Content-Length` or while reading, so an oversized body is never held whole.
async fn read_json_cost_body(req: Request, max: usize) -> ServiceResult<Vec<u8>> {
    let too_large = || {
        ServiceError::TooLarge(format!(
            "JSON cost bodies are limited to {max} bytes; send larger batches as NPY points \
             (N, T, P, 2) with Content-Type: application/x-npy"
        ))
    };
    let declared = req
        .headers()
        .get(header::CONTENT_LENGTH)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.parse::<usize>().ok());
    let mut body = req.into_body();
    if declared.is_some_and(|d| d > max) {
        // Read the rest and drop it (the route's limit bounds it), so the client reads the 413
        // rather than a connection reset halfway through its upload.
        drain(&mut body).await;
        return Err(too_large());
    }
    let mut out = Vec::with_capacity(declared.unwrap_or(0));
    while let Some(chunk) = next_chunk(&mut body).await? {
        if out.len() + chunk.len() > max {
            drain(&mut body).await;
            return Err(too_large());
        }
        out.extend_from_slice(&chunk);
    }
    Ok(out)
}

/// An early refusal of a request whose body has not been read: the body is read and dropped
/// first (the route's limit bounds it), so a client still uploading a large batch reads the
/// error (a 404, a 415, a 503 `busy`) rather than a reset connection.
pub(super) async fn refuse(req: Request, e: ServiceError) -> ServiceError {
    drain(&mut req.into_body()).await;
    e
}

/// Discards the rest of a request body.
async fn drain(body: &mut axum::body::Body) {
    while let Ok(Some(_)) = next_chunk(body).await {}
}

/// The next piece of a request body; a body over the route's limit is a 413.
async fn next_chunk(body: &mut axum::body::Body) -> ServiceResult<Option<axum::body::Bytes>> {
    use http_body_util::BodyExt;
    loop {
        match body.frame().await {
            None => return Ok(None),
            Some(Ok(frame)) => {
                if let Ok(data) = frame.into_data() {
                    return Ok(Some(data));
                }
            }
            Some(Err(e)) => {
                let text = e.to_string();
                let too_large = text.contains("length limit")
                    || std::error::Error::source(&e)
                        .is_some_and(|s| s.to_string().contains("length limit"));
                return Err(if too_large {
                    ServiceError::TooLarge(
                        "the request body is larger than this route accepts".into(),
                    )
                } else {
                    ServiceError::invalid_body("bad_body", "the request body could not be read")
                });
            }
        }
    }
}

/// `GET /api/goals/{id}/revisions/{n}/cost-maps.npy[?width=w&height=h]`: float32 (P, h, w).
pub async fn cost_maps(
    State(state): State<AppState>,
    who: Principal,
    Path((id, n)): Path<(String, String)>,
    query: Result<Query<MapSize>, axum::extract::rejection::QueryRejection>,
    headers: HeaderMap,
) -> ServiceResult<Response> {
    let Query(size) = query.map_err(|e| ServiceError::invalid_body("bad_query", e.body_text()))?;
    let size = match (
        parse_side(&size.width, "width")?,
        parse_side(&size.height, "height")?,
    ) {
        (Some(w), Some(h)) => Some((w, h)),
        (None, None) => None,
        _ => {
            return Err(ServiceError::invalid_body(
                "bad_map_size",
                "give both width and height, or neither for the frame's size",
            ));
        }
    };
    let d = export::cost_maps(&state, &who, &id, &n, size).await?;
    Ok(download(d, &headers))
}

/// The cost route's body, piece by piece, for the service's streaming scorer.
struct Chunks<'a>(&'a mut axum::body::Body);

impl ChunkSource for Chunks<'_> {
    async fn next_chunk(&mut self) -> ServiceResult<Option<bytes::Bytes>> {
        next_chunk(self.0).await
    }
}

/// `GET /api/goals/{id}/revisions/{n}/overlay.png`.
pub async fn overlay(
    State(state): State<AppState>,
    who: Principal,
    Path((id, n)): Path<(String, String)>,
    headers: HeaderMap,
) -> ServiceResult<Response> {
    Ok(download(
        export::overlay(&state, &who, &id, &n).await?,
        &headers,
    ))
}

/// `GET /api/goals/{id}/revisions/{n}/bundle.zip`: the same bytes for the same revision.
pub async fn bundle(
    State(state): State<AppState>,
    who: Principal,
    Path((id, n)): Path<(String, String)>,
    headers: HeaderMap,
) -> ServiceResult<Response> {
    let f = export::bundle(&state, &who, &id, &n, |etag| if_none_match(&headers, etag)).await?;
    Ok(fetched(f, &headers))
}

/// `POST /api/goals/{id}/revisions/{n}/outcomes` → 201 with success, residuals and cost.
pub async fn report_outcome(
    State(state): State<AppState>,
    who: Principal,
    Path((id, n)): Path<(String, String)>,
    JsonBody(input): JsonBody<OutcomeInput>,
) -> ServiceResult<(StatusCode, Json<OutcomeView>)> {
    let view = outcomes::record(&state, &who, &id, &n, input).await?;
    Ok((StatusCode::CREATED, Json(view)))
}

/// `GET /api/goals/{id}/outcomes` → every outcome and a success summary.
pub async fn outcomes(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ServiceResult<Json<OutcomesView>> {
    Ok(Json(outcomes::list(&state, &who, &id).await?))
}
