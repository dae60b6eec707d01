//! goalsmith-bundle: the goal bundle, written and read in one place.
//!
//! A bundle is one revision of a goal as a reproducible ZIP (docs/conventions.md, "Bundles"):
//! the revision document, its cost maps, frame, camera, the reward fits its `learned` terms use,
//! a README and a manifest with every file's SHA-256. The server writes bundles and scores them
//! offline (`goalsmith cost --bundle`); the Python package for planners reads them. Both re-check
//! the revision document into the core's goal and cost model here, so a bundle scores the same
//! wherever it is opened. Also here: image decoding under limits (masks are PNGs inside the
//! revision document) and the safety caution every export carries.
#![deny(missing_docs)]

pub mod images;

use goalsmith_core::cost::{CostModel, RewardGrid};
use goalsmith_core::goal::{CheckContext, GoalDocument, GoalSpec, RewardLookup};
use goalsmith_core::npy;
use serde_json::{Value, json};
use sha2::{Digest, Sha256};
use std::io::{Cursor, Write};

/// The caution carried by the README, every export and the editor.
pub const SAFETY_CAUTION: &str = "Goals move real robots. Check every new goal in simulation or at \
reduced speed first, keep an emergency stop within reach, respect the cell's safeguarding, and \
follow ISO 10218, ISO/TS 15066, local rules and licensed practice. goalsmith defers to the robot's \
safety-rated controller; it is not a safety function.";

/// Version of the bundle layout; bumped whenever the bytes of a bundle change for the same
/// revision (the bundle's ETag is derived from it). 2: bundles carry the reward fits of
/// `learned` terms (`reward_fits/<id>.json` and `.npy`).
pub const BUNDLE_FORMAT_VERSION: u32 = 2;

/// Why scoring or exporting failed, in words for the caller.
#[derive(Debug, thiserror::Error)]
pub enum ScoreError {
    /// The request breaks a rule (a 422), naming the field where one applies.
    #[error("{message}")]
    Invalid {
        /// snake_case code.
        code: &'static str,
        /// For a person.
        message: String,
        /// Offending field.
        field: Option<String>,
    },
    /// The request claims more data than is allowed (a 413).
    #[error("{0}")]
    TooLarge(String),
    /// Stored data that should be readable is not.
    #[error("{0}")]
    Internal(String),
}

/// A [`ScoreError::Invalid`] with its code, field and message.
pub fn invalid(code: &'static str, field: Option<&str>, message: impl Into<String>) -> ScoreError {
    ScoreError::Invalid {
        code,
        message: message.into(),
        field: field.map(str::to_string),
    }
}

/// Re-checks a stored revision document into a [`GoalSpec`] for a frame of `width` × `height`.
/// Safety zones are not re-applied: they were checked (or overridden, and recorded) when the
/// revision was written.
///
/// `reward_grid` finds the reward grid of a `learned` term's fit; without one (`&|_| None`), a
/// revision with learned terms is refused.
pub fn spec_from_revision(
    doc: &Value,
    width: u32,
    height: u32,
    reward_grid: RewardLookup<'_>,
) -> Result<GoalSpec, ScoreError> {
    let goal = GoalDocument {
        name: doc["name"].as_str().unwrap_or_default().to_string(),
        frame_id: doc["frame_id"].as_str().unwrap_or_default().to_string(),
        terms: serde_json::from_value(doc["terms"].clone())
            .map_err(|e| ScoreError::Internal(format!("stored terms unreadable: {e}")))?,
        cost: serde_json::from_value(doc["cost"].clone())
            .map_err(|e| ScoreError::Internal(format!("stored cost unreadable: {e}")))?,
        note: None,
        override_safety: true,
    };
    let decode_mask = |b64: &str| images::decode_mask(b64, 16384, 1 << 30);
    GoalSpec::check(
        goal,
        &CheckContext {
            width,
            height,
            safe_zone: None,
            no_go_zones: &[],
            decode_mask: &decode_mask,
            reward_grid,
        },
    )
    .map_err(|e| match e.code {
        // Saved before the per-goal vertex total existed: the client's request is refused
        // (its maps would cost W·H per vertex), not the server's fault.
        "too_many_vertices" => invalid(
            "too_many_vertices",
            None,
            format!(
                "this revision was saved before the current limits and breaks one: {}; save a \
                 new revision within it",
                e.message
            ),
        ),
        _ => ScoreError::Internal(format!("stored revision no longer checks: {e}")),
    })
}

