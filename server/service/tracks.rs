//! Tracks: the path of one labelled point through a demonstration. A person places the point
//! on any frame; a durable operation follows it forwards and backwards with pyramidal
//! Lucas–Kanade and the forward–backward check (`goalsmith_core::track`); a correction at frame
//! k re-tracks the frames after k up to the next correction. Tracking never overwrites a sample
//! a person placed.

use super::auth::{Principal, Role};
use super::byte_lru::ByteLru;
use super::demos;
use super::error::{ServiceError, ServiceResult};
use super::operations::{self, Progress, RunError};
use super::{AppState, parse_frame_index, parse_id};
use crate::images;
use crate::store::{
    self,
    tracks::{Origin, SampleRow, TrackRow},
};
use goalsmith_core::names::{self, NameKind};
use goalsmith_core::track::{Pyramid, TrackParams, TrackSample, track_step};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};
use std::sync::Arc;

/// The operation kind of tracking.
pub const KIND: &str = "track";
/// Pyramid levels (level 0 included): four, as the tracker's default window and levels are set.
pub const LEVELS: usize = 4;

/// Grey-level pyramids of demo frames by the SHA-256 of the frame's image, bounded by bytes.
/// A pyramid depends only on the image (and [`LEVELS`]), so every track of a demo, and every
/// demo holding the same frame, uses the one built first; a correction re-tracking a few
/// frames finds them built. A demo longer than the budget holds is built again per track.
pub struct PyramidCache {
    entries: std::sync::Mutex<ByteLru<String, Arc<Pyramid>>>,
    built: std::sync::atomic::AtomicU64,
}

impl Default for PyramidCache {
    fn default() -> Self {
        Self::with_budget(crate::config::Limits::default().pyramid_cache_bytes)
    }
}

/// Bytes a pyramid holds: per pixel of level 0 (of an 8-bit frame) a byte and two `i16`
/// gradient sums, per pixel of each coarser level a grey value and a 2-vector gradient, `f32`
/// each ([`goalsmith_core::track::Level::bytes`]).
fn pyramid_bytes(p: &Pyramid) -> usize {
    (0..p.levels())
        .filter_map(|i| p.level(i))
        .map(|l| l.bytes())
        .sum::<usize>()
        + 256
}

impl PyramidCache {
    /// A cache of at most `budget` bytes of pyramids.
    pub fn with_budget(budget: usize) -> Self {
        Self {
            entries: std::sync::Mutex::new(ByteLru::new(budget)),
            built: std::sync::atomic::AtomicU64::new(0),
        }
    }

    /// The pyramid of the image `sha`, built by `build` only when it is not held.
    pub fn get_or_build<E>(
        &self,
        sha: &str,
        build: impl FnOnce() -> Result<Pyramid, E>,
    ) -> Result<Arc<Pyramid>, E> {
        if let Some(p) = self
            .entries
            .lock()
            .ok()
            .and_then(|mut e| e.get(&sha.to_string()))
        {
            return Ok(p);
        }
        let p = Arc::new(build()?);
        self.built
            .fetch_add(1, std::sync::atomic::Ordering::Relaxed);
        if let Ok(mut e) = self.entries.lock() {
            e.put(sha.to_string(), p.clone(), pyramid_bytes(&p));
        }
        Ok(p)
    }

    /// Bytes held now.
    pub fn bytes(&self) -> usize {
        self.entries.lock().map_or(0, |e| e.bytes())
    }

    /// Pyramids built so far (for tests and logs).
    pub fn built(&self) -> u64 {
        self.built.load(std::sync::atomic::Ordering::Relaxed)
    }
}

/// Body of `POST /api/demos/{id}/tracks`.
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct NewTrack {
    /// What the point is, 1 to 100 characters.
    pub label: String,
    /// The frame the point is placed on, from 0.
    pub frame: i64,
    /// x of the point there, pixels.
    pub x: f64,
    /// y of the point there, pixels.
    pub y: f64,
}

/// Body of `PUT /api/demos/{id}/tracks/{track_id}/samples/{frame}`.
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Correction {
    /// x of the point in that frame, pixels.
    pub x: f64,
    /// y of the point in that frame, pixels.
    pub y: f64,
}

/// What starting or correcting a track answers (202): the track, and the operation that
/// tracks it.
#[derive(Debug, Serialize, JsonSchema)]
pub struct Started {
    /// The operation; poll `GET /api/operations/{id}` or stream its events.
    pub operation_id: String,
    /// The track.
    pub track_id: String,
}

