//! What planners pull and push for one pinned revision: cost maps, batched costs, the overlay,
//! the reproducible bundle, and outcomes.

use super::auth::{Principal, Role};
use super::cameras::{self, CameraDoc};
use super::error::{ApiError, ApiResult};
use super::extract::{JsonBody, media_type};
use super::goals::{etag_of, if_none_match, load_revision, parse_revision};
use super::heavy::Cancel;
use super::{AppState, frames, rfc3339};
use crate::config::Limits;
use crate::scoring::{self, ScoreError};
use crate::store::{self, goals::RevisionRow};
use axum::Json;
use axum::extract::{Path, Query, Request, State};
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use goalsmith_core::cost::{CostModel, PreparedMaps};
use goalsmith_core::goal::GoalSpec;
use goalsmith_core::npy;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::Value;
use sha2::{Digest, Sha256};
use std::sync::atomic::{AtomicBool, Ordering};

impl From<ScoreError> for ApiError {
    fn from(e: ScoreError) -> Self {
        match e {
            ScoreError::Invalid {
                code: "unsupported_media_type",
                message,
                ..
            } => ApiError::UnsupportedMediaType(message),
            ScoreError::Invalid {
                code,
                message,
                field,
            } => ApiError::Invalid {
                code,
                message,
                field,
            },
            ScoreError::TooLarge(m) => ApiError::TooLarge(m),
            ScoreError::Internal(m) => ApiError::Internal(m),
        }
    }
}

/// Checked goals and their cost models by (goal id, revision). A planner in a control loop
/// scores the same revision many times a second; rebuilding the model (mask decoding and
/// indexing included) each time would dominate small requests. Revisions are immutable, so an
/// entry never goes stale; the cache only bounds its size, in bytes: a model with mask targets
/// holds about 9 bytes per frame pixel per mask (the mask and its column index), so a count of
/// entries says nothing about memory.
pub struct ModelCache {
    entries: std::sync::Mutex<ModelEntries>,
    /// Prepared maps by (model identity, w, h), each holding its model alive so the identity
    /// cannot be reused by another model while the entry exists; bounded in bytes.
    prepared: std::sync::Mutex<PreparedCache>,
}

/// Least recently used first out: each entry records the tick of its last use.
#[derive(Default)]
struct ModelEntries {
    map: std::collections::HashMap<(String, i64), (Checked, usize, u64)>,
    bytes: usize,
    tick: u64,
    budget: usize,
}

#[derive(Default)]
struct PreparedCache {
    entries:
        std::collections::HashMap<(usize, usize, usize), (std::sync::Arc<PreparedMaps>, Checked)>,
    bytes: usize,
}

/// A checked goal with its cost model, shared between the cache and requests.
pub type Checked = std::sync::Arc<(GoalSpec, CostModel)>;

/// What one cached revision is taken to hold: the model's masks and indexes plus a fixed
/// allowance for the goal document, labels and the map entry itself.
fn checked_bytes(c: &Checked) -> usize {
    c.1.approx_bytes() + 4096
}

impl Default for ModelCache {
    fn default() -> Self {
        Self::with_budget(crate::config::Limits::default().model_cache_bytes)
    }
}

impl ModelCache {
    /// A cache holding at most `budget` bytes of models (by [`checked_bytes`]).
    pub fn with_budget(budget: usize) -> Self {
        Self {
            entries: std::sync::Mutex::new(ModelEntries {
                budget,
                ..ModelEntries::default()
            }),
            prepared: std::sync::Mutex::default(),
        }
    }

    /// Bytes of models held now (read-only, for tests and logs).
    pub fn bytes(&self) -> usize {
        self.entries.lock().map_or(0, |e| e.bytes)
    }

    fn prepared(&self, key: &(usize, usize, usize)) -> Option<std::sync::Arc<PreparedMaps>> {
        Some(self.prepared.lock().ok()?.entries.get(key)?.0.clone())
    }

    fn put_prepared(
        &self,
        key: (usize, usize, usize),
        maps: std::sync::Arc<PreparedMaps>,
        model: Checked,
    ) {
        let size = maps.points() * maps.width() * maps.height() * 4;
        if size > PREPARED_CACHE_BYTES / 4 {
            return; // large maps are rare; keeping them would crowd out the common sizes
        }
        let Ok(mut c) = self.prepared.lock() else {
            return;
        };
        while c.bytes + size > PREPARED_CACHE_BYTES {
            let Some(k) = c.entries.keys().next().copied() else {
                break;
            };
            if let Some((m, _)) = c.entries.remove(&k) {
                c.bytes -= m.points() * m.width() * m.height() * 4;
            }
        }
        if c.entries.insert(key, (maps, model)).is_none() {
            c.bytes += size;
        }
    }