/// The cost model of a checked goal.
pub fn model(spec: &GoalSpec) -> Result<CostModel, ScoreError> {
    model_until(spec, &|| false).map(|m| m.expect("never stopped"))
}

/// [`model`], given up (`Ok(None)`) when `stop` says so between mask terms.
pub fn model_until(
    spec: &GoalSpec,
    stop: &dyn Fn() -> bool,
) -> Result<Option<CostModel>, ScoreError> {
    let points = spec.cost_points().map_err(|e| ScoreError::Invalid {
        code: e.code,
        message: e.message,
        field: Some(e.field),
    })?;
    let (w, h) = spec.frame_size();
    CostModel::new_until(w as usize, h as usize, points, *spec.settings(), stop)
        .map_err(|e| ScoreError::Internal(e.to_string()))
}

impl ScoreError {
    /// An NPY body that cannot be read: 413 when it claims more than the limit, else 422.
    pub fn from_npy(e: npy::NpyError) -> Self {
        match e {
            npy::NpyError::TooLarge { .. } => ScoreError::TooLarge(e.to_string()),
            other => invalid("bad_npy", None, other.to_string()),
        }
    }

    /// A batch the cost engine refuses.
    pub fn from_cost(e: goalsmith_core::cost::CostError) -> Self {
        invalid("bad_prediction", None, e.to_string())
    }
}

/// What goes into a bundle.
pub struct BundleParts<'a> {
    /// The exact revision document bytes.
    pub goal_json: &'a str,
    /// The parsed revision document.
    pub goal: &'a Value,
    /// The camera document as served (intrinsics in both forms, plane, pose, zones).
    pub camera: &'a Value,
    /// Full-size cost maps NPY.
    pub cost_maps_npy: &'a [u8],
    /// The stored frame bytes.
    pub frame: &'a [u8],
    /// `png` or `jpg`.
    pub frame_ext: &'a str,
    /// Number of source points P and the frame size, for the manifest.
    pub points: usize,
    /// Frame width.
    pub width: u32,
    /// Frame height.
    pub height: u32,
    /// The reward fits of the revision's `learned` terms, one per distinct fit, in id order.
    pub reward_fits: &'a [BundledRewardFit],
}

/// A reward fit as a bundle carries it, for the revision's `learned` terms that name it.
#[derive(Debug, Clone)]
pub struct BundledRewardFit {
    /// The fit's id, canonical (lower-case, hyphenated): see [`fit_file_id`].
    pub id: String,
    /// `reward_fits/<id>.json`: canonical JSON of the fit (see docs/conventions.md).
    pub json: Vec<u8>,
    /// `reward_fits/<id>.npy`: the reward map, float32 (rows, cols), the bytes of
    /// `GET /api/reward-fits/{id}/reward-map.npy`.
    pub npy: Vec<u8>,
    /// Grid rows.
    pub rows: usize,
    /// Grid columns.
    pub cols: usize,
    /// Side of a cell, pixels.
    pub cell_px: u32,
}

/// Bundle paths of a fit's JSON and reward map, from its canonical id.
pub fn reward_fit_paths(id: &str) -> (String, String) {
    (
        format!("reward_fits/{id}.json"),
        format!("reward_fits/{id}.npy"),
    )
}

/// The id under which a bundle files a fit: the canonical form of a term's `reward_fit_id`
/// (any form the server accepts names the same fit), or None when it is no fit id at all.
pub fn fit_file_id(raw: &str) -> Option<String> {
    uuid::Uuid::parse_str(raw).ok().map(|u| u.to_string())
}

