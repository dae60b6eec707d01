//! Goals and their immutable revisions: the check of a document against its frame and camera,
//! the stored form of a revision, and writes under optimistic concurrency.

use super::auth::{Principal, Role};
use super::cameras::{self, CameraDoc};
use super::error::{ServiceError, ServiceResult};
use super::heavy::{Cancel, Stop};
use super::{AppState, frames, parse_id, rfc3339};
use crate::images;
use crate::store::{self, goals::RevisionRow};
use goalsmith_core::canonical;
use goalsmith_core::cost::RewardGrid;
use goalsmith_core::geometry::Polygon;
use goalsmith_core::goal::{
    CheckContext, CostDocument, GoalDocument, GoalSpec, Term, TermDocument, check_zone,
};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::{Map, Value, json};
use sha2::{Digest, Sha256};
use std::collections::HashMap;
use std::sync::Arc;

/// The strong ETag of a stored revision: the SHA-256 of the exact bytes served.
pub fn etag_of(document: &str) -> String {
    format!("\"{}\"", hex::encode(Sha256::digest(document.as_bytes())))
}

/// Loads the frame and camera a goal document refers to, and checks the document against them.
pub async fn check_document(
    state: &AppState,
    who: &Principal,
    doc: GoalDocument,
) -> ServiceResult<(GoalSpec, CameraDoc)> {
    let frame = match frames::load(state, who, &doc.frame_id).await {
        Ok(f) => f,
        Err(ServiceError::NotFound(_)) => {
            return Err(ServiceError::invalid(
                "unknown_frame",
                "frame_id",
                format!("no frame with id {:?} in this team", doc.frame_id),
            ));
        }
        Err(e) => return Err(e),
    };
    let camera_row = cameras::load(state, who, &frame.camera_id).await?;
    let camera = cameras::parse_doc(&camera_row)?;
    let limits = state.limits.clone();
    let learned: Vec<&str> = doc
        .terms
        .iter()
        .filter_map(|t| match t {
            goalsmith_core::goal::TermDocument::Learned { reward_fit_id, .. } => {
                Some(reward_fit_id.as_str())
            }
            _ => None,
        })
        .collect();
    let grids = super::reward_fits::grids_for(state, who, &frame.id, learned).await?;
    // Decoding masks is image decoding, heavy work under the shared permits; a document
    // without masks checks in a bounded, small time and does not queue behind heavy work.
    let has_masks = doc
        .terms
        .iter()
        .any(|t| matches!(t, TermDocument::Mask { .. }));
    let permit = if has_masks {
        Some(state.heavy_permits.acquire().await?)
    } else {
        None
    };
    // Part of the handler's future: a client that hangs up drops it, and the check stops
    // before its next mask.
    let cancel = Cancel::new();
    let stop = cancel.flag();
    // Mask decoding and checks are CPU work: keep them off the async workers.
    let checked = super::heavy::spawn(move || {
        let _permit = permit;
        let spec = check_against_camera_until(doc, &camera, &limits, &grids, &stop)?;
        Ok((spec, camera))
    })
    .await
    .map_err(|e| ServiceError::Internal(format!("goal check task failed: {e}")))?;
    drop(cancel);
    checked
}

/// What a mask decoder answers once the client has hung up; nobody reads it.
const STOPPED: &str = "the check stopped: the client hung up";

/// The check of [`check_document`] once the camera and the reward grids of the document's
/// learned terms are loaded: the camera's zones, then every rule of [`GoalSpec::check`], masks
/// decoded under `limits`. Blocking CPU work; the fuzz target `goal_document` calls it too.
pub fn check_against_camera(
    doc: GoalDocument,
    camera: &CameraDoc,
    limits: &crate::config::Limits,
    grids: &HashMap<String, Arc<RewardGrid>>,
) -> ServiceResult<GoalSpec> {
    check_against_camera_until(doc, camera, limits, grids, &Stop::never())
}

