//! Cameras: a camera's size, calibration, work plane, pose and zones, checked once on the way in.

use super::auth::{Principal, Role};
use super::error::{ServiceError, ServiceResult};
use super::{AppState, parse_id, rfc3339};
use crate::store::{self, cameras::CameraRow};
use goalsmith_core::camera::{Intrinsics, Pose, WorkPlane};
use goalsmith_core::goal::{Xy, check_zone};
use goalsmith_core::names::{self, NameKind};
use schemars::{JsonSchema, Schema, SchemaGenerator, json_schema};
use serde::{Deserialize, Serialize};
use serde_json::Value;

/// Largest frame side accepted for a camera.
pub const MAX_SIDE: u32 = 16384;

/// The body of `POST /api/cameras`.
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct CameraInput {
    /// Display name, 1 to 200 characters.
    name: String,
    /// Frame width in pixels.
    width: u32,
    /// Frame height in pixels.
    height: u32,
    /// Either `{fx, fy, cx, cy, distortion}` or ROS CameraInfo fields `{K, D, distortion_model}`.
    // Parsed by hand (`parse_intrinsics`) for error messages that name both forms; the schema
    // says what that parser takes.
    #[serde(default)]
    #[schemars(schema_with = "intrinsics_input_schema")]
    intrinsics: Option<Value>,
    /// The plane the robot works on, in camera coordinates.
    #[serde(default)]
    work_plane: Option<WorkPlaneDoc>,
    /// Pose of the camera in the robot base frame.
    #[serde(default)]
    pose_in_base: Option<PoseDoc>,
    /// Targets must lie inside this polygon (pixels).
    #[serde(default)]
    safe_zone: Option<Vec<Xy>>,
    /// Targets must not lie inside these polygons (pixels).
    #[serde(default)]
    no_go_zones: Option<Vec<Vec<Xy>>>,
}

fn intrinsics_input_schema(generator: &mut SchemaGenerator) -> Schema {
    let direct = generator.subschema_for::<IntrinsicsDoc>();
    let ros = generator.subschema_for::<CameraInfoInput>();
    // Exactly one fits: both forms refuse unknown fields, and their fields differ.
    json_schema!({ "oneOf": [direct, ros, {"type": "null"}] })
}

/// Intrinsics in goalsmith's own form.
// Fields in alphabetical order: the key order of these bodies when they were built as a
// `serde_json::Value` (a sorted map in release builds), so the served bytes did not change.
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct IntrinsicsDoc {
    /// Principal point x, pixels.
    pub cx: f64,
    /// Principal point y, pixels.
    pub cy: f64,
    /// Brown–Conrady k1, k2, p1, p2, k3.
    #[serde(default)]
    pub distortion: [f64; 5],
    /// Focal length along x, pixels.
    pub fx: f64,
    /// Focal length along y, pixels.
    pub fy: f64,
}

/// The fields of a ROS CameraInfo message (REP 104) that carry the calibration. (Lower-case
/// `k`, `d`, `r`, `p` are accepted too; the schema names the message's own spelling.)
#[derive(Debug, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
struct CameraInfoInput {
    /// Camera matrix, row-major 3×3.
    #[serde(alias = "k")]
    #[serde(rename = "K")]
    k: [f64; 9],
    /// `[k1, k2, p1, p2, k3]`, or empty for none.
    #[serde(alias = "d")]
    #[serde(rename = "D", default)]
    d: Vec<f64>,
    /// `plumb_bob` (the default; the only model taken with a non-empty `D`).
    #[serde(default = "plumb_bob")]
    distortion_model: String,
    /// Must equal the camera's width when given.
    #[serde(default)]
    width: Option<u32>,
    /// Must equal the camera's height when given.
    #[serde(default)]
    height: Option<u32>,
    // R and P are accepted and ignored: goalsmith works in the unrectified image.
    /// Rectification rotation; accepted and ignored.
    #[serde(alias = "r", rename = "R", default)]
    _r: Option<Vec<f64>>,
    /// Projection matrix; accepted and ignored.
    #[serde(alias = "p", rename = "P", default)]
    _p: Option<Vec<f64>>,
}

fn plumb_bob() -> String {
    "plumb_bob".into()
}

/// The work plane n·X = offset_m in camera coordinates (metres).
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct WorkPlaneDoc {
    /// Plane normal (any length; stored normalised).
    pub normal: [f64; 3],
    /// Offset along the normal, metres.
    pub offset_m: f64,
}