    fn get(&self, key: &(String, i64)) -> Option<Checked> {
        let mut e = self.entries.lock().ok()?;
        e.tick += 1;
        let tick = e.tick;
        let entry = e.map.get_mut(key)?;
        entry.2 = tick;
        Some(entry.0.clone())
    }

    fn put(&self, key: (String, i64), value: Checked) {
        let size = checked_bytes(&value);
        let Ok(mut e) = self.entries.lock() else {
            return;
        };
        if size > e.budget {
            return; // used by the request that built it, but not kept: it would evict all else
        }
        if let Some((_, old, _)) = e.map.remove(&key) {
            e.bytes -= old;
        }
        while e.bytes + size > e.budget {
            // A linear scan for the oldest: the cache holds tens of entries, not thousands, and
            // an eviction follows a model build that costs far more.
            let Some(oldest) = e
                .map
                .iter()
                .min_by_key(|(_, (_, _, t))| *t)
                .map(|(k, _)| k.clone())
            else {
                break;
            };
            if let Some((_, b, _)) = e.map.remove(&oldest) {
                e.bytes -= b;
            }
        }
        e.tick += 1;
        let tick = e.tick;
        e.bytes += size;
        e.map.insert(key, (value, size, tick));
    }
}

/// A pinned revision with everything needed to score or export it.
pub struct Loaded {
    /// The stored revision.
    pub row: RevisionRow,
    /// Its document.
    pub doc: Value,
    /// Its checked goal and cost model (shared with the cache).
    pub checked: Checked,
    /// The frame it is drawn on.
    pub frame: store::frames::FrameRow,
    /// The camera of that frame.
    pub camera: CameraDoc,
    /// The camera as served.
    pub camera_json: Value,
}

impl Loaded {
    /// The stored frame image: (content type, bytes).
    pub async fn frame_image(&self, state: &AppState) -> ApiResult<(String, Vec<u8>)> {
        store::frames::image_bytes(state.store.pool(), &self.frame.sha256)
            .await?
            .ok_or_else(|| ApiError::Internal(format!("image of frame {} missing", self.frame.id)))
    }

    /// The full-size cost maps as NPY (CPU work: call it off the async workers), given up
    /// when `stop` is set (see [`super::heavy::Cancel`]).
    pub fn full_size_maps(&self, stop: &AtomicBool) -> Result<Vec<u8>, ScoreError> {
        let (w, h) = self.spec().frame_size();
        scoring::cost_maps_npy_until(self.model(), w as usize, h as usize, &|| {
            stop.load(Ordering::Relaxed)
        })
    }

    /// Refuses (422 `map_too_large`) a bundle whose full-size maps are over the limit, before
    /// anything is built.
    pub fn check_full_size_maps(&self, limits: &Limits) -> ApiResult<()> {
        let (w, h) = self.spec().frame_size();
        check_map_values(limits, self.model().len(), w as usize, h as usize, None)
    }

    /// What the bundle of this revision is made of.
    pub fn bundle_parts<'a>(
        &'a self,
        content_type: &str,
        frame: &'a [u8],
        maps: &'a [u8],
    ) -> scoring::BundleParts<'a> {
        let (width, height) = self.spec().frame_size();
        scoring::BundleParts {
            goal_json: &self.row.document,
            goal: &self.doc,
            camera: &self.camera_json,
            cost_maps_npy: maps,
            frame,
            frame_ext: if content_type == "image/png" {
                "png"
            } else {
                "jpg"
            },
            points: self.model().len(),
            width,
            height,
        }
    }

    /// The checked goal.
    pub fn spec(&self) -> &GoalSpec {
        &self.checked.0
    }
    /// The cost model.
    pub fn model(&self) -> &CostModel {
        &self.checked.1
    }
}

/// Refuses maps of more than `limits.max_map_values` values (P · h · w) with a 422
/// `map_too_large` naming the limit, before any of them is built.
pub fn check_map_values(
    limits: &Limits,
    points: usize,
    width: usize,
    height: usize,
    field: Option<&str>,
) -> ApiResult<()> {
    let max = limits.max_map_values;
    let values = points.saturating_mul(width).saturating_mul(height);
    if values <= max {
        return Ok(());
    }
    Err(ApiError::Invalid {
        code: "map_too_large",
        message: format!(
            "cost maps of {points} source point{} at {width} × {height} pixels are {values} \
             values, over the limit of {max} values (P · h · w) per request; ask for a smaller \
             width and height",
            if points == 1 { "" } else { "s" }
        ),
        field: field.map(str::to_string),
    })
}