/// [`check_against_camera`], given up before the next mask once `stop` is set.
fn check_against_camera_until(
    doc: GoalDocument,
    camera: &CameraDoc,
    limits: &crate::config::Limits,
    grids: &HashMap<String, Arc<RewardGrid>>,
    stop: &Stop,
) -> ServiceResult<GoalSpec> {
    let (w, h) = (camera.width, camera.height);
    let safe_zone = camera
        .safe_zone
        .as_ref()
        .map(|z| check_zone(w, h, z, "camera.safe_zone"))
        .transpose()?;
    let no_go: Vec<Polygon> = camera
        .no_go_zones
        .iter()
        .map(|z| check_zone(w, h, z, "camera.no_go_zones"))
        .collect::<Result<_, _>>()?;
    let decode_mask = |b64: &str| {
        if stop.is_set() {
            return Err(STOPPED.to_string());
        }
        images::decode_mask(b64, limits.max_image_side, limits.max_decode_bytes)
    };
    let reward_grid = |id: &str| grids.get(id).cloned();
    Ok(GoalSpec::check(
        doc,
        &CheckContext {
            width: w,
            height: h,
            safe_zone: safe_zone.as_ref(),
            no_go_zones: &no_go,
            decode_mask: &decode_mask,
            reward_grid: &reward_grid,
        },
    )?)
}

fn to_value<T: serde::Serialize>(v: &T) -> ServiceResult<Value> {
    serde_json::to_value(v).map_err(|e| ServiceError::Internal(e.to_string()))
}

/// A representative target pixel of each term for 3-D targets: the target itself for points and
/// rigid moves, the area centroid for regions and masks.
fn target_pixels(term: &Term) -> Vec<(String, [f64; 2])> {
    match term {
        Term::Point { target, .. } => vec![("target".into(), target.to_array())],
        Term::Rigid { targets, .. } => targets
            .iter()
            .enumerate()
            .map(|(k, t)| (format!("targets[{k}]"), t.to_array()))
            .collect(),
        Term::Region { polygon, .. } => polygon
            .centroid()
            .map(|c| vec![("centroid".to_string(), c)])
            .unwrap_or_default(),
        Term::Mask { mask, .. } => mask
            .centroid()
            .map(|c| vec![("centroid".to_string(), c)])
            .unwrap_or_default(),
        Term::Learned { .. } => vec![],
    }
}

/// A revision document as served. The server does not serialise this struct: a revision is
/// stored, hashed and served as the exact canonical bytes [`build_revision`] wrote. It describes
/// those bytes for the OpenAPI document, and a test parses a built revision into it (unknown
/// fields refused) and back to the same value, so the two cannot drift.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct RevisionDocument {
    /// Who saved it (a person's name or a token's label).
    pub author: String,
    /// The cost settings, defaults filled in.
    pub cost: CostDocument,
    /// When it was saved, RFC 3339 UTC.
    pub created_at: String,
    /// What the server derived from the goal when it was saved.
    pub derived: Derived,
    /// The frame the goal is drawn on.
    pub frame_id: String,
    /// Present on a revision made from a demonstration (`POST /api/demos/{id}/goal`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub from_demo: Option<FromDemo>,
    /// The goal's id.
    pub goal_id: String,
    /// The goal's name, trimmed.
    pub name: String,
    /// Why this revision was made ("" when no note was given).
    pub note: String,
    /// Whether the safety zones were overridden (recorded in `derived.warnings`).
    pub override_safety: bool,
    /// Revision number, from 1.
    pub revision: i64,
    /// SHA-256 of the canonical specification (name, frame, terms, cost, override flag): the same
    /// goal saved twice has the same `sha256` (but a new ETag).
    pub sha256: String,
    /// The terms, weights and tolerances filled in; cost maps follow this order.
    pub terms: Vec<TermDocument>,
}

/// The `derived` section of a revision: source points in cost-map order, rigid fits, 3-D
/// targets and warnings.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Derived {
    /// Every source point over all terms, in cost-map order (P entries).
    pub points: Vec<DerivedPoint>,
    /// The fitted transform of each rigid term.
    pub rigid: Vec<DerivedRigid>,
    /// Target pixels on the camera's work plane; absent unless the camera has intrinsics and a
    /// work plane.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub targets_3d: Option<Vec<Target3d>>,
    /// Why the goal would have been refused without `override_safety`.
    pub warnings: Vec<String>,
}