/// The `learned` terms of a revision document: (term index, its `reward_fit_id` as stored).
pub fn learned_terms(goal: &Value) -> Vec<(usize, &str)> {
    goal["terms"]
        .as_array()
        .map(|terms| {
            terms
                .iter()
                .enumerate()
                .filter(|(_, t)| t["kind"] == "learned")
                .filter_map(|(k, t)| t["reward_fit_id"].as_str().map(|id| (k, id)))
                .collect()
        })
        .unwrap_or_default()
}

fn readme(parts: &BundleParts<'_>) -> String {
    format!(
        "goalsmith goal bundle (format {BUNDLE_FORMAT_VERSION})\n\n\
         CAUTION: {caution}\n\n\
         goal.json       the revision document exactly as the server serves it\n\
         cost-maps.npy   float32, C order, shape (P, H, W) = ({p}, {h}, {w}); entry [p, j, i] is the\n\
         \x20               cost of source point p being at pixel centre (x = i, y = j)\n\
         frame.{ext}       the camera frame the goal is drawn on\n\
         camera.json     the camera: intrinsics (also as ROS CameraInfo), work plane, pose, zones\n\
         {fits}\
         manifest.json   SHA-256 of every other file, format version, this caution\n\n\
         Pixel coordinates are [x, y], x right, y down, the centre of the top-left pixel at (0, 0).\n\
         Source points are numbered over all terms in term order (goal.json derived.points);\n\
         a rigid term contributes one point per source.\n\n\
         A candidate's cost is C = sum over points p of w_p * sum over the counted steps t of c,\n\
         with w_p the weight in derived.points and the steps, metric m and mode in goal.json\n\
         \"cost\" (steps \"final\": the last step only; \"all\": every step). In mode \"expected\",\n\
         for a predicted point x, c = m(distance from x to point p's target); for a probability\n\
         map X of the frame's size (H, W), c = sum over j, i of X[j, i] * cost-maps[p, j, i].\n\
         Mode \"hit\", maps of other sizes and gradients: goalsmith's docs/conventions.md.\n\
         Score offline with: goalsmith cost --bundle THIS.zip --points P.json | --maps M.npy\n\
         or in Python: goalsmith.open_bundle(\"THIS.zip\").cost(points=... or maps=...)\n",
        caution = SAFETY_CAUTION,
        p = parts.points,
        h = parts.height,
        w = parts.width,
        ext = parts.frame_ext,
        fits = if parts.reward_fits.is_empty() {
            ""
        } else {
            "reward_fits/<id>.json  a learned term's reward fit (one file per fit): grid,\n\
             \x20                      features as submitted, standardisation, weights,\n\
             \x20                      diagnostics, and how to recompute its reward per cell\n\
             reward_fits/<id>.npy   its reward map r, float32, C order, shape (rows, cols); the\n\
             \x20                      term's cost at (x, y) is max(r) - r[floor((y + 0.5) /\n\
             \x20                      cell_px), floor((x + 0.5) / cell_px)], clamped to the grid\n"
        },
    )
}

/// The files of one revision's bundle (without the manifest), in bundle order.
pub fn revision_files(parts: &BundleParts<'_>) -> Vec<(String, Vec<u8>)> {
    let mut files = vec![
        ("goal.json".into(), parts.goal_json.as_bytes().to_vec()),
        ("cost-maps.npy".into(), parts.cost_maps_npy.to_vec()),
        (format!("frame.{}", parts.frame_ext), parts.frame.to_vec()),
        (
            "camera.json".into(),
            goalsmith_core::canonical::to_string(parts.camera).into_bytes(),
        ),
    ];
    for fit in parts.reward_fits {
        let (json_name, npy_name) = reward_fit_paths(&fit.id);
        files.push((json_name, fit.json.clone()));
        files.push((npy_name, fit.npy.clone()));
    }
    files.push(("README.txt".into(), readme(parts).into_bytes()));
    files
}