/// Loads revision `n` of a team's goal and rebuilds its cost model (off the async workers).
pub async fn load(state: &AppState, who: &Principal, id: &str, n: &str) -> ApiResult<Loaded> {
    let row = load_revision(state, who, id, Some(parse_revision(n)?)).await?;
    load_row(state, who, row).await
}

/// [`load`] for a revision row already read (and authorised by its team).
pub async fn load_row(state: &AppState, who: &Principal, row: RevisionRow) -> ApiResult<Loaded> {
    let frame = frames::load(state, who, &row.frame_id).await?;
    let camera_row = cameras::load(state, who, &frame.camera_id).await?;
    let camera = cameras::parse_doc(&camera_row)?;
    let camera_json = cameras::camera_json(&camera_row)?;
    let doc: Value = serde_json::from_str(&row.document)
        .map_err(|e| ApiError::Internal(format!("revision unreadable: {e}")))?;
    let key = (row.goal_id.clone(), row.revision);
    let checked = match state.models.get(&key) {
        Some(c) => c,
        None => {
            let (w, h) = (camera.width, camera.height);
            let doc2 = doc.clone();
            let permit = state.heavy_permits.acquire().await?;
            let built = tokio::task::spawn_blocking(move || {
                let _permit = permit;
                let spec = scoring::spec_from_revision(&doc2, w, h)?;
                let model = scoring::model(&spec)?;
                Ok::<_, ScoreError>(std::sync::Arc::new((spec, model)))
            })
            .await
            .map_err(|e| ApiError::Internal(e.to_string()))??;
            state.models.put(key, built.clone());
            built
        }
    };
    Ok(Loaded {
        row,
        doc,
        checked,
        frame,
        camera,
        camera_json,
    })
}

/// A binary download with a strong ETag (SHA-256 of the bytes), a file name and the caution.
pub fn binary(
    content_type: &'static str,
    filename: String,
    bytes: Vec<u8>,
    headers: &HeaderMap,
) -> Response {
    let etag = format!("\"{}\"", hex::encode(Sha256::digest(&bytes)));
    binary_with_etag(content_type, filename, bytes, headers, etag)
}

/// The strong ETag of a bundle, known before it is built: the bytes of a bundle depend only on
/// the revision document bytes (which name the frame; frames and cameras never change) and on
/// the bundle format, so a hash of those two names the bundle exactly.
pub fn bundle_etag(kind: &str, document: &str) -> String {
    let mut h = Sha256::new();
    h.update(format!(
        "{kind} bundle format {}\n",
        scoring::BUNDLE_FORMAT_VERSION
    ));
    h.update(document.as_bytes());
    format!("\"{}\"", hex::encode(h.finalize()))
}

/// The answer to a conditional GET that matched: 304 with the ETag, nothing built.
pub fn not_modified(etag: &str) -> Response {
    let mut resp = StatusCode::NOT_MODIFIED.into_response();
    if let Ok(v) = HeaderValue::from_str(etag) {
        resp.headers_mut().insert(header::ETAG, v);
    }
    resp
}