/// One source point of [`Derived`].
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct DerivedPoint {
    /// Its index p in the cost maps.
    pub index: usize,
    /// Its term's kind.
    pub kind: String,
    /// The source pixel `[x, y]`.
    pub source: [f64; 2],
    /// Index of its term.
    pub term: usize,
    /// Success radius, pixels.
    pub tolerance_px: f64,
    /// Its share of the term's weight.
    pub weight: f64,
}

/// The fit of one rigid term: target ≈ scale · rotation · source + translation.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct DerivedRigid {
    /// |fitted(source_i) − target_i| per point, pixels.
    pub residuals_px: Vec<f64>,
    /// Root mean square of the residuals, pixels.
    pub rms_px: f64,
    /// 2×2 rotation, row-major.
    pub rotation: [[f64; 2]; 2],
    /// The rotation's angle in image coordinates (x right, y down), degrees.
    pub rotation_deg: f64,
    /// Scale factor (1 unless the term allows scale).
    pub scale: f64,
    /// Index of the term.
    pub term: usize,
    /// Translation, pixels.
    pub translation: [f64; 2],
}

/// A target pixel on the work plane.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Target3d {
    /// The point in the robot base frame, metres; absent without a camera pose.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub base_m: Option<[f64; 3]>,
    /// The point in camera coordinates, metres.
    pub camera_m: [f64; 3],
    /// The target pixel.
    pub pixel: [f64; 2],
    /// Which point of the term: `target`, `targets[k]` or `centroid`.
    pub point: String,
    /// Index of the term.
    pub term: usize,
}

/// The `derived` section: source points in cost-map order, rigid fits, 3-D targets, warnings.
pub fn derived(spec: &GoalSpec, camera: &CameraDoc) -> Derived {
    let points = spec
        .source_points()
        .iter()
        .enumerate()
        .map(|(p, s)| DerivedPoint {
            index: p,
            kind: spec.terms()[s.term].term_kind().to_string(),
            source: s.source.to_array(),
            term: s.term,
            tolerance_px: s.tolerance_px,
            weight: s.weight,
        })
        .collect();
    let rigid = spec
        .terms()
        .iter()
        .enumerate()
        .filter_map(|(i, t)| match &t.term {
            Term::Rigid { fit, .. } => Some(DerivedRigid {
                residuals_px: fit.residuals.clone(),
                rms_px: fit.rms,
                rotation: fit.rotation,
                rotation_deg: fit.rotation_deg(),
                scale: fit.scale,
                term: i,
                translation: fit.translation,
            }),
            _ => None,
        })
        .collect();
    let targets_3d = match (camera.intrinsics(), camera.work_plane()) {
        (Some(intr), Some(plane)) => {
            let pose = camera.pose();
            let mut targets = Vec::new();
            for (i, t) in spec.terms().iter().enumerate() {
                for (which, px) in target_pixels(&t.term) {
                    let Some(cam) = goalsmith_core::camera::pixel_to_plane(&intr, &plane, px)
                    else {
                        continue;
                    };
                    targets.push(Target3d {
                        base_m: pose.as_ref().map(|p| p.camera_to_base(cam)),
                        camera_m: cam,
                        pixel: px,
                        point: which,
                        term: i,
                    });
                }
            }
            Some(targets)
        }
        _ => None,
    };
    Derived {
        points,
        rigid,
        targets_3d,
        warnings: spec.warnings().to_vec(),
    }
}

/// Builds the stored row (and so the served document) of a checked revision.
pub fn build_revision(
    goal_id: &str,
    revision: i64,
    spec: &GoalSpec,
    camera: &CameraDoc,
    author: &str,
    created_at: i64,
) -> ServiceResult<RevisionRow> {
    build_revision_from(goal_id, revision, spec, camera, author, created_at, None)
}