/// SHA-256 of each file, by name.
pub fn file_hashes(files: &[(String, Vec<u8>)]) -> Value {
    let mut hashes = serde_json::Map::new();
    for (name, bytes) in files {
        hashes.insert(name.clone(), json!(hex::encode(Sha256::digest(bytes))));
    }
    Value::Object(hashes)
}

/// The manifest's list of reward fits: per fit its files, grid and the learned terms using it.
fn manifest_reward_fits(parts: &BundleParts<'_>) -> Value {
    let learned = learned_terms(parts.goal);
    Value::Array(
        parts
            .reward_fits
            .iter()
            .map(|fit| {
                let (json_name, npy_name) = reward_fit_paths(&fit.id);
                let terms: Vec<usize> = learned
                    .iter()
                    .filter(|(_, raw)| fit_file_id(raw).as_deref() == Some(fit.id.as_str()))
                    .map(|(k, _)| *k)
                    .collect();
                json!({
                    "id": fit.id,
                    "file": json_name,
                    "reward_map": {"file": npy_name, "dtype": "float32", "shape": [fit.rows, fit.cols]},
                    "cell_px": fit.cell_px,
                    "terms": terms,
                })
            })
            .collect(),
    )
}

/// The manifest of one revision's bundle.
pub fn revision_manifest(parts: &BundleParts<'_>, files: &[(String, Vec<u8>)]) -> Value {
    json!({
        "format": "goalsmith-bundle",
        "format_version": BUNDLE_FORMAT_VERSION,
        "goal_id": parts.goal["goal_id"],
        "revision": parts.goal["revision"],
        "name": parts.goal["name"],
        "spec_sha256": parts.goal["sha256"],
        "created_at": parts.goal["created_at"],
        "frame": {"file": format!("frame.{}", parts.frame_ext), "width": parts.width, "height": parts.height},
        "cost_maps": {"file": "cost-maps.npy", "dtype": "float32", "shape": [parts.points, parts.height, parts.width]},
        "reward_fits": manifest_reward_fits(parts),
        "files": file_hashes(files),
        "caution": SAFETY_CAUTION,
    })
}

/// A ZIP that is byte-for-byte the same for the same files: given entry order, fixed
/// timestamps (1980-01-01, the ZIP epoch), fixed permissions, deterministic deflate; images,
/// already compressed, are stored.
pub fn zip_files(files: &[(String, Vec<u8>)]) -> Result<Vec<u8>, ScoreError> {
    let mut zip = zip::ZipWriter::new(Cursor::new(Vec::new()));
    let options = zip::write::SimpleFileOptions::default()
        .compression_method(zip::CompressionMethod::Deflated)
        .compression_level(Some(6))
        .last_modified_time(zip::DateTime::default())
        .unix_permissions(0o644);
    let zerr = |e: zip::result::ZipError| ScoreError::Internal(format!("zip: {e}"));
    for (name, bytes) in files {
        let stored = name.ends_with(".png") || name.ends_with(".jpg");
        let opts = if stored {
            options
                .compression_method(zip::CompressionMethod::Stored)
                .compression_level(None)
        } else {
            options
        };
        zip.start_file(name.as_str(), opts).map_err(zerr)?;
        zip.write_all(bytes)
            .map_err(|e| ScoreError::Internal(format!("zip: {e}")))?;
    }
    Ok(zip.finish().map_err(zerr)?.into_inner())
}

fn pretty(v: &Value) -> Result<Vec<u8>, ScoreError> {
    serde_json::to_vec_pretty(v).map_err(|e| ScoreError::Internal(e.to_string()))
}

/// One revision's bundle: its files and `manifest.json`, reproducible byte for byte.
pub fn bundle_zip(parts: &BundleParts<'_>) -> Result<Vec<u8>, ScoreError> {
    let mut files = revision_files(parts);
    let manifest = revision_manifest(parts, &files);
    files.push(("manifest.json".into(), pretty(&manifest)?));
    zip_files(&files)
}