/// [`binary`] with an ETag the caller derived.
pub fn binary_with_etag(
    content_type: &'static str,
    filename: String,
    bytes: Vec<u8>,
    headers: &HeaderMap,
    etag: String,
) -> Response {
    if if_none_match(headers, &etag) {
        return (StatusCode::NOT_MODIFIED, [(header::ETAG, etag)]).into_response();
    }
    let mut resp = (
        [
            (header::CONTENT_TYPE, HeaderValue::from_static(content_type)),
            (
                header::CACHE_CONTROL,
                HeaderValue::from_static("private, max-age=31536000, immutable"),
            ),
        ],
        bytes,
    )
        .into_response();
    if let Ok(v) = HeaderValue::from_str(&etag) {
        resp.headers_mut().insert(header::ETAG, v);
    }
    if let Ok(v) = HeaderValue::from_str(&format!("attachment; filename=\"{filename}\"")) {
        resp.headers_mut().insert(header::CONTENT_DISPOSITION, v);
    }
    if let Ok(v) = HeaderValue::from_str(crate::SAFETY_CAUTION) {
        resp.headers_mut().insert(super::CAUTION_HEADER, v);
    }
    resp
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

fn parse_side(v: &Option<String>, field: &str) -> ApiResult<Option<usize>> {
    v.as_deref()
        .map(|s| {
            s.parse::<usize>()
                .ok()
                .filter(|n| (1..=8192).contains(n))
                .ok_or_else(|| {
                    ApiError::invalid(
                        "bad_map_size",
                        field,
                        format!("{field} must be a whole number from 1 to 8192"),
                    )
                })
        })
        .transpose()
}

/// `GET /api/goals/{id}/revisions/{n}/cost-maps.npy[?width=w&height=h]`: float32 (P, h, w).
pub async fn cost_maps(
    State(state): State<AppState>,
    who: Principal,
    Path((id, n)): Path<(String, String)>,
    query: Result<Query<MapSize>, axum::extract::rejection::QueryRejection>,
    headers: HeaderMap,
) -> ApiResult<Response> {
    let Query(size) = query.map_err(|e| ApiError::invalid_body("bad_query", e.body_text()))?;
    let (w, h) = match (
        parse_side(&size.width, "width")?,
        parse_side(&size.height, "height")?,
    ) {
        (Some(w), Some(h)) => (Some(w), Some(h)),
        (None, None) => (None, None),
        _ => {
            return Err(ApiError::invalid_body(
                "bad_map_size",
                "give both width and height, or neither for the frame's size",
            ));
        }
    };
    let asked = w.is_some();
    let l = load(&state, &who, &id, &n).await?;
    let (fw, fh) = l.spec().frame_size();
    let (w, h) = (w.unwrap_or(fw as usize), h.unwrap_or(fh as usize));
    check_map_values(
        &state.limits,
        l.model().len(),
        w,
        h,
        asked.then_some("width"),
    )?;
    let rev = l.row.revision;
    let permit = state.heavy_permits.acquire().await?;
    let cancel = Cancel::new();
    let stop = cancel.flag();
    let bytes = tokio::task::spawn_blocking(move || {
        let _permit = permit;
        scoring::cost_maps_npy_until(l.model(), w, h, &|| stop.load(Ordering::Relaxed))
    })
    .await
    .map_err(|e| ApiError::Internal(e.to_string()))??;
    drop(cancel);
    Ok(binary(
        "application/x-npy",
        format!("goal-{id}-r{rev}-cost-maps-{w}x{h}.npy"),
        bytes,
        &headers,
    ))
}

/// `POST /api/goals/{id}/revisions/{n}/cost`: JSON points or an NPY body → costs.
pub async fn cost(
    State(state): State<AppState>,
    who: Principal,
    Path((id, n)): Path<(String, String)>,
    req: Request,
) -> ApiResult<Json<scoring::CostResponse>> {
    let content_type = media_type(&req).unwrap_or_default();
    if !matches!(
        content_type.as_str(),
        "application/json" | "application/x-npy" | "application/octet-stream"
    ) {
        let e = ApiError::UnsupportedMediaType(format!(
            "send application/json {{\"points\": …}} or an application/x-npy body, not {content_type:?}"
        ));
        return Err(refuse(req, e).await);
    }
    let checked = match checked_model(&state, &who, &id, &n).await {
        Ok(c) => c,
        Err(e) => return Err(refuse(req, e).await),
    };
    let max = state.limits.cost_body_bytes;
    if content_type == "application/json" {
        let body = read_json_cost_body(req, state.limits.cost_json_bytes).await?;
        let _permit = state.heavy_permits.acquire().await?;
        let result = evaluate_buffered(checked, content_type, body, max).await?;
        return Ok(Json(scoring::cost_response(&result)));
    }
    let declared = req
        .headers()
        .get(header::CONTENT_LENGTH)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.parse::<usize>().ok());
    let mut body = req.into_body();
    let result = match state.heavy_permits.acquire().await {
        Ok(_permit) => score_npy(&state, checked, content_type, declared, &mut body).await,
        Err(busy) => Err(busy),
    };
    if result.is_err() {
        // Read what the client is still sending (the route's body limit bounds it), so that it
        // gets the error body rather than a reset connection halfway through its upload.
        drain(&mut body).await;
    }
    result.map(|r| Json(scoring::cost_response(&r)))
}