/// Camera to robot base: X_base = R·X_cam + t.
#[derive(Debug, Clone, Deserialize, Serialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct PoseDoc {
    /// 3×3 rotation, row-major.
    pub rotation: [[f64; 3]; 3],
    /// Translation, metres.
    pub translation_m: [f64; 3],
}

/// The stored camera document (also the body served, plus id and times).
#[derive(Debug, Clone, Deserialize, Serialize)]
pub struct CameraDoc {
    /// Display name.
    pub name: String,
    /// Frame width.
    pub width: u32,
    /// Frame height.
    pub height: u32,
    /// Intrinsics in goalsmith's form.
    pub intrinsics: Option<IntrinsicsDoc>,
    /// Work plane.
    pub work_plane: Option<WorkPlaneDoc>,
    /// Pose of the camera in the robot base frame.
    pub pose_in_base: Option<PoseDoc>,
    /// Safe zone polygon.
    pub safe_zone: Option<Vec<Xy>>,
    /// No-go zone polygons.
    pub no_go_zones: Vec<Vec<Xy>>,
}

impl CameraDoc {
    /// The checked intrinsics, if calibrated.
    pub fn intrinsics(&self) -> Option<Intrinsics> {
        self.intrinsics
            .as_ref()
            .and_then(|i| Intrinsics::new(i.fx, i.fy, i.cx, i.cy, i.distortion).ok())
    }
    /// The checked work plane, if given.
    pub fn work_plane(&self) -> Option<WorkPlane> {
        self.work_plane
            .as_ref()
            .and_then(|w| WorkPlane::new(w.normal, w.offset_m).ok())
    }
    /// The checked pose, if given.
    pub fn pose(&self) -> Option<Pose> {
        self.pose_in_base
            .as_ref()
            .and_then(|p| Pose::new(p.rotation, p.translation_m).ok())
    }
}

fn parse_intrinsics(v: Value, width: u32, height: u32) -> ServiceResult<IntrinsicsDoc> {
    let direct = v.get("fx").is_some();
    let intr = if direct {
        let d: IntrinsicsDoc = crate::strict_json::from_value(v)
            .map_err(|e| ServiceError::invalid("bad_intrinsics", "intrinsics", e.to_string()))?;
        Intrinsics::new(d.fx, d.fy, d.cx, d.cy, d.distortion)
            .map_err(|e| ServiceError::invalid("bad_intrinsics", "intrinsics", e.to_string()))?
    } else {
        let ros: CameraInfoInput = crate::strict_json::from_value(v).map_err(|e| {
            ServiceError::invalid(
                "bad_intrinsics",
                "intrinsics",
                format!("give {{fx, fy, cx, cy, distortion}} or CameraInfo {{K, D, distortion_model}}: {e}"),
            )
        })?;
        if ros.width.is_some_and(|w| w != width) || ros.height.is_some_and(|h| h != height) {
            return Err(ServiceError::invalid(
                "bad_intrinsics",
                "intrinsics",
                "the CameraInfo width and height differ from the camera's",
            ));
        }
        Intrinsics::from_camera_info(ros.k, &ros.d, &ros.distortion_model)
            .map_err(|e| ServiceError::invalid("bad_intrinsics", "intrinsics", e.to_string()))?
    };
    intr.check_plausible(width, height)
        .map_err(|e| ServiceError::invalid("bad_intrinsics", "intrinsics", e.to_string()))?;
    Ok(IntrinsicsDoc {
        cx: intr.cx(),
        cy: intr.cy(),
        distortion: intr.distortion(),
        fx: intr.fx(),
        fy: intr.fy(),
    })
}