/// Where a goal made from a demonstration came from, recorded in its first revision.
#[derive(Debug, Clone, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct FromDemo {
    /// The demo.
    pub demo_id: String,
    /// Its frame that became the goal's frame (the sources are the tracks' positions there).
    pub start_frame: i64,
    /// Its frame whose positions became the targets.
    pub end_frame: i64,
    /// The tracks, in term order.
    pub tracks: Vec<String>,
}

/// [`build_revision`] of a goal made from a demonstration (`from_demo` is kept in the document).
pub fn build_revision_from(
    goal_id: &str,
    revision: i64,
    spec: &GoalSpec,
    camera: &CameraDoc,
    author: &str,
    created_at: i64,
    from_demo: Option<&FromDemo>,
) -> ServiceResult<RevisionRow> {
    let doc = spec.normalized_document();
    let spec_value = json!({
        "name": doc.name,
        "frame_id": doc.frame_id,
        "terms": to_value(&doc.terms)?,
        "cost": to_value(&doc.cost)?,
        "override_safety": doc.override_safety,
    });
    let sha256 = hex::encode(Sha256::digest(canonical::to_string(&spec_value).as_bytes()));
    let note = doc.note.clone().unwrap_or_default();
    let mut m = Map::new();
    m.insert("goal_id".into(), json!(goal_id));
    m.insert("revision".into(), json!(revision));
    m.insert("name".into(), json!(doc.name));
    m.insert("frame_id".into(), json!(doc.frame_id));
    m.insert("terms".into(), spec_value["terms"].clone());
    m.insert("cost".into(), spec_value["cost"].clone());
    m.insert("note".into(), json!(note));
    m.insert("override_safety".into(), json!(doc.override_safety));
    m.insert("author".into(), json!(author));
    m.insert("created_at".into(), json!(rfc3339(created_at)));
    m.insert("sha256".into(), json!(sha256));
    m.insert("derived".into(), to_value(&derived(spec, camera))?);
    if let Some(f) = from_demo {
        m.insert("from_demo".into(), to_value(f)?);
    }
    Ok(RevisionRow {
        goal_id: goal_id.to_string(),
        revision,
        frame_id: doc.frame_id.clone(),
        name: doc.name.clone(),
        sha256,
        author: author.to_string(),
        note,
        override_safety: doc.override_safety,
        document: canonical::to_string(&Value::Object(m)),
        created_at,
    })
}

fn stale(latest: &RevisionRow) -> ServiceError {
    ServiceError::PreconditionFailed(format!(
        "the goal changed since you loaded it: revision {} by {} is now the latest; reload it and \
         apply your change again",
        latest.revision, latest.author
    ))
}

/// A team's goal revision (`None`: the latest) or 404.
pub async fn load_revision(
    state: &AppState,
    who: &Principal,
    id: &str,
    revision: Option<i64>,
) -> ServiceResult<RevisionRow> {
    let id = parse_id(id, "goal")?;
    if let Some(n) = revision
        && let Some(row) = state.revisions.get(&who.team_id, &id, n)
    {
        return Ok(RevisionRow::clone(&row));
    }
    let row = store::goals::get_revision(&state.store, &who.team_id, &id, revision)
        .await?
        .ok_or_else(|| match revision {
            Some(n) => ServiceError::NotFound(format!("goal {id} has no revision {n}")),
            None => ServiceError::NotFound(format!("no goal with id {id}")),
        })?;
    // The latest revision is read by number too once known; a numbered one never changes.
    state
        .revisions
        .put(&who.team_id, std::sync::Arc::new(row.clone()));
    Ok(row)
}

/// Parses the `{n}` of a revision path.
/// Only canonical decimal numbers name a revision (`1`, not `01` or `+1`): one revision, one URL.
pub fn parse_revision(n: &str) -> ServiceResult<i64> {
    Some(n)
        .filter(|s| s.bytes().all(|b| b.is_ascii_digit()) && !s.starts_with('0'))
        .and_then(|s| s.parse::<i64>().ok())
        .filter(|n| *n >= 1)
        .ok_or_else(|| ServiceError::NotFound(format!("{n:?} is not a revision number")))
}