/// Reads a JSON cost body of at most `max` bytes, refusing (413) as soon as it is known to be
/// longer, from `Content-Length` or while reading, so an oversized body is never held whole.
async fn read_json_cost_body(req: Request, max: usize) -> ApiResult<Vec<u8>> {
    let too_large = || {
        ApiError::TooLarge(format!(
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
async fn refuse(req: Request, e: ApiError) -> ApiError {
    drain(&mut req.into_body()).await;
    e
}

/// Scores a whole buffered body (JSON points, NPY points, or anything the full check must
/// explain) off the async workers.
async fn evaluate_buffered(
    checked: Checked,
    content_type: String,
    body: impl AsRef<[u8]> + Send + 'static,
    max: usize,
) -> ApiResult<goalsmith_core::cost::CostResult> {
    Ok(tokio::task::spawn_blocking(move || {
        scoring::evaluate(&checked.1, &content_type, body.as_ref(), max)
    })
    .await
    .map_err(|e| ApiError::Internal(e.to_string()))??)
}

/// Discards the rest of a request body.
async fn drain(body: &mut axum::body::Body) {
    while let Ok(Some(_)) = next_chunk(body).await {}
}

/// Scores an NPY body as it arrives: probability maps block by block, points (small) buffered.
async fn score_npy(
    state: &AppState,
    checked: Checked,
    content_type: String,
    declared: Option<usize>,
    body: &mut axum::body::Body,
) -> ApiResult<goalsmith_core::cost::CostResult> {
    let max = state.limits.cost_body_bytes;
    // The NPY header first: it says whether these are maps, which are scored as they arrive.
    let mut head = Vec::new();
    let header = loop {
        match npy::parse_header_prefix(&head, max) {
            Ok(h) => break h,
            Err(npy::NpyError::TruncatedHeader { .. }) => {}
            Err(e) => return Err(ScoreError::from_npy(e).into()),
        }
        match next_chunk(body).await? {
            Some(chunk) => head.extend_from_slice(&chunk),
            None => {
                // The whole body was shorter than its header: let the buffered path say why.
                return evaluate_buffered(checked, content_type, head, max).await;
            }
        }
    };
    let total = header.data_offset + header.data_len;
    if let Some(d) = declared
        && d != total
    {
        return Err(ScoreError::from_npy(npy::NpyError::DataLength {
            expected: header.data_len,
            got: d.saturating_sub(header.data_offset),
        })
        .into());
    }
    let p = checked.1.len();
    let maps = match header.shape.as_slice() {
        [n, t, pp, h, w] if *pp == p && header.dtype != npy::Dtype::F64 => Some((*n, *t, *h, *w)),
        _ => None,
    };
    let Some((n, t, h, w)) = maps else {
        // Only points are buffered, and only up to their own limit: anything else would be
        // refused after buffering anyway, so it is refused from its header alone.
        match header.shape.as_slice() {
            [n, t, pp, 2] if *pp == p => {
                let points = n.saturating_mul(*t).saturating_mul(p);
                let limit = state.limits.max_npy_points;
                if points > limit {
                    return Err(ApiError::TooLarge(format!(
                        "NPY points of shape ({n}, {t}, {p}, 2) are {points} points, over the \
                         limit of {limit} points (N · T · P) per request; send smaller batches"
                    )));
                }
            }
            [_, _, pp, _, _] if *pp == p => {
                return Err(ApiError::invalid_body(
                    "bad_npy",
                    "probability maps must be float32 or float16, not float64",
                ));
            }
            other => {
                return Err(ApiError::invalid_body(
                    "bad_shape",
                    format!(
                        "this goal has P = {p} source points: send maps of shape (N, T, {p}, h, \
                         w) or points of shape (N, T, {p}, 2), not {other:?}"
                    ),
                ));
            }
        }
        // Points are small: buffer them and use the one full check.
        while let Some(chunk) = next_chunk(body).await? {
            if head.len() + chunk.len() > total {
                return Err(ScoreError::from_npy(npy::NpyError::DataLength {
                    expected: header.data_len,
                    got: head.len() + chunk.len() - header.data_offset,
                })
                .into());
            }
            head.extend_from_slice(&chunk);
        }
        return evaluate_buffered(checked, content_type, head, max).await;
    };
    check_map_values(&state.limits, p, w, h, None)?;
    let prepared = prepared_maps(state, &checked, w, h).await?;
    let scorer = scoring::MapScorer::new(prepared, header.dtype, n, t)?;
    let block_bytes = scorer.block_candidates() * scorer.candidate_bytes();
    // Blocks go to one blocking worker through a channel of two: the upload goes on while a
    // block is scored, and at most three blocks are held at once.
    let (tx, mut rx) = tokio::sync::mpsc::channel::<Vec<u8>>(2);
    let worker = tokio::task::spawn_blocking(move || {
        let mut scorer = scorer;
        while let Some(block) = rx.blocking_recv() {
            scorer.block(&block)?;
        }
        Ok::<_, ScoreError>(scorer)
    });
    let mut block = Vec::with_capacity(block_bytes.min(header.data_len));
    block.extend_from_slice(&head[header.data_offset..]);
    let mut received = head.len() - header.data_offset;
    drop(head);
    let mut sent_all = true;
    'read: loop {
        while block.len() >= block_bytes {
            let rest = block.split_off(block_bytes);
            if tx.send(std::mem::replace(&mut block, rest)).await.is_err() {
                sent_all = false; // the worker stopped on an error; it says which below
                break 'read;
            }
            block.reserve(block_bytes.saturating_sub(block.len()));
        }
        match next_chunk(body).await {
            Ok(Some(chunk)) => {
                received += chunk.len();
                if received > header.data_len {
                    break 'read;
                }
                block.extend_from_slice(&chunk);
            }
            Ok(None) => break 'read,
            Err(e) => {
                drop(tx);
                let _ = worker.await;
                return Err(e);
            }
        }
    }
    if sent_all && received == header.data_len && !block.is_empty() && tx.send(block).await.is_err()
    {
        sent_all = false;
    }
    drop(tx);
    let scorer = worker
        .await
        .map_err(|e| ApiError::Internal(e.to_string()))??;
    if sent_all && received != header.data_len {
        return Err(ScoreError::from_npy(npy::NpyError::DataLength {
            expected: header.data_len,
            got: received,
        })
        .into());
    }
    Ok(scorer.finish()?)
}

/// The next piece of a request body; a body over the route's limit is a 413.
async fn next_chunk(body: &mut axum::body::Body) -> ApiResult<Option<axum::body::Bytes>> {
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
                    ApiError::TooLarge("the request body is larger than this route accepts".into())
                } else {
                    ApiError::invalid_body("bad_body", "the request body could not be read")
                });
            }
        }
    }
}