/// Checks a camera body into the stored document.
pub fn check_camera(input: CameraInput) -> ServiceResult<CameraDoc> {
    let name = names::check(NameKind::Camera, &input.name)
        .map_err(|e| ServiceError::invalid(e.code(), "name", e.to_string()))?;
    for (field, v) in [("width", input.width), ("height", input.height)] {
        if v == 0 || v > MAX_SIDE {
            return Err(ServiceError::invalid(
                "bad_size",
                field,
                format!("{field} must be between 1 and {MAX_SIDE} pixels"),
            ));
        }
    }
    let (w, h) = (input.width, input.height);
    let intrinsics = input
        .intrinsics
        .map(|v| parse_intrinsics(v, w, h))
        .transpose()?;
    let work_plane = match input.work_plane {
        Some(p) => {
            let plane = WorkPlane::new(p.normal, p.offset_m).map_err(|e| {
                ServiceError::invalid("bad_work_plane", "work_plane", e.to_string())
            })?;
            Some(WorkPlaneDoc {
                normal: plane.normal(),
                offset_m: plane.offset_m(),
            })
        }
        None => None,
    };
    if let Some(p) = &input.pose_in_base {
        Pose::new(p.rotation, p.translation_m)
            .map_err(|e| ServiceError::invalid("bad_pose", "pose_in_base", e.to_string()))?;
    }
    if let Some(z) = &input.safe_zone {
        check_zone(w, h, z, "safe_zone")?;
    }
    let no_go_zones = input.no_go_zones.unwrap_or_default();
    for (k, z) in no_go_zones.iter().enumerate() {
        check_zone(w, h, z, &format!("no_go_zones[{k}]"))?;
    }
    Ok(CameraDoc {
        name,
        width: w,
        height: h,
        intrinsics,
        work_plane,
        pose_in_base: input.pose_in_base,
        safe_zone: input.safe_zone,
        no_go_zones,
    })
}

/// A camera as served: the stored document, its id and time, and the calibration also in ROS
/// CameraInfo form.
// Fields in alphabetical order: the key order of these bodies when they were built as a
// `serde_json::Value` (a sorted map in release builds), so the served bytes did not change.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct CameraView {
    /// The intrinsics as ROS CameraInfo fields; null when the camera is not calibrated.
    pub camera_info: Option<CameraInfoView>,
    /// Registration time, RFC 3339 UTC.
    pub created_at: String,
    /// Frame height.
    pub height: u32,
    /// Camera id.
    pub id: String,
    /// Intrinsics in goalsmith's form; null when not calibrated.
    pub intrinsics: Option<IntrinsicsDoc>,
    /// Display name.
    pub name: String,
    /// No-go zone polygons.
    pub no_go_zones: Vec<Vec<Xy>>,
    /// Pose of the camera in the robot base frame.
    pub pose_in_base: Option<PoseDoc>,
    /// Safe zone polygon.
    pub safe_zone: Option<Vec<Xy>>,
    /// Frame width.
    pub width: u32,
    /// Work plane (unit normal).
    pub work_plane: Option<WorkPlaneDoc>,
}

/// Intrinsics as the fields of a ROS CameraInfo message (REP 104 names: K, D, R, P).
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct CameraInfoView {
    /// `[k1, k2, p1, p2, k3]`.
    #[serde(rename = "D")]
    pub d: Vec<f64>,
    /// Camera matrix, row-major 3×3.
    #[serde(rename = "K")]
    pub k: [f64; 9],
    /// Projection matrix `[K | 0]`, row-major 3×4.
    #[serde(rename = "P")]
    pub p: [f64; 12],
    /// Rectification rotation (the identity), row-major 3×3.
    #[serde(rename = "R")]
    pub r: [f64; 9],
    /// `plumb_bob`.
    pub distortion_model: String,
    /// Image height.
    pub height: u32,
    /// Image width.
    pub width: u32,
}

/// The camera as served.
pub fn camera_view(row: &CameraRow) -> ServiceResult<CameraView> {
    let doc = parse_doc(row)?;
    Ok(CameraView {
        camera_info: doc
            .intrinsics()
            .map(|i| camera_info_view(&i, doc.width, doc.height)),
        created_at: rfc3339(row.created_at),
        height: doc.height,
        id: row.id.clone(),
        intrinsics: doc.intrinsics,
        name: doc.name,
        no_go_zones: doc.no_go_zones,
        pose_in_base: doc.pose_in_base,
        safe_zone: doc.safe_zone,
        width: doc.width,
        work_plane: doc.work_plane,
    })
}

/// The camera as served, as a value (for pages and bundles).
pub fn camera_json(row: &CameraRow) -> ServiceResult<Value> {
    serde_json::to_value(camera_view(row)?).map_err(|e| ServiceError::Internal(e.to_string()))
}

/// Intrinsics as the fields of a ROS CameraInfo message.
pub fn camera_info_view(i: &Intrinsics, width: u32, height: u32) -> CameraInfoView {
    let ci = i.to_camera_info(width, height);
    CameraInfoView {
        d: ci.d,
        k: ci.k,
        p: ci.p,
        r: ci.r,
        distortion_model: ci.distortion_model,
        height: ci.height,
        width: ci.width,
    }
}