/// A track as served.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct TrackView {
    /// Its demo.
    pub demo_id: String,
    /// Track id.
    pub id: String,
    /// What the point is.
    pub label: String,
    /// One sample per frame reached so far, by frame.
    pub samples: Vec<SampleView>,
}

/// One sample of a [`TrackView`].
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct SampleView {
    /// In [0, 1]: 1 where a person placed it, from the forward–backward check where tracked,
    /// 0 where lost.
    pub confidence: f64,
    /// Frame index, from 0.
    pub frame: i64,
    /// Whether the point was lost there (it keeps its last seen position).
    pub lost: bool,
    /// `manual` (placed by a person) or `tracked`.
    pub origin: &'static str,
    /// Seconds from the first frame, when the demo says.
    pub time_s: Option<f64>,
    /// x, pixels.
    pub x: f64,
    /// y, pixels.
    pub y: f64,
}

/// Checks a position a person placed on a demo's frame: finite and on the frame.
fn check_position(demo: &store::demos::DemoRow, x: f64, y: f64) -> ServiceResult<()> {
    let on = |v: f64, side: i64| v.is_finite() && v >= -0.5 && v <= side as f64 - 0.5;
    if !on(x, demo.width) {
        return Err(ServiceError::invalid(
            "off_frame",
            "x",
            format!(
                "x must be a number from -0.5 to {}",
                demo.width as f64 - 0.5
            ),
        ));
    }
    if !on(y, demo.height) {
        return Err(ServiceError::invalid(
            "off_frame",
            "y",
            format!(
                "y must be a number from -0.5 to {}",
                demo.height as f64 - 0.5
            ),
        ));
    }
    Ok(())
}

fn check_frame(demo: &store::demos::DemoRow, frame: i64, field: &str) -> ServiceResult<()> {
    if frame < 0 || frame >= demo.frame_count {
        return Err(ServiceError::invalid(
            "bad_frame",
            field,
            format!("the demo has frames 0 to {}", demo.frame_count - 1),
        ));
    }
    Ok(())
}

/// Starts a track: the point as placed on `frame`, tracked through the rest of the demo by an
/// operation.
pub async fn start(
    state: &AppState,
    who: &Principal,
    demo_id: &str,
    input: NewTrack,
) -> ServiceResult<Started> {
    who.require(Role::Editor)?;
    let demo = demos::load(state, who, demo_id).await?;
    let label = names::check(NameKind::TrackLabel, &input.label)
        .map_err(|e| ServiceError::invalid(e.code(), "label", e.to_string()))?;
    check_frame(&demo, input.frame, "frame")?;
    check_position(&demo, input.x, input.y)?;
    let row = TrackRow {
        id: uuid::Uuid::new_v4().to_string(),
        team_id: who.team_id.clone(),
        demo_id: demo.id.clone(),
        label,
        author: who.author.clone(),
        created_at: store::now_ms(),
    };
    let seed = SampleRow {
        frame: input.frame,
        x: input.x,
        y: input.y,
        origin: Origin::Manual,
        confidence: 1.0,
        lost: false,
    };
    store::tracks::insert(&state.store, &row, &seed).await?;
    let operation_id = operations::queue(
        state,
        &who.team_id,
        KIND,
        &json!({"track_id": row.id, "from": input.frame, "both_ways": true}),
    )
    .await?;
    Ok(Started {
        operation_id,
        track_id: row.id,
    })
}

async fn load(
    state: &AppState,
    who: &Principal,
    demo_id: &str,
    track_id: &str,
) -> ServiceResult<(store::demos::DemoRow, TrackRow)> {
    let demo = demos::load(state, who, demo_id).await?;
    let id = parse_id(track_id, "track")?;
    let track = store::tracks::get(&state.store, &who.team_id, &id)
        .await?
        .filter(|t| t.demo_id == demo.id)
        .ok_or_else(|| ServiceError::NotFound(format!("demo {} has no track {id}", demo.id)))?;
    Ok((demo, track))
}