/// The checked goal and cost model of revision `n`: one query to find (and authorise) the
/// revision, then the cache; the frame and camera are read only when the model must be built.
pub async fn checked_model(
    state: &AppState,
    who: &Principal,
    id: &str,
    n: &str,
) -> ApiResult<Checked> {
    let row = load_revision(state, who, id, Some(parse_revision(n)?)).await?;
    if let Some(c) = state.models.get(&(row.goal_id.clone(), row.revision)) {
        return Ok(c);
    }
    Ok(load_row(state, who, row).await?.checked)
}

/// Largest prepared map set kept in the cache (P·h·w float32 values and weights).
const PREPARED_CACHE_BYTES: usize = 64 << 20;

/// The model's maps at (w, h), from the cache or built off the async workers. A planner scores
/// the same revision at the same size many times a second; building the maps (exact distances
/// at every map pixel) on each request would cost more than scoring.
async fn prepared_maps(
    state: &AppState,
    checked: &Checked,
    w: usize,
    h: usize,
) -> ApiResult<std::sync::Arc<PreparedMaps>> {
    let key = (std::sync::Arc::as_ptr(checked) as usize, w, h);
    if let Some(p) = state.models.prepared(&key) {
        return Ok(p);
    }
    let c = checked.clone();
    // Part of the handler's future: a client that hangs up drops it and the build stops.
    let cancel = Cancel::new();
    let stop = cancel.flag();
    let (built, done) = tokio::task::spawn_blocking(move || {
        c.1.prepare_maps_until(w, h, &|| stop.load(Ordering::Relaxed))
    })
    .await
    .map_err(|e| ApiError::Internal(e.to_string()))?
    .map_err(|e| ApiError::from(ScoreError::from_cost(e)))?;
    drop(cancel);
    if !done {
        return Err(ApiError::Internal(
            "map building stopped: the client hung up".into(),
        ));
    }
    let built = std::sync::Arc::new(built);
    state
        .models
        .put_prepared(key, built.clone(), checked.clone());
    Ok(built)
}

/// `GET /api/goals/{id}/revisions/{n}/overlay.png`.
pub async fn overlay(
    State(state): State<AppState>,
    who: Principal,
    Path((id, n)): Path<(String, String)>,
    headers: HeaderMap,
) -> ApiResult<Response> {
    let l = load(&state, &who, &id, &n).await?;
    let (_, bytes) = l.frame_image(&state).await?;
    let rev = l.row.revision;
    let permit = state.heavy_permits.acquire().await?;
    let png = tokio::task::spawn_blocking(move || {
        let _permit = permit;
        scoring::overlay_png(
            l.spec(),
            &bytes,
            scoring::Zones {
                safe: l.camera.safe_zone.as_deref(),
                no_go: &l.camera.no_go_zones,
            },
        )
    })
    .await
    .map_err(|e| ApiError::Internal(e.to_string()))??;
    Ok(binary(
        "image/png",
        format!("goal-{id}-r{rev}-overlay.png"),
        png,
        &headers,
    ))
}