/// A goal set's bundle: each item's revision files under `NN-<goal id>/` (in set order, each
/// with its own manifest) and a top-level `manifest.json` listing items and every file's hash.
pub fn goal_set_zip(set: &Value, items: &[BundleParts<'_>]) -> Result<Vec<u8>, ScoreError> {
    let mut all = Vec::new();
    let mut listed = Vec::new();
    for (k, parts) in items.iter().enumerate() {
        let dir = format!(
            "{:02}-{}",
            k + 1,
            parts.goal["goal_id"].as_str().unwrap_or("goal")
        );
        let mut files = revision_files(parts);
        let manifest = revision_manifest(parts, &files);
        files.push(("manifest.json".into(), pretty(&manifest)?));
        listed.push(json!({
            "position": k + 1,
            "folder": dir,
            "goal_id": parts.goal["goal_id"],
            "revision": parts.goal["revision"],
            "name": parts.goal["name"],
        }));
        all.extend(files.into_iter().map(|(n, b)| (format!("{dir}/{n}"), b)));
    }
    let manifest = json!({
        "format": "goalsmith-goal-set-bundle",
        "format_version": BUNDLE_FORMAT_VERSION,
        "goal_set_id": set["id"],
        "name": set["name"],
        "version": set["version"],
        "items": listed,
        "files": file_hashes(&all),
        "caution": SAFETY_CAUTION,
    });
    all.push(("manifest.json".into(), pretty(&manifest)?));
    zip_files(&all)
}

/// A bundle read back by [`read_bundle`].
pub struct ReadBundle {
    /// The revision document (goal.json, checked against its SHA-256).
    pub goal: Value,
    /// manifest.json as read.
    pub manifest: Value,
    /// Every file of the bundle but the manifest, by name, each checked against its SHA-256.
    pub files: std::collections::BTreeMap<String, Vec<u8>>,
    /// Frame width.
    pub width: u32,
    /// Frame height.
    pub height: u32,
    /// The reward grid of each `learned` term's fit, by the term's `reward_fit_id` as stored.
    pub reward_grids: std::collections::HashMap<String, std::sync::Arc<RewardGrid>>,
}

impl ReadBundle {
    /// The checked goal, its `learned` terms scored from the bundled reward maps.
    pub fn spec(&self) -> Result<GoalSpec, ScoreError> {
        spec_from_revision(&self.goal, self.width, self.height, &|id: &str| {
            self.reward_grids.get(id).cloned()
        })
    }
}

fn bad_bundle(message: impl Into<String>) -> ScoreError {
    invalid("bad_bundle", None, message)
}

/// Largest file a bundle may hold, uncompressed: the largest cost-map stack (2^27 float32,
/// `goalsmith_core::cost::MAX_MAP_VALUES`) and room to spare, so a ZIP bomb cannot make the
/// reader allocate without end.
pub const MAX_BUNDLE_FILE_BYTES: u64 = 1 << 30;

/// Reads a bundle back and verifies it: `manifest.json` must say format `goalsmith-bundle` of
/// a version this reader knows (1 to [`BUNDLE_FORMAT_VERSION`]); every file it lists must be in
/// the archive and match its SHA-256, and every other file of the archive must be listed. Then
/// the revision document, the frame size, and the reward grid of every fit a `learned` term
/// names; a bundle without a referenced fit (format 1 bundles carried none) is refused, naming
/// the file it lacks. Errors name the file at fault.
pub fn read_bundle(bytes: &[u8]) -> Result<ReadBundle, ScoreError> {
    let mut archive = zip::ZipArchive::new(Cursor::new(bytes))
        .map_err(|e| bad_bundle(format!("not a goalsmith bundle: {e}")))?;
    let mut files = std::collections::BTreeMap::new();
    for i in 0..archive.len() {
        let mut f = archive
            .by_index(i)
            .map_err(|e| bad_bundle(format!("entry {i} of the bundle: {e}")))?;
        if f.is_dir() {
            continue;
        }
        let name = f.name().to_string();
        let mut out = Vec::new();
        std::io::Read::read_to_end(
            &mut std::io::Read::take(&mut f, MAX_BUNDLE_FILE_BYTES + 1),
            &mut out,
        )
        .map_err(|e| bad_bundle(format!("{name}: {e}")))?;
        if out.len() as u64 > MAX_BUNDLE_FILE_BYTES {
            return Err(bad_bundle(format!(
                "{name} is larger than {MAX_BUNDLE_FILE_BYTES} bytes"
            )));
        }
        if files.insert(name.clone(), out).is_some() {
            return Err(bad_bundle(format!("{name} is in the bundle twice")));
        }
    }
    let manifest: Value = serde_json::from_slice(
        &files
            .remove("manifest.json")
            .ok_or_else(|| bad_bundle("the bundle has no manifest.json"))?,
    )
    .map_err(|e| bad_bundle(format!("manifest.json: {e}")))?;
    if manifest["format"] != "goalsmith-bundle" {
        return Err(bad_bundle(format!(
            "manifest.json: format is {}, not \"goalsmith-bundle\"",
            manifest["format"]
        )));
    }
    match manifest["format_version"].as_u64() {
        Some(v) if (1..=u64::from(BUNDLE_FORMAT_VERSION)).contains(&v) => {}
        _ => {
            return Err(bad_bundle(format!(
                "manifest.json: format_version {} is not one this reader knows (1 to \
                 {BUNDLE_FORMAT_VERSION}); update goalsmith",
                manifest["format_version"]
            )));
        }
    }
    let listed = manifest["files"]
        .as_object()
        .ok_or_else(|| bad_bundle("manifest.json has no files"))?;
    for (name, want) in listed {
        let got = files.get(name).ok_or_else(|| {
            bad_bundle(format!(
                "the bundle has no {name}, which manifest.json lists"
            ))
        })?;
        if Some(hex::encode(Sha256::digest(got)).as_str()) != want.as_str() {
            return Err(bad_bundle(format!(
                "{name} does not match its SHA-256 in manifest.json"
            )));
        }
    }
    let mut read = |name: &str| -> Result<Vec<u8>, ScoreError> {
        files
            .get(name)
            .cloned()
            .ok_or_else(|| bad_bundle(format!("the bundle has no {name}")))
    };
    let goal: Value = serde_json::from_slice(&read("goal.json")?)
        .map_err(|e| bad_bundle(format!("goal.json: {e}")))?;
    let dim = |k: &str| {
        manifest["frame"][k]
            .as_u64()
            .and_then(|v| u32::try_from(v).ok())
            .ok_or_else(|| bad_bundle(format!("manifest.json has no frame {k}")))
    };
    let (width, height) = (dim("width")?, dim("height")?);
    let mut reward_grids = std::collections::HashMap::new();
    let mut by_file_id: std::collections::HashMap<String, std::sync::Arc<RewardGrid>> =
        std::collections::HashMap::new();
    for (k, raw) in learned_terms(&goal) {
        if reward_grids.contains_key(raw) {
            continue;
        }
        let id = fit_file_id(raw).ok_or_else(|| {
            bad_bundle(format!(
                "goal.json: terms[{k}].reward_fit_id {raw:?} is not a reward fit id"
            ))
        })?;
        let grid = match by_file_id.get(&id) {
            Some(g) => g.clone(),
            None => {
                let g = std::sync::Arc::new(read_reward_fit(
                    &mut read, &manifest, &goal, &id, k, width, height,
                )?);
                by_file_id.insert(id, g.clone());
                g
            }
        };
        reward_grids.insert(raw.to_string(), grid);
    }
    // Last, so that a reward fit's file the manifest leaves out is named by the more telling
    // message of `read_reward_fit` (format 1 bundles carried no fits).
    if let Some(extra) = files.keys().find(|n| !listed.contains_key(*n)) {
        return Err(bad_bundle(format!(
            "{extra} is in the bundle but not listed in manifest.json"
        )));
    }
    Ok(ReadBundle {
        goal,
        manifest,
        files,
        width,
        height,
        reward_grids,
    })
}

/// Reads and checks one bundled fit (its JSON and reward map), for learned term `k`.
fn read_reward_fit(
    read: &mut dyn FnMut(&str) -> Result<Vec<u8>, ScoreError>,
    manifest: &Value,
    goal: &Value,
    id: &str,
    k: usize,
    width: u32,
    height: u32,
) -> Result<RewardGrid, ScoreError> {
    let (json_name, npy_name) = reward_fit_paths(id);
    let mut checked = |name: &str, what: &str| -> Result<Vec<u8>, ScoreError> {
        let Some(want) = manifest["files"][name].as_str() else {
            return Err(bad_bundle(format!(
                "manifest.json does not list {name}, {what} of the reward fit that learned term \
                 terms[{k}] uses; bundles of format 1 do not carry reward fits: export the \
                 bundle again"
            )));
        };
        let bytes = read(name)?;
        if hex::encode(Sha256::digest(&bytes)) != want {
            return Err(bad_bundle(format!(
                "{name} does not match its SHA-256 in manifest.json"
            )));
        }
        Ok(bytes)
    };
    let doc: Value = serde_json::from_slice(&checked(&json_name, "the description")?)
        .map_err(|e| bad_bundle(format!("{json_name}: {e}")))?;
    let npy_bytes = checked(&npy_name, "the reward map")?;
    let field = |key: &str| {
        doc[key]
            .as_u64()
            .ok_or_else(|| bad_bundle(format!("{json_name} has no whole number {key}")))
    };
    let cell_px = u32::try_from(field("cell_px")?)
        .map_err(|_| bad_bundle(format!("{json_name}: cell_px is out of range")))?;
    let to_usize = |v: u64, key: &str| {
        usize::try_from(v).map_err(|_| bad_bundle(format!("{json_name}: {key} is out of range")))
    };
    let cols = to_usize(field("cols")?, "cols")?;
    let rows = to_usize(field("rows")?, "rows")?;
    if doc["id"].as_str() != Some(id) {
        return Err(bad_bundle(format!("{json_name} describes another fit")));
    }
    if doc["frame_id"] != goal["frame_id"]
        || (field("width")?, field("height")?) != (u64::from(width), u64::from(height))
    {
        return Err(bad_bundle(format!(
            "{json_name} is a fit on another frame than goal.json's"
        )));
    }
    let arr = npy::read(&npy_bytes, npy_bytes.len())
        .map_err(|e| bad_bundle(format!("{npy_name}: {e}")))?;
    if arr.header.shape != [rows, cols] {
        return Err(bad_bundle(format!(
            "{npy_name} has shape {:?}, not ({rows}, {cols}) as {json_name} says",
            arr.header.shape
        )));
    }
    let values = arr
        .as_f32()
        .map_err(|e| bad_bundle(format!("{npy_name}: {e}")))?
        .to_vec();
    RewardGrid::new(cell_px, cols, rows, values).map_err(|e| bad_bundle(format!("{npy_name}: {e}")))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A revision stored before the per-goal vertex total: refused as the client's request (a
    /// 422 saying why), not as a server fault.
    #[test]
    fn a_stored_revision_past_the_vertex_total_is_refused_not_a_fault() {
        let circle: Vec<[f64; 2]> = (0..1024)
            .map(|k| {
                let a = std::f64::consts::TAU * f64::from(k) / 1024.0;
                [32.0 + 20.0 * a.cos(), 24.0 + 20.0 * a.sin()]
            })
            .collect();
        let region = json!({"kind": "region", "source": [5.0, 5.0], "polygon": circle});
        let doc = json!({"name": "old", "frame_id": "f", "terms": vec![region; 5]});
        match spec_from_revision(&doc, 64, 48, &|_| None) {
            Err(ScoreError::Invalid { code, message, .. }) => {
                assert_eq!(code, "too_many_vertices");
                assert!(message.contains("4096"), "{message}");
            }
            other => panic!("expected too_many_vertices, got {:?}", other.map(|_| ())),
        }
    }
}