/// Body of `GET /api/cameras/{id}/intrinsics`.
// Fields in alphabetical order: the key order of these bodies when they were built as a
// `serde_json::Value` (a sorted map in release builds), so the served bytes did not change.
#[derive(Debug, Serialize, JsonSchema)]
pub struct ResizedIntrinsics {
    /// The intrinsics as ROS CameraInfo fields.
    pub camera_info: CameraInfoView,
    /// The resized height.
    pub height: u32,
    /// The intrinsics in goalsmith's form.
    pub intrinsics: IntrinsicsDoc,
    /// The resized width.
    pub width: u32,
}

/// Parses a stored camera document.
pub fn parse_doc(row: &CameraRow) -> ServiceResult<CameraDoc> {
    serde_json::from_str(&row.document)
        .map_err(|e| ServiceError::Internal(format!("camera {} unreadable: {e}", row.id)))
}

/// Stores a checked camera for a team.
pub async fn insert(
    store: &store::Store,
    team_id: &str,
    doc: &CameraDoc,
) -> ServiceResult<CameraRow> {
    let row = CameraRow {
        id: uuid::Uuid::new_v4().to_string(),
        team_id: team_id.to_string(),
        name: doc.name.clone(),
        width: i64::from(doc.width),
        height: i64::from(doc.height),
        document: serde_json::to_string(doc).map_err(|e| ServiceError::Internal(e.to_string()))?,
        created_at: store::now_ms(),
    };
    store::cameras::insert(store, &row).await?;
    Ok(row)
}

/// A team's camera or 404.
pub async fn load(state: &AppState, who: &Principal, id: &str) -> ServiceResult<CameraRow> {
    let id = parse_id(id, "camera")?;
    store::cameras::get(&state.store, &who.team_id, &id)
        .await?
        .ok_or_else(|| ServiceError::NotFound(format!("no camera with id {id}")))
}

/// Creates a camera of the team from a checked description.
pub async fn create(
    state: &AppState,
    who: &Principal,
    input: CameraInput,
) -> ServiceResult<CameraRow> {
    who.require(Role::Editor)?;
    let doc = check_camera(input)?;
    insert(&state.store, &who.team_id, &doc).await
}

/// The team's cameras as served.
pub async fn list(state: &AppState, who: &Principal) -> ServiceResult<Vec<CameraView>> {
    let rows = store::cameras::list(&state.store, &who.team_id).await?;
    rows.iter().map(camera_view).collect()
}

/// A camera's intrinsics for frames resized to `width` × `height` (default: the camera's size):
/// fx, cx scaled by w/W; fy, cy by h/H; pixel centres kept at integers.
pub async fn resized_intrinsics(
    state: &AppState,
    who: &Principal,
    id: &str,
    width: Option<u32>,
    height: Option<u32>,
) -> ServiceResult<ResizedIntrinsics> {
    let row = load(state, who, id).await?;
    let doc = parse_doc(&row)?;
    let intr = doc.intrinsics().ok_or_else(|| {
        ServiceError::NotFound(format!("camera {:?} has no intrinsics", doc.name))
    })?;
    let (w, h) = (width.unwrap_or(doc.width), height.unwrap_or(doc.height));
    if w == 0 || h == 0 || w > MAX_SIDE || h > MAX_SIDE {
        return Err(ServiceError::invalid(
            "bad_size",
            "width",
            format!("width and height must be between 1 and {MAX_SIDE}"),
        ));
    }
    let scaled = intr
        .scaled(
            f64::from(w) / f64::from(doc.width),
            f64::from(h) / f64::from(doc.height),
        )
        .map_err(|e| ServiceError::invalid("bad_size", "width", e.to_string()))?;
    Ok(ResizedIntrinsics {
        camera_info: camera_info_view(&scaled, w, h),
        height: h,
        intrinsics: IntrinsicsDoc {
            cx: scaled.cx(),
            cy: scaled.cy(),
            distortion: scaled.distortion(),
            fx: scaled.fx(),
            fy: scaled.fy(),
        },
        width: w,
    })
}

/// The team's cameras as stored (for lists).
pub async fn rows(state: &AppState, who: &Principal) -> ServiceResult<Vec<CameraRow>> {
    Ok(store::cameras::list(&state.store, &who.team_id).await?)
}
