//! Goals and their immutable revisions, with optimistic concurrency through `If-Match`.

use super::auth::{Principal, Role};
use super::cameras::{self, CameraDoc};
use super::error::{ApiError, ApiResult};
use super::extract::JsonBody;
use super::{AppState, frames, items, parse_id, rfc3339};
use crate::images;
use crate::store::{self, goals::RevisionRow};
use axum::extract::{Path, State};
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use goalsmith_core::geometry::Polygon;
use goalsmith_core::goal::{
    CheckContext, GoalDocument, GoalSpec, Term, check_zone, polygon_centroid,
};
use serde_json::{Map, Value, json};
use sha2::{Digest, Sha256};

/// Serialises JSON with object keys sorted at every level and no whitespace: the canonical form
/// hashed into a revision's `sha256`, independent of serde_json feature flags.
pub fn canonical_json(v: &Value) -> String {
    fn write(v: &Value, out: &mut String) {
        match v {
            Value::Object(m) => {
                let mut keys: Vec<&String> = m.keys().collect();
                keys.sort();
                out.push('{');
                for (i, k) in keys.iter().enumerate() {
                    if i > 0 {
                        out.push(',');
                    }
                    out.push_str(&Value::String((*k).clone()).to_string());
                    out.push(':');
                    write(&m[*k], out);
                }
                out.push('}');
            }
            Value::Array(a) => {
                out.push('[');
                for (i, x) in a.iter().enumerate() {
                    if i > 0 {
                        out.push(',');
                    }
                    write(x, out);
                }
                out.push(']');
            }
            other => out.push_str(&other.to_string()),
        }
    }
    let mut out = String::new();
    write(v, &mut out);
    out
}

/// The strong ETag of a stored revision: the SHA-256 of the exact bytes served.
pub fn etag_of(document: &str) -> String {
    format!("\"{}\"", hex::encode(Sha256::digest(document.as_bytes())))
}

/// Whether `If-Match` holds for the current `etag` (strong comparison, `*` matches anything);
/// 428 when the header is missing.
pub fn if_match(headers: &HeaderMap, etag: &str) -> ApiResult<bool> {
    let Some(value) = headers.get(header::IF_MATCH) else {
        return Err(ApiError::PreconditionRequired);
    };
    Ok(value
        .to_str()
        .unwrap_or("")
        .split(',')
        .map(str::trim)
        .any(|t| t == "*" || t == etag))
}

/// Whether `If-None-Match` matches `etag` (so a 304 can be sent).
pub fn if_none_match(headers: &HeaderMap, etag: &str) -> bool {
    headers
        .get_all(header::IF_NONE_MATCH)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .flat_map(|v| v.split(','))
        .map(str::trim)
        .any(|t| t == "*" || t == etag || t.strip_prefix("W/") == Some(etag))
}

/// Loads the frame and camera a goal document refers to, and checks the document against them.
pub async fn check_document(
    state: &AppState,
    who: &Principal,
    doc: GoalDocument,
) -> ApiResult<(GoalSpec, CameraDoc)> {
    let frame = match frames::load(state, who, &doc.frame_id).await {
        Ok(f) => f,
        Err(ApiError::NotFound(_)) => {
            return Err(ApiError::invalid(
                "unknown_frame",
                "frame_id",
                format!("no frame with id {:?} in this team", doc.frame_id),
            ));
        }
        Err(e) => return Err(e),
    };
    let camera_row = cameras::load(state, who, &frame.camera_id).await?;
    let camera = cameras::parse_doc(&camera_row)?;
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
    let limits = state.limits.clone();
    // Mask decoding and checks are CPU work: keep them off the async workers.
    let spec = tokio::task::spawn_blocking(move || {
        let decode_mask =
            |b64: &str| images::decode_mask(b64, limits.max_image_side, limits.max_decode_bytes);
        // Reward fits arrive with the demonstrations work; until then no id exists.
        let reward_fit_exists = |_: &str| false;
        GoalSpec::check(
            doc,
            &CheckContext {
                width: w,
                height: h,
                safe_zone: safe_zone.as_ref(),
                no_go_zones: &no_go,
                decode_mask: &decode_mask,
                reward_fit_exists: &reward_fit_exists,
            },
        )
    })
    .await
    .map_err(|e| ApiError::Internal(format!("goal check task failed: {e}")))??;
    Ok((spec, camera))
}