/// A person's correction at frame `frame`: the sample becomes manual there, and the frames
/// after it are tracked again up to the next manual sample.
pub async fn correct(
    state: &AppState,
    who: &Principal,
    demo_id: &str,
    track_id: &str,
    frame: &str,
    c: Correction,
) -> ServiceResult<Started> {
    who.require(Role::Editor)?;
    let (demo, track) = load(state, who, demo_id, track_id).await?;
    let frame = parse_frame_index(frame)?;
    check_frame(&demo, frame, "frame")?;
    check_position(&demo, c.x, c.y)?;
    let sample = SampleRow {
        frame,
        x: c.x,
        y: c.y,
        origin: Origin::Manual,
        confidence: 1.0,
        lost: false,
    };
    store::tracks::put_manual(&state.store, &track.id, &sample).await?;
    let operation_id = operations::queue(
        state,
        &who.team_id,
        KIND,
        &json!({"track_id": track.id, "from": frame, "both_ways": false}),
    )
    .await?;
    Ok(Started {
        operation_id,
        track_id: track.id,
    })
}

async fn view_of(
    state: &AppState,
    track: TrackRow,
    times: &[Option<f64>],
) -> ServiceResult<TrackView> {
    let samples = store::tracks::samples(&state.store, &track.id).await?;
    Ok(TrackView {
        demo_id: track.demo_id,
        id: track.id,
        label: track.label,
        samples: samples
            .into_iter()
            .map(|s| SampleView {
                confidence: s.confidence,
                frame: s.frame,
                lost: s.lost,
                origin: s.origin.as_str(),
                time_s: usize::try_from(s.frame)
                    .ok()
                    .and_then(|k| times.get(k).copied().flatten()),
                x: s.x,
                y: s.y,
            })
            .collect(),
    })
}

async fn frame_times(state: &AppState, demo_id: &str) -> ServiceResult<Vec<Option<f64>>> {
    Ok(store::demos::frames(&state.store, demo_id)
        .await?
        .into_iter()
        .map(|f| f.time_s)
        .collect())
}

/// One track of a demo.
pub async fn view(
    state: &AppState,
    who: &Principal,
    demo_id: &str,
    track_id: &str,
) -> ServiceResult<TrackView> {
    let (demo, track) = load(state, who, demo_id, track_id).await?;
    let times = frame_times(state, &demo.id).await?;
    view_of(state, track, &times).await
}

/// Every track of a demo, oldest first.
pub async fn all(
    state: &AppState,
    who: &Principal,
    demo_id: &str,
) -> ServiceResult<Vec<TrackView>> {
    let demo = demos::load(state, who, demo_id).await?;
    let times = frame_times(state, &demo.id).await?;
    let mut out = Vec::new();
    for t in store::tracks::of_demo(&state.store, &demo.id).await? {
        out.push(view_of(state, t, &times).await?);
    }
    Ok(out)
}

/// A tracking operation of a demo that has not ended yet.
#[derive(Debug, Clone, Serialize)]
pub struct Running {
    /// The track it works on.
    pub track_id: String,
    /// The operation as it is now.
    pub operation: operations::OperationView,
}

/// The demo's tracking operations that are queued or running, oldest first: what a page that
/// is opened (or reloaded) while they run shows progress for.
pub async fn running(
    state: &AppState,
    who: &Principal,
    demo_id: &str,
) -> ServiceResult<Vec<Running>> {
    let demo = demos::load(state, who, demo_id).await?;
    let tracks: std::collections::HashSet<String> = store::tracks::of_demo(&state.store, &demo.id)
        .await?
        .into_iter()
        .map(|t| t.id)
        .collect();
    let mut out = Vec::new();
    for op in store::operations::unfinished(&state.store, &who.team_id, KIND).await? {
        let Ok(input) = serde_json::from_str::<Value>(&op.input) else {
            continue;
        };
        let Some(track_id) = input.get("track_id").and_then(Value::as_str) else {
            continue;
        };
        if tracks.contains(track_id) {
            out.push(Running {
                track_id: track_id.to_string(),
                operation: operations::view(&op),
            });
        }
    }
    Ok(out)
}

/// The tracks as CSV: one row per sample, `track_id,label,frame,time_s,x,y,origin,confidence,
/// lost` (RFC 4180 quoting for the label; an unknown time is an empty field).
pub fn csv(tracks: &[TrackView]) -> String {
    let mut out = String::from("track_id,label,frame,time_s,x,y,origin,confidence,lost\n");
    for t in tracks {
        let label = format!("\"{}\"", t.label.replace('"', "\"\""));
        for s in &t.samples {
            let time = s.time_s.map(|v| v.to_string()).unwrap_or_default();
            out.push_str(&format!(
                "{},{label},{},{time},{},{},{},{},{}\n",
                t.id, s.frame, s.x, s.y, s.origin, s.confidence, s.lost
            ));
        }
    }
    out
}