/// One entry of `GET /api/goals/{id}/revisions`.
// Fields in alphabetical order: the key order of these bodies when they were built as a
// `serde_json::Value` (a sorted map in release builds), so the served bytes did not change.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct RevisionSummary {
    /// Who saved it.
    pub author: String,
    /// When, RFC 3339 UTC.
    pub created_at: String,
    /// The revision's strong ETag (quoted), for `If-Match`.
    pub etag: String,
    /// Its frame.
    pub frame_id: String,
    /// The goal's id.
    pub goal_id: String,
    /// The goal's name at this revision.
    pub name: String,
    /// Why it was made.
    pub note: String,
    /// Whether the safety zones were overridden.
    pub override_safety: bool,
    /// Revision number.
    pub revision: i64,
    /// SHA-256 of its canonical specification.
    pub sha256: String,
}

/// One entry of `GET /api/goals`.
// Fields in alphabetical order: the key order of these bodies when they were built as a
// `serde_json::Value` (a sorted map in release builds), so the served bytes did not change.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct GoalListItem {
    /// Author of the latest revision.
    pub author: String,
    /// When revision 1 was saved, RFC 3339 UTC.
    pub created_at: String,
    /// Frame of the latest revision.
    pub frame_id: String,
    /// The goal's id.
    pub id: String,
    /// Latest name.
    pub name: String,
    /// Latest revision number.
    pub revision: i64,
    /// SHA-256 of the latest specification.
    pub sha256: String,
    /// When the latest revision was saved, RFC 3339 UTC.
    pub updated_at: String,
}

/// What a writer saw before changing a goal: the check of optimistic concurrency.
pub enum Expected {
    /// Nothing said: refused with 428 (a goal is changed at a named revision).
    Missing,
    /// The ETags of `If-Match` (strong comparison); the write goes ahead when one of them is
    /// the latest revision's.
    Etags(Vec<String>),
}

impl Expected {
    fn holds_for(&self, latest: &RevisionRow) -> ServiceResult<bool> {
        self.holds_for_document(&latest.document)
    }

    /// Whether the writer saw the stored `document` (by its ETag); 428 when nothing was said.
    pub fn holds_for_document(&self, document: &str) -> ServiceResult<bool> {
        match self {
            Expected::Missing => Err(ServiceError::PreconditionRequired),
            Expected::Etags(tags) => {
                let etag = etag_of(document);
                Ok(tags.contains(&etag))
            }
        }
    }
}

/// Creates a goal: its revision 1.
pub async fn create(
    state: &AppState,
    who: &Principal,
    doc: GoalDocument,
) -> ServiceResult<RevisionRow> {
    who.require(Role::Editor)?;
    let (spec, camera) = check_document(state, who, doc).await?;
    let goal_id = uuid::Uuid::new_v4().to_string();
    let rev = build_revision(&goal_id, 1, &spec, &camera, &who.author, store::now_ms())?;
    store::goals::create(&state.store, &who.team_id, &rev).await?;
    Ok(rev)
}

/// A new revision of a goal, written only while `expected` holds for the latest revision
/// (else 412 with nothing written, also when another writer wins the race).
pub async fn update(
    state: &AppState,
    who: &Principal,
    id: &str,
    expected: &Expected,
    doc: GoalDocument,
) -> ServiceResult<RevisionRow> {
    who.require(Role::Editor)?;
    let latest = load_revision(state, who, id, None).await?;
    if !expected.holds_for(&latest)? {
        return Err(stale(&latest));
    }
    let (spec, camera) = check_document(state, who, doc).await?;
    let rev = build_revision(
        &latest.goal_id,
        latest.revision + 1,
        &spec,
        &camera,
        &who.author,
        store::now_ms(),
    )?;
    if !store::goals::append(&state.store, &who.team_id, latest.revision, &rev).await? {
        let now = load_revision(state, who, id, None).await?;
        return Err(stale(&now));
    }
    Ok(rev)
}

/// Code of the refusal to restore a revision with a safety override that the person restoring
/// has not taken on.
pub const OVERRIDE_UNCONFIRMED: &str = "override_unconfirmed";

