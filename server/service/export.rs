//! What planners pull for one pinned revision: cost maps, batched costs (buffered or streamed),
//! the overlay and the reproducible bundle, with the caches that keep repeats cheap.

use super::auth::Principal;
use super::byte_lru::ByteLru;
use super::cameras::{self, CameraDoc};
use super::error::{ServiceError, ServiceResult};
use super::goals::{load_revision, parse_revision};
use super::heavy::Cancel;
use super::{AppState, frames};
use crate::config::Limits;
use crate::scoring::{self, ScoreError};
use crate::store::{self, goals::RevisionRow};
use goalsmith_core::cost::{CostModel, PreparedMaps};
use goalsmith_core::goal::GoalSpec;
use goalsmith_core::npy;
use serde_json::Value;
use sha2::{Digest, Sha256};

impl From<ScoreError> for ServiceError {
    fn from(e: ScoreError) -> Self {
        match e {
            ScoreError::Invalid {
                code: "unsupported_media_type",
                message,
                ..
            } => ServiceError::UnsupportedMediaType(message),
            ScoreError::Invalid {
                code,
                message,
                field,
            } => ServiceError::Invalid {
                code,
                message,
                field,
            },
            ScoreError::TooLarge(m) => ServiceError::TooLarge(m),
            ScoreError::Internal(m) => ServiceError::Internal(m),
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
    models: std::sync::Mutex<ByteLru<(String, i64), Checked>>,
    /// Prepared maps by (model identity, w, h), each holding its model alive so the identity
    /// cannot be reused by another model while the entry exists; bounded in bytes.
    prepared: std::sync::Mutex<ByteLru<(usize, usize, usize), PreparedEntry>>,
}

/// Prepared maps and the model they were made from (held so its identity stays unique).
type PreparedEntry = (std::sync::Arc<PreparedMaps>, Checked);

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
            models: std::sync::Mutex::new(ByteLru::new(budget)),
            // Large prepared maps are rare; keeping one would crowd out the common sizes.
            prepared: std::sync::Mutex::new(ByteLru::new(PREPARED_CACHE_BYTES)),
        }
    }

    /// Bytes of models held now (read-only, for tests and logs).
    pub fn bytes(&self) -> usize {
        self.models.lock().map_or(0, |e| e.bytes())
    }

    fn prepared(&self, key: &(usize, usize, usize)) -> Option<std::sync::Arc<PreparedMaps>> {
        Some(self.prepared.lock().ok()?.get(key)?.0)
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
        if let Ok(mut c) = self.prepared.lock() {
            c.put(key, (maps, model), size);
        }
    }

    fn get(&self, key: &(String, i64)) -> Option<Checked> {
        self.models.lock().ok()?.get(key)
    }

    fn put(&self, key: (String, i64), value: Checked) {
        let size = checked_bytes(&value);
        if let Ok(mut e) = self.models.lock() {
            e.put(key, value, size);
        }
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
    /// The heavy-work permit the model was built under, kept for the work that follows.
    pub permit: Option<Permit>,
}

/// A heavy-work permit (see [`super::heavy`]).
pub type Permit = tokio::sync::OwnedSemaphorePermit;

impl Loaded {
    /// The permit for this request's heavy work: the one the model was built under, or a new
    /// one when the model came from the cache.
    pub async fn work_permit(&mut self, state: &AppState) -> ServiceResult<Permit> {
        match self.permit.take() {
            Some(p) => Ok(p),
            None => state.heavy_permits.acquire().await,
        }
    }

    /// The stored frame image: (content type, bytes).
    pub async fn frame_image(&self, state: &AppState) -> ServiceResult<(String, Vec<u8>)> {
        store::frames::image_bytes(&state.store, &self.frame.sha256)
            .await?
            .ok_or_else(|| {
                ServiceError::Internal(format!("image of frame {} missing", self.frame.id))
            })
    }

    /// The full-size cost maps as NPY (CPU work: call it off the async workers), given up
    /// when `stop` is set (see [`super::heavy::Cancel`]).
    pub fn full_size_maps(&self, stop: &super::heavy::Stop) -> Result<Vec<u8>, ScoreError> {
        let (w, h) = self.spec().frame_size();
        scoring::cost_maps_npy_until(self.model(), w as usize, h as usize, &|| stop.is_set())
    }