/// Runs a tracking operation: `{track_id, from, both_ways}`. Frames are decoded and their
/// pyramids built one at a time (two are held), so a long demo needs little memory; the result
/// is written in one transaction, never over a manual sample.
pub(super) async fn run(
    state: &AppState,
    team_id: &str,
    input: &Value,
    progress: Progress,
) -> Result<Value, RunError> {
    let bad = |what: &str| RunError::Failed(format!("the operation's input lacks {what}"));
    let track_id = input["track_id"]
        .as_str()
        .ok_or_else(|| bad("track_id"))?
        .to_string();
    let from = input["from"].as_i64().ok_or_else(|| bad("from"))?;
    let both_ways = input["both_ways"].as_bool().unwrap_or(false);
    let track = store::tracks::get(&state.store, team_id, &track_id)
        .await
        .map_err(|e| RunError::Failed(e.to_string()))?
        .ok_or_else(|| RunError::Failed("the track no longer exists".into()))?;
    let frames = store::demos::frames(&state.store, &track.demo_id)
        .await
        .map_err(|e| RunError::Failed(e.to_string()))?;
    let samples = store::tracks::samples(&state.store, &track.id)
        .await
        .map_err(|e| RunError::Failed(e.to_string()))?;
    let seed = samples
        .iter()
        .find(|s| s.frame == from && s.origin == Origin::Manual)
        .copied()
        .ok_or_else(|| RunError::Failed(format!("no manual sample at frame {from}")))?;
    let manual: Vec<i64> = samples
        .iter()
        .filter(|s| s.origin == Origin::Manual)
        .map(|s| s.frame)
        .collect();
    let n = frames.len() as i64;
    // Up to the next manual sample each way (exclusive): those frames have their own seed.
    let next_manual = manual
        .iter()
        .copied()
        .filter(|&f| f > from)
        .min()
        .unwrap_or(n);
    let prev_manual = manual
        .iter()
        .copied()
        .filter(|&f| f < from)
        .max()
        .unwrap_or(-1);
    let forward: Vec<i64> = (from + 1..next_manual).collect();
    let backward: Vec<i64> = if both_ways {
        (prev_manual + 1..from).rev().collect()
    } else {
        Vec::new()
    };
    let shas: Vec<String> = frames.into_iter().map(|f| f.sha256).collect();
    let store = state.store.clone();
    let limits = state.limits.clone();
    let pyramids = state.pyramids.clone();
    let handle = tokio::runtime::Handle::current();
    let total = (forward.len() + backward.len()).max(1) as f64;
    let p = progress.clone();
    let out = super::heavy::spawn(move || -> Result<Vec<SampleRow>, RunError> {
        let build = |k: i64, sha: &String| -> Result<Pyramid, RunError> {
            let (content_type, bytes) = handle
                .block_on(store::frames::image_bytes(&store, sha))
                .map_err(|e| RunError::Failed(e.to_string()))?
                .ok_or_else(|| RunError::Failed(format!("the image of frame {k} is missing")))?;
            let format = if content_type == "image/png" {
                image::ImageFormat::Png
            } else {
                image::ImageFormat::Jpeg
            };
            let img = images::decode(
                &bytes,
                format,
                limits.max_image_side,
                limits.max_decode_bytes,
            )
            .map_err(|e| RunError::Failed(format!("frame {k}: {e}")))?;
            let luma = img.to_luma8();
            Pyramid::from_u8(
                luma.width() as usize,
                luma.height() as usize,
                luma.as_raw(),
                LEVELS,
            )
            .map_err(|e| RunError::Failed(format!("frame {k}: {e}")))
        };
        let load = |k: i64| -> Result<Arc<Pyramid>, RunError> {
            let sha = usize::try_from(k)
                .ok()
                .and_then(|k| shas.get(k))
                .ok_or_else(|| RunError::Failed(format!("frame {k} is not in the demo")))?;
            pyramids.get_or_build(sha, || build(k, sha))
        };
        let params = TrackParams::default();
        let mut out = Vec::new();
        let mut done = 0.0;
        for order in [&forward, &backward] {
            if order.is_empty() {
                continue;
            }
            let mut prev = load(from)?;
            let mut at = vec![TrackSample {
                x: seed.x,
                y: seed.y,
                confidence: 1.0,
                lost: seed.lost,
            }];
            for &k in order.iter() {
                if p.stopped() {
                    return Err(RunError::Stopped);
                }
                let next = load(k)?;
                at = track_step(&prev, &next, &at, &params)
                    .map_err(|e| RunError::Failed(format!("frame {k}: {e}")))?;
                let s = at[0];
                out.push(SampleRow {
                    frame: k,
                    x: s.x,
                    y: s.y,
                    origin: Origin::Tracked,
                    confidence: s.confidence,
                    lost: s.lost,
                });
                prev = next;
                done += 1.0;
                p.set(done / total);
            }
        }
        Ok(out)
    })
    .await
    .map_err(|e| RunError::Failed(format!("the tracker failed: {e}")))??;
    if progress.stopped() {
        return Err(RunError::Stopped);
    }
    store::tracks::put_tracked(&state.store, &track.id, &out)
        .await
        .map_err(|e| RunError::Failed(e.to_string()))?;
    let lost_from = out
        .iter()
        .filter(|s| s.lost && s.frame > from)
        .map(|s| s.frame)
        .min();
    Ok(json!({"track_id": track.id, "frames": out.len(), "lost_from": lost_from}))
}