fn to_value<T: serde::Serialize>(v: &T) -> ApiResult<Value> {
    serde_json::to_value(v).map_err(|e| ApiError::Internal(e.to_string()))
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
        Term::Region { polygon, .. } => polygon_centroid(polygon)
            .map(|c| vec![("centroid".to_string(), c)])
            .unwrap_or_default(),
        Term::Mask { mask, .. } => {
            let (mut sx, mut sy, mut n) = (0.0, 0.0, 0.0);
            for j in 0..mask.height() {
                for i in 0..mask.width() {
                    if mask.is_inside(i, j) {
                        sx += i as f64;
                        sy += j as f64;
                        n += 1.0;
                    }
                }
            }
            if n > 0.0 {
                vec![("centroid".into(), [sx / n, sy / n])]
            } else {
                vec![]
            }
        }
        Term::Learned { .. } => vec![],
    }
}

/// The `derived` section: source points in cost-map order, rigid fits, 3-D targets, warnings.
pub fn derived(spec: &GoalSpec, camera: &CameraDoc) -> Value {
    let points: Vec<Value> = spec
        .source_points()
        .iter()
        .enumerate()
        .map(|(p, s)| {
            json!({
                "index": p,
                "term": s.term,
                "kind": spec.terms()[s.term].term_kind(),
                "source": s.source.to_array(),
                "weight": s.weight,
                "tolerance_px": s.tolerance_px,
            })
        })
        .collect();
    let rigid: Vec<Value> = spec
        .terms()
        .iter()
        .enumerate()
        .filter_map(|(i, t)| match &t.term {
            Term::Rigid { fit, .. } => Some(json!({
                "term": i,
                "rotation_deg": fit.rotation_deg(),
                "scale": fit.scale,
                "translation": fit.translation,
                "rotation": fit.rotation,
                "rms_px": fit.rms,
                "residuals_px": fit.residuals,
            })),
            _ => None,
        })
        .collect();
    let mut out = json!({
        "points": points,
        "rigid": rigid,
        "warnings": spec.warnings(),
    });
    if let (Some(intr), Some(plane)) = (camera.intrinsics(), camera.work_plane()) {
        let pose = camera.pose();
        let mut targets = Vec::new();
        for (i, t) in spec.terms().iter().enumerate() {
            for (which, px) in target_pixels(&t.term) {
                let Some(cam) = goalsmith_core::camera::pixel_to_plane(&intr, &plane, px) else {
                    continue;
                };
                let mut v = json!({"term": i, "point": which, "pixel": px, "camera_m": cam});
                if let Some(pose) = &pose {
                    v["base_m"] = json!(pose.camera_to_base(cam));
                }
                targets.push(v);
            }
        }
        out["targets_3d"] = Value::Array(targets);
    }
    out
}

/// Builds the stored row (and so the served document) of a checked revision.
pub fn build_revision(
    goal_id: &str,
    revision: i64,
    spec: &GoalSpec,
    camera: &CameraDoc,
    author: &str,
    created_at: i64,
) -> ApiResult<RevisionRow> {
    let doc = spec.normalized_document();
    let spec_value = json!({
        "name": doc.name,
        "frame_id": doc.frame_id,
        "terms": to_value(&doc.terms)?,
        "cost": to_value(&doc.cost)?,
        "override_safety": doc.override_safety,
    });
    let sha256 = hex::encode(Sha256::digest(canonical_json(&spec_value).as_bytes()));
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
    m.insert("derived".into(), derived(spec, camera));
    Ok(RevisionRow {
        goal_id: goal_id.to_string(),
        revision,
        frame_id: doc.frame_id.clone(),
        name: doc.name.clone(),
        sha256,
        author: author.to_string(),
        note,
        override_safety: doc.override_safety,
        document: canonical_json(&Value::Object(m)),
        created_at,
    })
}

fn revision_response(status: StatusCode, rev: &RevisionRow) -> Response {
    let mut resp = (
        status,
        [(
            header::CONTENT_TYPE,
            HeaderValue::from_static("application/json"),
        )],
        rev.document.clone(),
    )
        .into_response();
    if let Ok(v) = HeaderValue::from_str(&etag_of(&rev.document)) {
        resp.headers_mut().insert(header::ETAG, v);
    }
    resp
}

/// `POST /api/goals`.
pub async fn create(
    State(state): State<AppState>,
    who: Principal,
    JsonBody(doc): JsonBody<GoalDocument>,
) -> ApiResult<Response> {
    who.require(Role::Editor)?;
    let (spec, camera) = check_document(&state, &who, doc).await?;
    let goal_id = uuid::Uuid::new_v4().to_string();
    let rev = build_revision(&goal_id, 1, &spec, &camera, &who.author, store::now_ms())?;
    store::goals::create(state.store.pool(), &who.team_id, &rev).await?;
    let mut resp = revision_response(StatusCode::CREATED, &rev);
    if let Ok(v) = HeaderValue::from_str(&format!("/api/goals/{goal_id}/revisions/1")) {
        resp.headers_mut().insert(header::LOCATION, v);
    }
    Ok(resp)
}