/// `GET /api/goals/{id}/revisions/{n}/bundle.zip`: the same bytes for the same revision.
pub async fn bundle(
    State(state): State<AppState>,
    who: Principal,
    Path((id, n)): Path<(String, String)>,
    headers: HeaderMap,
) -> ApiResult<Response> {
    let row = load_revision(&state, &who, &id, Some(parse_revision(&n)?)).await?;
    let etag = bundle_etag("goal", &row.document);
    if if_none_match(&headers, &etag) {
        return Ok(not_modified(&etag));
    }
    let l = load_row(&state, &who, row).await?;
    l.check_full_size_maps(&state.limits)?;
    let (content_type, frame) = l.frame_image(&state).await?;
    let rev = l.row.revision;
    let permit = state.heavy_permits.acquire().await?;
    let cancel = Cancel::new();
    let stop = cancel.flag();
    let zip = tokio::task::spawn_blocking(move || {
        let _permit = permit;
        let maps = l.full_size_maps(&stop)?;
        scoring::bundle_zip(&l.bundle_parts(&content_type, &frame, &maps))
    })
    .await
    .map_err(|e| ApiError::Internal(e.to_string()))??;
    drop(cancel);
    Ok(binary_with_etag(
        "application/zip",
        format!("goal-{id}-r{rev}.zip"),
        zip,
        &headers,
        etag,
    ))
}

/// Body of `POST …/outcomes`.
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct OutcomeInput {
    /// Where each source point ended, `[x, y]` in pixels, in cost-map order (P entries).
    final_points: Vec<[f64; 2]>,
    /// At most 2000 characters.
    #[serde(default)]
    note: Option<String>,
}

/// An outcome as recorded.
// Fields in alphabetical order: the key order of these bodies when they were built as a
// `serde_json::Value` (a sorted map in release builds), so the served bytes did not change.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct OutcomeView {
    /// Who reported it.
    pub author: String,
    /// The goal's cost of the final positions.
    pub cost: f64,
    /// When it was reported, RFC 3339 UTC.
    pub created_at: String,
    /// The final positions as reported.
    // Kept as the stored JSON text parses (null if it ever did not), not re-typed on the way out.
    #[schemars(with = "Vec<[f64; 2]>")]
    pub final_points: Value,
    /// The goal.
    pub goal_id: String,
    /// Outcome id.
    pub id: String,
    /// Mean residual over the points, pixels.
    pub mean_residual_px: f64,
    /// The reporter's note ("" when none).
    pub note: String,
    /// Per point, in cost-map order.
    #[schemars(with = "Vec<scoring::OutcomePoint>")]
    pub per_point: Value,
    /// The revision tried.
    pub revision: i64,
    /// Every point ended within its tolerance.
    pub success: bool,
}

/// Body of `GET /api/goals/{id}/outcomes`.
// Fields in alphabetical order: the key order of these bodies when they were built as a
// `serde_json::Value` (a sorted map in release builds), so the served bytes did not change.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct OutcomesView {
    /// The ETag of the goal's latest revision.
    pub latest_etag: String,
    /// The goal's latest revision number.
    pub latest_revision: i64,
    /// Every outcome of the goal, over all revisions.
    pub outcomes: Vec<OutcomeView>,
    /// Counts over those outcomes.
    pub summary: OutcomeSummary,
}

/// The `summary` of [`OutcomesView`].
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct OutcomeSummary {
    /// Trials and successes per revision, by revision number.
    pub by_revision: Vec<RevisionTally>,
    /// Mean of the outcomes' mean residuals, pixels; null before the first trial.
    pub mean_residual_px: Option<f64>,
    /// successes / trials; null before the first trial.
    pub success_rate: Option<f64>,
    /// Outcomes that succeeded.
    pub successes: usize,
    /// Outcomes reported.
    pub trials: usize,
}

/// Trials of one revision.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct RevisionTally {
    /// The revision.
    pub revision: i64,
    /// Its outcomes that succeeded.
    pub successes: usize,
    /// Its outcomes.
    pub trials: usize,
}

/// `POST /api/goals/{id}/revisions/{n}/outcomes` → 201 with success, residuals and cost.
pub async fn report_outcome(
    State(state): State<AppState>,
    who: Principal,
    Path((id, n)): Path<(String, String)>,
    JsonBody(input): JsonBody<OutcomeInput>,
) -> ApiResult<(StatusCode, Json<OutcomeView>)> {
    who.require(Role::Editor)?;
    let note = input.note.unwrap_or_default();
    if note.chars().count() > 2000 {
        return Err(ApiError::invalid(
            "too_long",
            "note",
            "at most 2000 characters",
        ));
    }
    let l = load(&state, &who, &id, &n).await?;
    let result = scoring::outcome(l.spec(), l.model(), &input.final_points)?;
    let row = store::outcomes::OutcomeRow {
        id: uuid::Uuid::new_v4().to_string(),
        goal_id: l.row.goal_id.clone(),
        revision: l.row.revision,
        final_points: serde_json::to_string(&input.final_points)
            .map_err(|e| ApiError::Internal(e.to_string()))?,
        per_point: serde_json::to_string(&result.per_point)
            .map_err(|e| ApiError::Internal(e.to_string()))?,
        success: result.success,
        cost: result.cost,
        mean_residual_px: result.mean_residual_px,
        note,
        author: who.author.clone(),
        created_at: store::now_ms(),
    };
    store::outcomes::insert(state.store.pool(), &who.team_id, &row).await?;
    Ok((StatusCode::CREATED, Json(outcome_view(&row))))
}