/// Body of `POST /api/demos/{id}/goal`.
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct DemoGoal {
    /// The goal's name.
    pub name: String,
    /// Tracks of the demo, 1 to 64: one `point` term each, or one `rigid` term over them all.
    pub tracks: Vec<String>,
    /// The frame that becomes the goal's frame; the tracks' positions there are the sources.
    pub start_frame: i64,
    /// The frame whose positions are the targets.
    pub end_frame: i64,
    /// Join the tracks into one `rigid` term (at least 2 tracks) instead of a `point` each.
    #[serde(default)]
    pub rigid: bool,
    /// Why.
    #[serde(default)]
    pub note: Option<String>,
    /// Take targets outside the safe zone or inside a no-go zone anyway (recorded).
    #[serde(default)]
    pub override_safety: bool,
}

/// Most tracks joined into one goal.
pub const MAX_GOAL_TRACKS: usize = 64;

/// Makes a goal from a demonstration: its start frame becomes a frame of the camera, each
/// track's position there a source and its position at the end frame the target. The goal is
/// checked like any other (zones included) and its revision records where it came from.
pub async fn make_goal(
    state: &AppState,
    who: &Principal,
    demo_id: &str,
    input: DemoGoal,
) -> ServiceResult<store::goals::RevisionRow> {
    who.require(Role::Editor)?;
    let demo = demos::load(state, who, demo_id).await?;
    check_frame(&demo, input.start_frame, "start_frame")?;
    check_frame(&demo, input.end_frame, "end_frame")?;
    if input.tracks.is_empty() || input.tracks.len() > MAX_GOAL_TRACKS {
        return Err(ServiceError::invalid(
            "bad_tracks",
            "tracks",
            format!("choose 1 to {MAX_GOAL_TRACKS} tracks"),
        ));
    }
    if input.rigid && input.tracks.len() < 2 {
        return Err(ServiceError::invalid(
            "bad_tracks",
            "tracks",
            "a rigid term needs at least 2 tracks",
        ));
    }
    let mut pairs = Vec::new();
    let mut ids = Vec::new();
    for (k, id) in input.tracks.iter().enumerate() {
        let field = format!("tracks[{k}]");
        let (_, track) = match load(state, who, &demo.id, id).await {
            Ok(t) => t,
            Err(ServiceError::NotFound(m)) => {
                return Err(ServiceError::invalid("unknown_track", field, m));
            }
            Err(e) => return Err(e),
        };
        let samples = store::tracks::samples(&state.store, &track.id).await?;
        let at = |f: i64| -> ServiceResult<[f64; 2]> {
            match samples.iter().find(|s| s.frame == f) {
                Some(s) if !s.lost => Ok([s.x, s.y]),
                Some(_) => Err(ServiceError::invalid(
                    "lost_sample",
                    field.clone(),
                    format!(
                        "track {:?} is lost at frame {f}; correct it there first",
                        track.label
                    ),
                )),
                None => Err(ServiceError::invalid(
                    "no_sample",
                    field.clone(),
                    format!("track {:?} has no sample at frame {f} yet", track.label),
                )),
            }
        };
        pairs.push((
            track.label.clone(),
            at(input.start_frame)?,
            at(input.end_frame)?,
        ));
        ids.push(track.id);
    }
    // The start frame becomes a frame of the camera (the image is stored once already).
    let f = store::demos::frame(&state.store, &demo.id, input.start_frame)
        .await?
        .ok_or_else(|| ServiceError::Internal("demo frame missing".into()))?;
    let (content_type, bytes) = store::frames::image_bytes(&state.store, &f.sha256)
        .await?
        .ok_or_else(|| ServiceError::Internal(format!("image {} missing", f.sha256)))?;
    let (frame, _) = store::frames::insert(
        &state.store,
        &who.team_id,
        &demo.camera_id,
        &store::frames::NewImage {
            sha256: &f.sha256,
            content_type: &content_type,
            width: demo.width,
            height: demo.height,
            bytes: &bytes,
        },
    )
    .await?;
    let terms: Vec<Value> = if input.rigid {
        vec![json!({
            "kind": "rigid",
            "label": pairs.iter().map(|p| p.0.as_str()).collect::<Vec<_>>().join(" + "),
            "sources": pairs.iter().map(|p| p.1).collect::<Vec<_>>(),
            "targets": pairs.iter().map(|p| p.2).collect::<Vec<_>>(),
            "allow_scale": false,
        })]
    } else {
        pairs
            .iter()
            .map(|(label, s, t)| json!({"kind": "point", "label": label, "source": s, "target": t}))
            .collect()
    };
    let doc: goalsmith_core::goal::GoalDocument = crate::strict_json::from_value(json!({
        "name": input.name,
        "frame_id": frame.id,
        "terms": terms,
        "note": input.note,
        "override_safety": input.override_safety,
    }))
    .map_err(|e| ServiceError::invalid_body("bad_goal", e.to_string()))?;
    let (spec, camera) = super::goals::check_document(state, who, doc).await?;
    let goal_id = uuid::Uuid::new_v4().to_string();
    let from = super::goals::FromDemo {
        demo_id: demo.id.clone(),
        start_frame: input.start_frame,
        end_frame: input.end_frame,
        tracks: ids,
    };
    let rev = super::goals::build_revision_from(
        &goal_id,
        1,
        &spec,
        &camera,
        &who.author,
        store::now_ms(),
        Some(&from),
    )?;
    store::goals::create(&state.store, &who.team_id, &rev).await?;
    Ok(rev)
}