/// `PUT /api/goals/{id}` with `If-Match`: a new revision, or 412 with nothing written.
pub async fn update(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    headers: HeaderMap,
    JsonBody(doc): JsonBody<GoalDocument>,
) -> ApiResult<Response> {
    who.require(Role::Editor)?;
    let latest = load_revision(&state, &who, &id, None).await?;
    if !if_match(&headers, &etag_of(&latest.document))? {
        return Err(stale(&latest));
    }
    let (spec, camera) = check_document(&state, &who, doc).await?;
    let next = latest.revision + 1;
    let rev = build_revision(
        &latest.goal_id,
        next,
        &spec,
        &camera,
        &who.author,
        store::now_ms(),
    )?;
    if !store::goals::append(state.store.pool(), &who.team_id, latest.revision, &rev).await? {
        let now = load_revision(&state, &who, &id, None).await?;
        return Err(stale(&now));
    }
    Ok(revision_response(StatusCode::OK, &rev))
}

fn stale(latest: &RevisionRow) -> ApiError {
    ApiError::PreconditionFailed(format!(
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
) -> ApiResult<RevisionRow> {
    let id = parse_id(id, "goal")?;
    store::goals::get_revision(state.store.pool(), &who.team_id, &id, revision)
        .await?
        .ok_or_else(|| match revision {
            Some(n) => ApiError::NotFound(format!("goal {id} has no revision {n}")),
            None => ApiError::NotFound(format!("no goal with id {id}")),
        })
}

/// Parses the `{n}` of a revision path.
/// Only canonical decimal numbers name a revision (`1`, not `01` or `+1`): one revision, one URL.
pub fn parse_revision(n: &str) -> ApiResult<i64> {
    Some(n)
        .filter(|s| s.bytes().all(|b| b.is_ascii_digit()) && !s.starts_with('0'))
        .and_then(|s| s.parse::<i64>().ok())
        .filter(|n| *n >= 1)
        .ok_or_else(|| ApiError::NotFound(format!("{n:?} is not a revision number")))
}

/// `GET /api/goals/{id}`: the latest revision.
pub async fn latest(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
    headers: HeaderMap,
) -> ApiResult<Response> {
    let rev = load_revision(&state, &who, &id, None).await?;
    conditional(&headers, &rev)
}

/// `GET /api/goals/{id}/revisions/{n}`: immutable, strong ETag, 304 on a match.
pub async fn revision(
    State(state): State<AppState>,
    who: Principal,
    Path((id, n)): Path<(String, String)>,
    headers: HeaderMap,
) -> ApiResult<Response> {
    let rev = load_revision(&state, &who, &id, Some(parse_revision(&n)?)).await?;
    let mut resp = conditional(&headers, &rev)?;
    resp.headers_mut().insert(
        header::CACHE_CONTROL,
        HeaderValue::from_static("private, max-age=31536000, immutable"),
    );
    Ok(resp)
}

fn conditional(headers: &HeaderMap, rev: &RevisionRow) -> ApiResult<Response> {
    let etag = etag_of(&rev.document);
    if if_none_match(headers, &etag) {
        return Ok((StatusCode::NOT_MODIFIED, [(header::ETAG, etag)]).into_response());
    }
    Ok(revision_response(StatusCode::OK, rev))
}

/// `GET /api/goals/{id}/revisions`: metadata of every revision, oldest first.
pub async fn revisions(
    State(state): State<AppState>,
    who: Principal,
    Path(id): Path<String>,
) -> ApiResult<axum::Json<Value>> {
    let id = parse_id(&id, "goal")?;
    let rows = store::goals::list_revisions(state.store.pool(), &who.team_id, &id).await?;
    if rows.is_empty() {
        return Err(ApiError::NotFound(format!("no goal with id {id}")));
    }
    Ok(items(
        rows.iter()
            .map(|r| {
                json!({
                    "goal_id": r.goal_id,
                    "revision": r.revision,
                    "name": r.name,
                    "frame_id": r.frame_id,
                    "author": r.author,
                    "note": r.note,
                    "created_at": rfc3339(r.created_at),
                    "sha256": r.sha256,
                    "override_safety": r.override_safety,
                    "etag": etag_of(&r.document),
                })
            })
            .collect(),
    ))
}

/// `GET /api/goals`: the team's goals, most recently changed first.
pub async fn list(State(state): State<AppState>, who: Principal) -> ApiResult<axum::Json<Value>> {
    let rows = store::goals::list(state.store.pool(), &who.team_id).await?;
    Ok(items(
        rows.iter()
            .map(|g| {
                json!({
                    "id": g.id,
                    "name": g.name,
                    "frame_id": g.frame_id,
                    "revision": g.revision,
                    "author": g.author,
                    "sha256": g.sha256,
                    "created_at": rfc3339(g.created_at),
                    "updated_at": rfc3339(g.updated_at),
                })
            })
            .collect(),
    ))
}