fn outcome_view(o: &store::outcomes::OutcomeRow) -> OutcomeView {
    OutcomeView {
        author: o.author.clone(),
        cost: o.cost,
        created_at: rfc3339(o.created_at),
        final_points: serde_json::from_str::<Value>(&o.final_points).unwrap_or(Value::Null),
        goal_id: o.goal_id.clone(),
        id: o.id.clone(),
        mean_residual_px: o.mean_residual_px,
        note: o.note.clone(),
        per_point: serde_json::from_str::<Value>(&o.per_point).unwrap_or(Value::Null),
        revision: o.revision,
        success: o.success,
    }
}

/// `GET /api/goals/{id}/outcomes` → every outcome and a success summary.
pub async fn outcomes(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ApiResult<Json<OutcomesView>> {
    let latest = load_revision(&state, &who, &id, None).await?;
    let rows = store::outcomes::list(state.store.pool(), &who.team_id, &latest.goal_id).await?;
    let trials = rows.len();
    let successes = rows.iter().filter(|o| o.success).count();
    let mean =
        (trials > 0).then(|| rows.iter().map(|o| o.mean_residual_px).sum::<f64>() / trials as f64);
    let mut per_revision = std::collections::BTreeMap::<i64, (usize, usize)>::new();
    for o in &rows {
        let e = per_revision.entry(o.revision).or_default();
        e.0 += 1;
        e.1 += usize::from(o.success);
    }
    Ok(Json(OutcomesView {
        latest_etag: etag_of(&latest.document),
        latest_revision: latest.revision,
        outcomes: rows.iter().map(outcome_view).collect(),
        summary: OutcomeSummary {
            by_revision: per_revision
                .iter()
                .map(|(r, (t, s))| RevisionTally {
                    revision: *r,
                    successes: *s,
                    trials: *t,
                })
                .collect(),
            mean_residual_px: mean,
            success_rate: (trials > 0).then(|| successes as f64 / trials as f64),
            successes,
            trials,
        },
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A checked 2-term goal on a 64×48 frame; `mask` adds a fully painted mask term.
    fn checked(mask: bool) -> Checked {
        let mut terms = vec![serde_json::json!({
            "kind": "point", "source": [1.0, 1.0], "target": [5.0, 5.0]
        })];
        if mask {
            let png = crate::images::encode_mask(64, 48, &vec![true; 64 * 48]).expect("png");
            use base64::Engine;
            terms.push(serde_json::json!({
                "kind": "mask", "source": [2.0, 2.0],
                "mask_png_base64": base64::engine::general_purpose::STANDARD.encode(png)
            }));
        }
        let doc = serde_json::json!({"name": "g", "frame_id": "f", "terms": terms});
        let spec = scoring::spec_from_revision(&doc, 64, 48).expect("spec");
        let model = scoring::model(&spec).expect("model");
        std::sync::Arc::new((spec, model))
    }

    #[test]
    fn the_model_cache_stays_within_its_byte_budget_least_recently_used_out() {
        let one = checked_bytes(&checked(false));
        let cache = ModelCache::with_budget(3 * one);
        for r in 0..20 {
            cache.put(("g".into(), r), checked(false));
            assert!(cache.bytes() <= 3 * one, "{} > {}", cache.bytes(), 3 * one);
        }
        assert_eq!(cache.bytes(), 3 * one, "full, not emptied");
        // The three most recent are kept; using the oldest of them keeps it past the next put.
        assert!(cache.get(&("g".into(), 16)).is_none());
        assert!(cache.get(&("g".into(), 17)).is_some());
        cache.put(("g".into(), 20), checked(false));
        assert!(
            cache.get(&("g".into(), 17)).is_some(),
            "recently used stays"
        );
        assert!(
            cache.get(&("g".into(), 18)).is_none(),
            "least recently used went"
        );
        // A model with a mask index is counted by its bytes: larger than this budget, it is not
        // kept, and nothing else is evicted for it.
        let big = checked(true);
        assert!(checked_bytes(&big) > 3 * one, "a mask index is W·H·8 bytes");
        cache.put(("g".into(), 99), big);
        assert!(cache.get(&("g".into(), 99)).is_none());
        assert_eq!(cache.bytes(), 3 * one);
    }
}