/// Makes revision `from` the content of a new revision, through [`update`]'s checked path.
///
/// An override of the safety zones is a decision of the person who made it; restoring such a
/// revision makes a new revision under the restorer's name, so they must take the override on
/// themselves (`confirm_override`), else nothing is written.
pub async fn restore(
    state: &AppState,
    who: &Principal,
    id: &str,
    from: i64,
    expected: &Expected,
    note: &str,
    confirm_override: bool,
) -> ServiceResult<RevisionRow> {
    who.require(Role::Editor)?;
    let old = load_revision(state, who, id, Some(from)).await?;
    let doc: RevisionDocument = serde_json::from_str(&old.document)
        .map_err(|e| ServiceError::Internal(format!("revision unreadable: {e}")))?;
    if doc.override_safety && !confirm_override {
        return Err(ServiceError::invalid(
            OVERRIDE_UNCONFIRMED,
            "confirm_override",
            format!(
                "revision {from} overrides the camera's safety zones; restoring it puts the \
                 override under your name, so confirm that you take it on"
            ),
        ));
    }
    let note = match note.trim() {
        "" => format!("restored revision {from}"),
        t => format!("restored revision {from}: {t}"),
    };
    let document: GoalDocument = serde_json::from_value(json!({
        "name": doc.name,
        "frame_id": doc.frame_id,
        "terms": doc.terms,
        "cost": doc.cost,
        "note": note,
        "override_safety": doc.override_safety,
    }))
    .map_err(|e| ServiceError::Internal(format!("old revision does not parse: {e}")))?;
    update(state, who, &old.goal_id, expected, document).await
}

/// Metadata of every revision of a goal, oldest first.
pub async fn revisions(
    state: &AppState,
    who: &Principal,
    id: &str,
) -> ServiceResult<Vec<RevisionSummary>> {
    let id = parse_id(id, "goal")?;
    let rows = store::goals::list_revisions(&state.store, &who.team_id, &id).await?;
    if rows.is_empty() {
        return Err(ServiceError::NotFound(format!("no goal with id {id}")));
    }
    Ok(rows
        .iter()
        .map(|r| RevisionSummary {
            author: r.author.clone(),
            created_at: rfc3339(r.created_at),
            etag: etag_of(&r.document),
            frame_id: r.frame_id.clone(),
            goal_id: r.goal_id.clone(),
            name: r.name.clone(),
            note: r.note.clone(),
            override_safety: r.override_safety,
            revision: r.revision,
            sha256: r.sha256.clone(),
        })
        .collect())
}

/// The team's goals, most recently changed first.
pub async fn list(state: &AppState, who: &Principal) -> ServiceResult<Vec<GoalListItem>> {
    let rows = store::goals::list(&state.store, &who.team_id).await?;
    Ok(rows
        .iter()
        .map(|g| GoalListItem {
            author: g.author.clone(),
            created_at: rfc3339(g.created_at),
            frame_id: g.frame_id.clone(),
            id: g.id.clone(),
            name: g.name.clone(),
            revision: g.revision,
            sha256: g.sha256.clone(),
            updated_at: rfc3339(g.updated_at),
        })
        .collect())
}

/// The team's goals as stored, most recently changed first (for lists).
pub async fn summaries(
    state: &AppState,
    who: &Principal,
) -> ServiceResult<Vec<store::goals::GoalSummary>> {
    Ok(store::goals::list(&state.store, &who.team_id).await?)
}