#[cfg(test)]
mod pyramid_cache_tests {
    use super::*;

    fn pyramid(seed: u8) -> Pyramid {
        let data: Vec<u8> = (0..64 * 48).map(|i| (i as u8).wrapping_mul(seed)).collect();
        Pyramid::from_u8(64, 48, &data, LEVELS).expect("frame")
    }

    #[test]
    fn a_frame_is_built_once_and_shared() {
        let cache = PyramidCache::with_budget(1 << 20);
        let a = cache
            .get_or_build::<()>("aa", || Ok(pyramid(3)))
            .expect("built");
        let b = cache
            .get_or_build::<()>("aa", || panic!("built twice"))
            .expect("held");
        assert!(Arc::ptr_eq(&a, &b));
        assert_eq!(cache.built(), 1);
        assert_eq!(cache.bytes(), pyramid_bytes(&a));
        // A failed build is not kept.
        assert_eq!(
            cache.get_or_build("bb", || Err("bad frame")).err(),
            Some("bad frame")
        );
        assert_eq!(cache.built(), 1);
    }

    #[test]
    fn the_budget_is_kept_in_bytes() {
        let one = pyramid_bytes(&pyramid(1));
        // Room for two pyramids: the third evicts the least recently used.
        let cache = PyramidCache::with_budget(2 * one + one / 2);
        for (k, sha) in ["a", "b", "a", "c"].iter().enumerate() {
            cache
                .get_or_build::<()>(sha, || Ok(pyramid(k as u8 + 1)))
                .expect("pyramid");
        }
        assert_eq!(cache.built(), 3);
        assert!(cache.bytes() <= 2 * one + one / 2);
        // "a" was used after "b", so "b" went.
        cache
            .get_or_build::<()>("a", || panic!("a was evicted"))
            .expect("a held");
        cache
            .get_or_build::<()>("b", || Ok(pyramid(9)))
            .expect("b rebuilt");
        assert_eq!(cache.built(), 4);
        // Larger than the whole budget: built, handed out, not kept.
        let tiny = PyramidCache::with_budget(one / 2);
        tiny.get_or_build::<()>("a", || Ok(pyramid(1)))
            .expect("built");
        assert_eq!(tiny.bytes(), 0);
    }
}