    /// Refuses (422 `map_too_large`) a bundle whose full-size maps are over the limit, before
    /// anything is built.
    pub fn check_full_size_maps(&self, limits: &Limits) -> ServiceResult<()> {
        let (w, h) = self.spec().frame_size();
        check_map_values(limits, self.model().len(), w as usize, h as usize, None)
    }

    /// The reward fits of this revision's `learned` terms, as its bundle carries them.
    pub async fn bundled_reward_fits(
        &self,
        state: &AppState,
        who: &Principal,
    ) -> ServiceResult<Vec<scoring::BundledRewardFit>> {
        let ids = scoring::learned_terms(&self.doc)
            .into_iter()
            .map(|(_, id)| id);
        super::reward_fits::bundled(state, who, &self.frame.id, ids).await
    }

    /// What the bundle of this revision is made of.
    pub fn bundle_parts<'a>(
        &'a self,
        content_type: &str,
        frame: &'a [u8],
        maps: &'a [u8],
        reward_fits: &'a [scoring::BundledRewardFit],
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
            reward_fits,
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
) -> ServiceResult<()> {
    let max = limits.max_map_values;
    let values = points.saturating_mul(width).saturating_mul(height);
    if values <= max {
        return Ok(());
    }
    Err(ServiceError::Invalid {
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
pub async fn load(state: &AppState, who: &Principal, id: &str, n: &str) -> ServiceResult<Loaded> {
    let row = load_revision(state, who, id, Some(parse_revision(n)?)).await?;
    load_row(state, who, row).await
}

/// [`load`] for a revision row already read (and authorised by its team).
pub async fn load_row(
    state: &AppState,
    who: &Principal,
    row: RevisionRow,
) -> ServiceResult<Loaded> {
    let frame = frames::load(state, who, &row.frame_id).await?;
    let camera_row = cameras::load(state, who, &frame.camera_id).await?;
    let camera = cameras::parse_doc(&camera_row)?;
    let camera_json = cameras::camera_json(&camera_row)?;
    let doc: Value = serde_json::from_str(&row.document)
        .map_err(|e| ServiceError::Internal(format!("revision unreadable: {e}")))?;
    let key = (row.goal_id.clone(), row.revision);
    let (checked, permit) = match state.models.get(&key) {
        Some(c) => (c, None),
        None => {
            let (w, h) = (camera.width, camera.height);
            let doc2 = doc.clone();
            let learned: Vec<&str> = doc["terms"]
                .as_array()
                .map(|terms| {
                    terms
                        .iter()
                        .filter(|t| t["kind"] == "learned")
                        .filter_map(|t| t["reward_fit_id"].as_str())
                        .collect()
                })
                .unwrap_or_default();
            let grids = super::reward_fits::grids_for(state, who, &frame.id, learned).await?;
            let permit = state.heavy_permits.acquire().await?;
            // Part of the handler's future: a client that hangs up drops it, and the build
            // stops before its next mask index.
            let cancel = Cancel::new();
            let stop = cancel.flag();
            // The permit comes back with the model: a model too large for the cache is held by
            // this request alone, and it must not wait in the queue for a second permit while
            // holding it (the memory envelope counts one model per permit).
            let (built, permit) = super::heavy::spawn(move || {
                let reward_grid = |id: &str| grids.get(id).cloned();
                let built =
                    scoring::spec_from_revision(&doc2, w, h, &reward_grid).and_then(|spec| {
                        let model = scoring::model_until(&spec, &|| stop.is_set())?;
                        Ok(model.map(|m| std::sync::Arc::new((spec, m))))
                    });
                (built, permit)
            })
            .await
            .map_err(|e| ServiceError::Internal(e.to_string()))?;
            drop(cancel);
            let built = built?.ok_or_else(|| {
                ServiceError::Internal("model building stopped: the client hung up".into())
            })?;
            state.models.put(key, built.clone());
            (built, Some(permit))
        }
    };
    Ok(Loaded {
        row,
        doc,
        checked,
        frame,
        camera,
        camera_json,
        permit,
    })
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

/// Scores a whole buffered body (JSON points, NPY points, or anything the full check must
/// explain) off the async workers.
pub async fn score_buffered(
    checked: Checked,
    content_type: String,
    body: impl AsRef<[u8]> + Send + 'static,
    max: usize,
) -> ServiceResult<scoring::Scored> {
    Ok(super::heavy::spawn(move || {
        scoring::evaluate(&checked.1, &content_type, body.as_ref(), max)
    })
    .await
    .map_err(|e| ServiceError::Internal(e.to_string()))??)
}

/// The checked goal and cost model of revision `n`: one query to find (and authorise) the
/// revision, then the cache; the frame and camera are read only when the model must be built.
/// When it was built, the permit it was built under comes with it (see [`Loaded::permit`]).
pub async fn checked_model(
    state: &AppState,
    who: &Principal,
    id: &str,
    n: &str,
) -> ServiceResult<(Checked, Option<Permit>)> {
    let row = load_revision(state, who, id, Some(parse_revision(n)?)).await?;
    if let Some(c) = state.models.get(&(row.goal_id.clone(), row.revision)) {
        return Ok((c, None));
    }
    let l = load_row(state, who, row).await?;
    Ok((l.checked, l.permit))
}

/// A JSON cost body of at most this many bytes may be light work (see [`is_light_json`]).
pub const LIGHT_JSON_BYTES: usize = 256 << 10;
/// Point-distance evaluations a light request may ask for at most (a few milliseconds).
pub const LIGHT_WORK: usize = 4 << 20;

/// Whether scoring a JSON body of `body_bytes` on `checked` is light enough to run without a
/// heavy-work permit: the body is small and the work it can ask for is bounded. A body of L
/// bytes holds at most L / 4 coordinate pairs (`0,0,` is the shortest), and each costs one
/// distance per point term, counted at its worst: 1 for point and learned targets, the vertex
/// count for a region, the frame's width for a mask (a query scans at most the columns that
/// hold painted pixels); and twice that, since the body may ask for `"grad": true`, which
/// evaluates every distance a second time with its gradient (the bound holds before the body
/// is parsed). Planners scoring small batches at a high rate at
/// many connections are then not shed with 503 `busy` behind the heavy queue, while a body
/// that could ask for real work still waits for a permit.
pub fn is_light_json(checked: &Checked, body_bytes: usize) -> bool {
    if body_bytes > LIGHT_JSON_BYTES {
        return false;
    }
    let per_pair = checked
        .1
        .points()
        .iter()
        .map(|p| match &p.target {
            goalsmith_core::cost::TargetShape::Region(poly) => poly.vertices().len(),
            goalsmith_core::cost::TargetShape::Mask(_) => checked.1.frame_size().0,
            _ => 1,
        })
        .max()
        .unwrap_or(1);
    (body_bytes / 4).saturating_mul(per_pair).saturating_mul(2) <= LIGHT_WORK
}

/// Largest prepared map set kept in the cache (P·h·w float32 values and weights).
const PREPARED_CACHE_BYTES: usize = 64 << 20;

/// The model's maps at (w, h), from the cache or built off the async workers. A planner scores
/// the same revision at the same size many times a second; building the maps (exact distances
/// at every map pixel) on each request would cost more than scoring.
pub async fn prepared_maps(
    state: &AppState,
    checked: &Checked,
    w: usize,
    h: usize,
) -> ServiceResult<std::sync::Arc<PreparedMaps>> {
    let key = (std::sync::Arc::as_ptr(checked) as usize, w, h);
    if let Some(p) = state.models.prepared(&key) {
        return Ok(p);
    }
    let c = checked.clone();
    // Part of the handler's future: a client that hangs up drops it and the build stops.
    let cancel = Cancel::new();
    let stop = cancel.flag();
    let (built, done) =
        super::heavy::spawn(move || c.1.prepare_maps_until(w, h, &|| stop.is_set()))
            .await
            .map_err(|e| ServiceError::Internal(e.to_string()))?
            .map_err(|e| ServiceError::from(ScoreError::from_cost(e)))?;
    drop(cancel);
    if !done {
        return Err(ServiceError::Internal(
            "map building stopped: the client hung up".into(),
        ));
    }
    let built = std::sync::Arc::new(built);
    state
        .models
        .put_prepared(key, built.clone(), checked.clone());
    Ok(built)
}

/// Where the pieces of a streamed request body come from: the API feeds the cost route's body
/// through this, so the scoring of a stream lives here and the transport stays at the edge.
pub trait ChunkSource: Send {
    /// The next piece, `None` at the end; a body over the route's limit is a 413.
    fn next_chunk(
        &mut self,
    ) -> impl std::future::Future<Output = ServiceResult<Option<bytes::Bytes>>> + Send;
}

/// A file to download: its media type, a file name, the bytes and their strong ETag.
pub struct Download {
    /// The media type.
    pub content_type: &'static str,
    /// The name a browser saves it under.
    pub filename: String,
    /// The content.
    pub bytes: Vec<u8>,
    /// Strong ETag (quoted).
    pub etag: String,
}

impl Download {
    /// A download whose ETag is the SHA-256 of its bytes.
    pub fn hashed(content_type: &'static str, filename: String, bytes: Vec<u8>) -> Self {
        let etag = format!("\"{}\"", hex::encode(Sha256::digest(&bytes)));
        Download {
            content_type,
            filename,
            bytes,
            etag,
        }
    }
}

/// A download that may be answered without building it: the client's copy (by its ETag) is
/// current.
pub enum Fetched {
    /// The client already has these bytes; the ETag.
    Current(String),
    /// The file.
    File(Download),
}

/// Cost maps of revision `n` as NPY float32 (P, h, w), at the frame's size or at `size`
/// (width, height).
pub async fn cost_maps(
    state: &AppState,
    who: &Principal,
    id: &str,
    n: &str,
    size: Option<(usize, usize)>,
) -> ServiceResult<Download> {
    let row = load_revision(state, who, id, Some(parse_revision(n)?)).await?;
    // An asked size over the limit is refused from the stored document's source points, before
    // the request waits for a permit to build the model.
    if let Some((w, h)) = size {
        check_map_values(&state.limits, points_of(&row)?, w, h, Some("width"))?;
    }
    let mut l = load_row(state, who, row).await?;
    let (fw, fh) = l.spec().frame_size();
    let (w, h) = size.unwrap_or((fw as usize, fh as usize));
    check_map_values(
        &state.limits,
        l.model().len(),
        w,
        h,
        size.is_some().then_some("width"),
    )?;
    let rev = l.row.revision;
    let permit = l.work_permit(state).await?;
    let cancel = Cancel::new();
    let stop = cancel.flag();
    let bytes = super::heavy::spawn(move || {
        let _permit = permit;
        scoring::cost_maps_npy_until(l.model(), w, h, &|| stop.is_set())
    })
    .await
    .map_err(|e| ServiceError::Internal(e.to_string()))??;
    drop(cancel);
    Ok(Download::hashed(
        "application/x-npy",
        format!("goal-{id}-r{rev}-cost-maps-{w}x{h}.npy"),
        bytes,
    ))
}

/// The frame of revision `n` with the goal drawn on it, as PNG.
pub async fn overlay(
    state: &AppState,
    who: &Principal,
    id: &str,
    n: &str,
) -> ServiceResult<Download> {
    let mut l = load(state, who, id, n).await?;
    let (_, bytes) = l.frame_image(state).await?;
    let rev = l.row.revision;
    let permit = l.work_permit(state).await?;
    let cancel = Cancel::new();
    let stop = cancel.flag();
    let png = super::heavy::spawn(move || {
        let _permit = permit;
        scoring::overlay_png_until(
            l.spec(),
            &bytes,
            scoring::Zones {
                safe: l.camera.safe_zone.as_deref(),
                no_go: &l.camera.no_go_zones,
            },
            &|| stop.is_set(),
        )
    })
    .await
    .map_err(|e| ServiceError::Internal(e.to_string()))??;
    drop(cancel);
    Ok(Download::hashed(
        "image/png",
        format!("goal-{id}-r{rev}-overlay.png"),
        png,
    ))
}

/// The reproducible bundle of revision `n` (the same bytes for the same revision), or
/// [`Fetched::Current`] when `is_current` says the client holds its ETag.
pub async fn bundle(
    state: &AppState,
    who: &Principal,
    id: &str,
    n: &str,
    is_current: impl Fn(&str) -> bool,
) -> ServiceResult<Fetched> {
    let row = load_revision(state, who, id, Some(parse_revision(n)?)).await?;
    let etag = bundle_etag("goal", &row.document);
    if is_current(&etag) {
        return Ok(Fetched::Current(etag));
    }
    let mut l = load_row(state, who, row).await?;
    l.check_full_size_maps(&state.limits)?;
    let (content_type, frame) = l.frame_image(state).await?;
    let fits = l.bundled_reward_fits(state, who).await?;
    let rev = l.row.revision;
    let permit = l.work_permit(state).await?;
    let cancel = Cancel::new();
    let stop = cancel.flag();
    let zip = super::heavy::spawn(move || {
        let _permit = permit;
        let maps = l.full_size_maps(&stop)?;
        scoring::bundle_zip(&l.bundle_parts(&content_type, &frame, &maps, &fits))
    })
    .await
    .map_err(|e| ServiceError::Internal(e.to_string()))??;
    drop(cancel);
    Ok(Fetched::File(Download {
        content_type: "application/zip",
        filename: format!("goal-{id}-r{rev}.zip"),
        bytes: zip,
        etag,
    }))
}

/// Scores an NPY body as it arrives (from any [`ChunkSource`]): probability maps block by block, points (small) buffered.
/// The number of source points P of a stored revision, from its document's derived points
/// (what the limits need before any model is built).
fn points_of(row: &RevisionRow) -> ServiceResult<usize> {
    let doc: Value = serde_json::from_str(&row.document)
        .map_err(|e| ServiceError::Internal(format!("revision unreadable: {e}")))?;
    doc["derived"]["points"]
        .as_array()
        .map(Vec::len)
        .ok_or_else(|| ServiceError::Internal("revision without derived points".into()))
}

/// The bytes of an NPY cost body up to the end of its header (and whatever came with it), its
/// header checked against the limits of revision `n` ([`check_npy_shape`]) before a model is
/// built or a permit asked for. An over-limit or malformed body is refused from its header
/// alone; a body that ends before its header is complete comes back whole, for
/// [`score_npy`] to say why.
pub async fn npy_head<B: ChunkSource>(
    state: &AppState,
    who: &Principal,
    id: &str,
    n: &str,
    body: &mut B,
) -> ServiceResult<Vec<u8>> {
    let row = load_revision(state, who, id, Some(parse_revision(n)?)).await?;
    let p = points_of(&row)?;
    let max = state.limits.cost_body_bytes;
    let mut head = Vec::new();
    loop {
        match npy::parse_header_prefix(&head, max) {
            Ok(header) => {
                check_npy_shape(&state.limits, p, &header)?;
                return Ok(head);
            }
            Err(npy::NpyError::TruncatedHeader { .. }) => {}
            Err(e) => return Err(ScoreError::from_npy(e).into()),
        }
        match body.next_chunk().await? {
            Some(chunk) => head.extend_from_slice(&chunk),
            None => return Ok(head),
        }
    }
}

/// What an NPY cost body of a goal with `p` source points may be, from its header: maps
/// (N, T, P, h, w) of float32 or float16 within the map limit, or points (N, T, P, 2) within
/// the NPY points limit. Returns the maps' (N, T, h, w), `None` for points.
fn check_npy_shape(
    limits: &Limits,
    p: usize,
    header: &npy::NpyHeader,
) -> ServiceResult<Option<(usize, usize, usize, usize)>> {
    match header.shape.as_slice() {
        [n, t, pp, h, w] if *pp == p && header.dtype != npy::Dtype::F64 => {
            check_map_values(limits, p, *w, *h, None)?;
            Ok(Some((*n, *t, *h, *w)))
        }
        [n, t, pp, 2] if *pp == p => {
            let points = n.saturating_mul(*t).saturating_mul(p);
            let limit = limits.max_npy_points;
            if points > limit {
                return Err(ServiceError::TooLarge(format!(
                    "NPY points of shape ({n}, {t}, {p}, 2) are {points} points, over the \
                     limit of {limit} points (N · T · P) per request; send smaller batches"
                )));
            }
            Ok(None)
        }
        [_, _, pp, _, _] if *pp == p => Err(ServiceError::invalid_body(
            "bad_npy",
            "probability maps must be float32 or float16, not float64",
        )),
        other => Err(ServiceError::invalid_body(
            "bad_shape",
            format!(
                "this goal has P = {p} source points: send maps of shape (N, T, {p}, h, w) or \
                 points of shape (N, T, {p}, 2), not {other:?}"
            ),
        )),
    }
}

/// Scores an NPY cost body: `head`, its start as [`npy_head`] read it, then the rest from
/// `body`. Maps are scored block by block as they arrive; points are buffered (up to their
/// limit) and scored whole.
pub async fn score_npy<B: ChunkSource>(
    state: &AppState,
    checked: Checked,
    content_type: String,
    declared: Option<usize>,
    mut head: Vec<u8>,
    body: &mut B,
) -> ServiceResult<goalsmith_core::cost::CostResult> {
    let max = state.limits.cost_body_bytes;
    // The NPY header first: it says whether these are maps, which are scored as they arrive.
    let header = loop {
        match npy::parse_header_prefix(&head, max) {
            Ok(h) => break h,
            Err(npy::NpyError::TruncatedHeader { .. }) => {}
            Err(e) => return Err(ScoreError::from_npy(e).into()),
        }
        match body.next_chunk().await? {
            Some(chunk) => head.extend_from_slice(&chunk),
            None => {
                // The whole body was shorter than its header: let the buffered path say why.
                return score_buffered(checked, content_type, head, max)
                    .await
                    .map(|s| s.result);
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
    let Some((n, t, h, w)) = check_npy_shape(&state.limits, checked.1.len(), &header)? else {
        // Points are small: buffer them and use the one full check.
        while let Some(chunk) = body.next_chunk().await? {
            if head.len() + chunk.len() > total {
                return Err(ScoreError::from_npy(npy::NpyError::DataLength {
                    expected: header.data_len,
                    got: head.len() + chunk.len() - header.data_offset,
                })
                .into());
            }
            head.extend_from_slice(&chunk);
        }
        return score_buffered(checked, content_type, head, max)
            .await
            .map(|s| s.result);
    };
    let prepared = prepared_maps(state, &checked, w, h).await?;
    let scorer = scoring::MapScorer::new(prepared, header.dtype, n, t)?;
    let block_bytes = scorer.block_candidates() * scorer.candidate_bytes();
    // Blocks go to one blocking worker through a channel of two: the upload goes on while a
    // block is scored, and at most three blocks are held at once.
    let (tx, mut rx) = tokio::sync::mpsc::channel::<Vec<u8>>(2);
    let worker = super::heavy::spawn(move || {
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
        match body.next_chunk().await {
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
        .map_err(|e| ServiceError::Internal(e.to_string()))??;
    if sent_all && received != header.data_len {
        return Err(ScoreError::from_npy(npy::NpyError::DataLength {
            expected: header.data_len,
            got: received,
        })
        .into());
    }
    Ok(scorer.finish()?)
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
        let spec = scoring::spec_from_revision(&doc, 64, 48, &|_| None).expect("spec");
        let model = scoring::model(&spec).expect("model");
        std::sync::Arc::new((spec, model))
    }

    #[test]
    fn light_json_counts_the_worst_case_work_with_gradients() {
        // Point terms only: one distance per pair, twice with gradients. A body of L bytes
        // holds L / 4 pairs, so 4 · LIGHT_WORK / 2 bytes is the most work allows, but the
        // byte limit comes first.
        let points = checked(false);
        assert!(is_light_json(&points, LIGHT_JSON_BYTES));
        assert!(!is_light_json(&points, LIGHT_JSON_BYTES + 1));
        // With a mask on a 64-wide frame each pair counts 64 · 2: light up to
        // LIGHT_WORK / 128 pairs, LIGHT_WORK / 32 bytes.
        let mask = checked(true);
        let edge = LIGHT_WORK / 32;
        assert!(edge < LIGHT_JSON_BYTES);
        assert!(is_light_json(&mask, edge));
        assert!(!is_light_json(&mask, edge + 4));
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