/// Every revision of a team's goal as stored, oldest first.
pub async fn revision_rows(
    state: &AppState,
    who: &Principal,
    goal_id: &str,
) -> ServiceResult<Vec<RevisionRow>> {
    Ok(store::goals::list_revisions(&state.store, &who.team_id, goal_id).await?)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A calibrated, posed camera and a checked goal with point, region and rigid terms, one
    /// target outside the safe zone (overridden, so the revision carries a warning).
    fn fixture() -> (GoalSpec, CameraDoc) {
        let camera: CameraDoc = serde_json::from_value(json!({
            "name": "bench overhead", "width": 64, "height": 48,
            "intrinsics": {"fx": 50.0, "fy": 50.0, "cx": 31.5, "cy": 23.5,
                           "distortion": [0.01, -0.002, 0.0, 0.0, 0.0]},
            "work_plane": {"normal": [0.0, 0.0, 1.0], "offset_m": 0.4},
            "pose_in_base": {"rotation": [[1.0, 0.0, 0.0], [0.0, -1.0, 0.0], [0.0, 0.0, -1.0]],
                             "translation_m": [0.4, 0.0, 0.9]},
            "safe_zone": [[0.0, 0.0], [50.0, 0.0], [50.0, 47.0], [0.0, 47.0]],
            "no_go_zones": []
        }))
        .expect("camera fixture");
        let doc: GoalDocument = serde_json::from_value(json!({
            "name": " pots onto the mat ", "frame_id": "f0a1b2c3-0000-4000-8000-000000000001",
            "terms": [
                {"kind": "point", "label": "small pot", "source": [10.0, 12.0], "target": [60.0, 30.0]},
                {"kind": "region", "source": [20.0, 5.0], "polygon": [[30.0, 5.0], [45.0, 5.0], [45.0, 20.0], [30.0, 20.0]], "weight": 2.0},
                {"kind": "rigid", "label": "tray", "sources": [[0.0, 0.0], [1.0, 0.0], [0.0, 2.0]], "targets": [[10.0, 10.0], [9.0, 10.0], [10.0, 12.0]], "allow_scale": true}
            ],
            "cost": {"metric": "huber", "huber_delta_px": 3.0, "steps": "all"},
            "note": "first layout",
            "override_safety": true
        }))
        .expect("goal fixture");
        let safe = camera
            .safe_zone
            .as_ref()
            .map(|z| check_zone(64, 48, z, "safe_zone").expect("safe zone"));
        let no_masks = |_: &str| Err("no masks in this fixture".to_string());
        let no_fits = |_: &str| None;
        let spec = GoalSpec::check(
            doc,
            &CheckContext {
                width: 64,
                height: 48,
                safe_zone: safe.as_ref(),
                no_go_zones: &[],
                decode_mask: &no_masks,
                reward_grid: &no_fits,
            },
        )
        .expect("the fixture checks");
        (spec, camera)
    }

    /// The stored bytes of a revision are its identity (sha256, ETag): building one from fixed
    /// inputs must give the bytes it gave when this test was written.
    #[test]
    fn revision_bytes_do_not_change() {
        let (spec, camera) = fixture();
        assert!(!spec.warnings().is_empty(), "the fixture has a warning");
        let row = build_revision(
            "0b7e5c1a-0000-4000-8000-0000000000aa",
            3,
            &spec,
            &camera,
            "editor token",
            1_700_000_000_123,
        )
        .expect("build");
        assert_eq!(
            hex::encode(Sha256::digest(row.document.as_bytes())),
            "52b5486b859ad456c4b5df9454080978ccc619531edaff3134f659e0ef18641f",
            "{}",
            row.document
        );
    }

    /// [`RevisionDocument`] describes the stored bytes exactly: a built revision parses into it
    /// with unknown fields refused, and serialises back to the same value (nulls, absent fields
    /// and number kinds included).
    #[test]
    fn revision_document_describes_the_stored_bytes() {
        let (spec, mut camera) = fixture();
        for with_pose in [true, false] {
            if !with_pose {
                // Without a pose `base_m` is absent; without a plane `targets_3d` is.
                camera.pose_in_base = None;
            }
            let row = build_revision("g", 1, &spec, &camera, "a", 0).expect("build");
            let stored: Value = serde_json::from_str(&row.document).expect("stored JSON");
            let parsed: RevisionDocument =
                serde_json::from_str(&row.document).expect("the documented shape");
            assert_eq!(to_value(&parsed).expect("value"), stored);
        }
        camera.work_plane = None;
        let row = build_revision("g", 1, &spec, &camera, "a", 0).expect("build");
        let parsed: RevisionDocument = serde_json::from_str(&row.document).expect("shape");
        assert!(parsed.derived.targets_3d.is_none());
        assert_eq!(
            to_value(&parsed).expect("value"),
            serde_json::from_str::<Value>(&row.document).expect("stored JSON")
        );
    }
}
