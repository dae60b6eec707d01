//! Camera models: pinhole intrinsics with Brown–Conrady distortion, the work plane and the
//! camera's pose in the robot base frame.
//!
//! Pixel convention (the same as OpenCV's and ROS's K matrix): x to the right, y down, the
//! centre of the top-left pixel is (0, 0). A camera-frame point X = (X, Y, Z) in metres, Z along
//! the optical axis, projects to normalized coordinates (X/Z, Y/Z), is distorted with
//! (k1, k2, p1, p2, k3) exactly as OpenCV's `projectPoints` does, and lands on pixel
//! (fx·x_d + cx, fy·y_d + cy).

use serde::{Deserialize, Serialize};
use thiserror::Error;

/// What is wrong with a camera model.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum CameraError {
    /// A number is NaN or infinite.
    #[error("{field} must be a finite number")]
    NonFinite {
        /// Which value.
        field: &'static str,
    },
    /// A focal length is zero or negative.
    #[error("{field} must be > 0, got {value}")]
    NonPositive {
        /// Which value.
        field: &'static str,
        /// The value given.
        value: f64,
    },
    /// K is not of the form [fx 0 cx; 0 fy cy; 0 0 1].
    #[error("K must be [fx, 0, cx, 0, fy, cy, 0, 0, 1] (no skew); entry {index} is {value}")]
    BadCameraMatrix {
        /// Row-major index of the offending entry.
        index: usize,
        /// Its value.
        value: f64,
    },
    /// Only plumb_bob (k1, k2, p1, p2, k3) is supported.
    #[error(
        "distortion model {0:?} is not supported; use \"plumb_bob\" with D = [k1, k2, p1, p2, k3]"
    )]
    UnsupportedDistortionModel(String),
    /// A value no real camera of this frame size has.
    #[error("{field} = {value} is not a physical value for a {width}×{height} frame: {why}")]
    Implausible {
        /// Which value.
        field: &'static str,
        /// The value given.
        value: f64,
        /// Frame width.
        width: u32,
        /// Frame height.
        height: u32,
        /// The rule it breaks.
        why: &'static str,
    },
    /// D has the wrong number of coefficients.
    #[error("plumb_bob needs 5 distortion coefficients [k1, k2, p1, p2, k3] (or none), got {0}")]
    BadDistortionLength(usize),
    /// The work plane's normal is the zero vector.
    #[error("the work plane normal must not be the zero vector")]
    ZeroNormal,
    /// The rotation is not orthonormal or not right-handed.
    #[error("the rotation must be orthonormal with determinant +1 (largest error {error:e})")]
    NotARotation {
        /// Largest deviation of RᵀR from I, or of det R from 1.
        error: f64,
    },
}

/// Pinhole intrinsics with Brown–Conrady distortion `[k1, k2, p1, p2, k3]` (OpenCV order).
///
/// Serialises as `{fx, fy, cx, cy, distortion}`, the API's form; deserialising checks the
/// values through [`Intrinsics::new`].
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "IntrinsicsParams")]
pub struct Intrinsics {
    fx: f64,
    fy: f64,
    cx: f64,
    cy: f64,
    distortion: [f64; 5],
}

/// Unchecked intrinsics as they arrive in JSON; see [`Intrinsics`].
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct IntrinsicsParams {
    /// Focal length in pixels, horizontal.
    pub fx: f64,
    /// Focal length in pixels, vertical.
    pub fy: f64,
    /// Principal point x in pixels.
    pub cx: f64,
    /// Principal point y in pixels.
    pub cy: f64,
    /// `[k1, k2, p1, p2, k3]`; all zero when absent.
    #[serde(default)]
    pub distortion: [f64; 5],
}

impl TryFrom<IntrinsicsParams> for Intrinsics {
    type Error = CameraError;
    fn try_from(p: IntrinsicsParams) -> Result<Self, CameraError> {
        Intrinsics::new(p.fx, p.fy, p.cx, p.cy, p.distortion)
    }
}

/// The calibration fields of a ROS `sensor_msgs/CameraInfo` message (REP 104), monocular.
///
/// Field names follow the ROS 2 message (lower case). `r` is the identity and `p` is
/// `[K | 0]`, which is what a monocular camera without rectification publishes.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CameraInfo {
    /// Image width in pixels.
    pub width: u32,
    /// Image height in pixels.
    pub height: u32,
    /// `"plumb_bob"`.
    pub distortion_model: String,
    /// `[k1, k2, p1, p2, k3]`.
    pub d: Vec<f64>,
    /// Camera matrix, row-major 3×3.
    pub k: [f64; 9],
    /// Rectification rotation, row-major 3×3.
    #[serde(default = "identity9")]
    pub r: [f64; 9],
    /// Projection matrix, row-major 3×4.
    #[serde(default)]
    pub p: [f64; 12],
}

fn identity9() -> [f64; 9] {
    [1.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 1.0]
}

fn finite(value: f64, field: &'static str) -> Result<f64, CameraError> {
    if value.is_finite() {
        Ok(value)
    } else {
        Err(CameraError::NonFinite { field })
    }
}

fn positive(value: f64, field: &'static str) -> Result<f64, CameraError> {
    finite(value, field)?;
    if value > 0.0 {
        Ok(value)
    } else {
        Err(CameraError::NonPositive { field, value })
    }
}

/// Largest number of fixed-point iterations in [`Intrinsics::undistort_pixel`].
const UNDISTORT_MAX_ITER: usize = 200;
/// Largest number of Newton steps after the fixed-point iteration.
const UNDISTORT_MAX_NEWTON: usize = 20;
/// A pixel is accepted as undistorted when re-distorting it lands within this many pixels.
const UNDISTORT_ACCEPT_PX: f64 = 1e-6;

impl Intrinsics {
    /// Checks and builds intrinsics: every value finite, fx and fy > 0.
    pub fn new(
        fx: f64,
        fy: f64,
        cx: f64,
        cy: f64,
        distortion: [f64; 5],
    ) -> Result<Self, CameraError> {
        const NAMES: [&str; 5] = [
            "distortion[0] (k1)",
            "distortion[1] (k2)",
            "distortion[2] (p1)",
            "distortion[3] (p2)",
            "distortion[4] (k3)",
        ];
        for (v, name) in distortion.iter().zip(NAMES) {
            finite(*v, name)?;
        }
        Ok(Self {
            fx: positive(fx, "fx")?,
            fy: positive(fy, "fy")?,
            cx: finite(cx, "cx")?,
            cy: finite(cy, "cy")?,
            distortion,
        })
    }

    /// Refuses intrinsics no real camera with a `width`×`height` frame has, so a typo such as
    /// `fx: 1e308` is caught when the camera is registered instead of silently giving no 3-D
    /// targets later. The bounds are generous: focal lengths from 10⁻³ to 10³ times the longer
    /// side (fields of view from about 0.06° to nearly 180°), the principal point within one
    /// frame size of the frame, and distortion coefficients of magnitude at most 10³ (fitted
    /// values are usually well below 10). Rules of thumb (common practice), not a standard.
    pub fn check_plausible(&self, width: u32, height: u32) -> Result<(), CameraError> {
        let side = f64::from(width.max(height));
        let bad = |field, value, why| CameraError::Implausible {
            field,
            value,
            width,
            height,
            why,
        };
        for (field, f) in [("fx", self.fx), ("fy", self.fy)] {
            if !(1e-3 * side..=1e3 * side).contains(&f) {
                return Err(bad(
                    field,
                    f,
                    "a focal length lies within 10⁻³ to 10³ times the longer side",
                ));
            }
        }
        let (w, h) = (f64::from(width), f64::from(height));
        if !(-w..=2.0 * w).contains(&self.cx) {
            return Err(bad(
                "cx",
                self.cx,
                "the principal point lies within one frame width of the frame",
            ));
        }
        if !(-h..=2.0 * h).contains(&self.cy) {
            return Err(bad(
                "cy",
                self.cy,
                "the principal point lies within one frame height of the frame",
            ));
        }
        const NAMES: [&str; 5] = ["k1", "k2", "p1", "p2", "k3"];
        for (v, name) in self.distortion.iter().zip(NAMES) {
            if v.abs() > 1e3 {
                return Err(bad(
                    name,
                    *v,
                    "distortion coefficients are at most 10³ in size",
                ));
            }
        }
        Ok(())
    }

    /// From ROS CameraInfo fields: `k` row-major 3×3 `[fx 0 cx; 0 fy cy; 0 0 1]`, `d` the
    /// plumb_bob coefficients `[k1, k2, p1, p2, k3]` (an empty `d` means no distortion, with any
    /// or no model name).
    pub fn from_camera_info(
        k: [f64; 9],
        d: &[f64],
        distortion_model: &str,
    ) -> Result<Self, CameraError> {
        for (index, value) in k.iter().enumerate() {
            finite(*value, "K")?;
            let must = match index {
                1 | 3 | 6 | 7 => Some(0.0),
                8 => Some(1.0),
                _ => None,
            };
            if must.is_some_and(|m| *value != m) {
                return Err(CameraError::BadCameraMatrix {
                    index,
                    value: *value,
                });
            }
        }
        let distortion = if d.is_empty() {
            [0.0; 5]
        } else {
            if distortion_model != "plumb_bob" {
                return Err(CameraError::UnsupportedDistortionModel(
                    distortion_model.to_string(),
                ));
            }
            <[f64; 5]>::try_from(d).map_err(|_| CameraError::BadDistortionLength(d.len()))?
        };
        Self::new(k[0], k[4], k[2], k[5], distortion)
    }

    /// The ROS CameraInfo form of these intrinsics for a `width` × `height` image.
    pub fn to_camera_info(&self, width: u32, height: u32) -> CameraInfo {
        let (fx, fy, cx, cy) = (self.fx, self.fy, self.cx, self.cy);
        CameraInfo {
            width,
            height,
            distortion_model: "plumb_bob".to_string(),
            d: self.distortion.to_vec(),
            k: [fx, 0.0, cx, 0.0, fy, cy, 0.0, 0.0, 1.0],
            r: identity9(),
            p: [fx, 0.0, cx, 0.0, 0.0, fy, cy, 0.0, 0.0, 0.0, 1.0, 0.0],
        }
    }

    /// Horizontal focal length in pixels.
    pub fn fx(&self) -> f64 {
        self.fx
    }
    /// Vertical focal length in pixels.
    pub fn fy(&self) -> f64 {
        self.fy
    }
    /// Principal point x in pixels.
    pub fn cx(&self) -> f64 {
        self.cx
    }
    /// Principal point y in pixels.
    pub fn cy(&self) -> f64 {
        self.cy
    }
    /// `[k1, k2, p1, p2, k3]`.
    pub fn distortion(&self) -> [f64; 5] {
        self.distortion
    }
    /// K as a row-major 3×3 matrix.
    pub fn k_matrix(&self) -> [[f64; 3]; 3] {
        [
            [self.fx, 0.0, self.cx],
            [0.0, self.fy, self.cy],
            [0.0, 0.0, 1.0],
        ]
    }

    /// Intrinsics of the same camera after resizing the image by `sx` horizontally and `sy`
    /// vertically (new width = sx · old width).
    ///
    /// Pixel-centre subtlety: with pixel centres at integers and the image spanning
    /// [−0.5, W − 0.5], a resize maps x to (x + 0.5)·s − 0.5 (this is also how OpenCV's
    /// `resize` samples). So fx' = sx·fx but cx' = (cx + 0.5)·sx − 0.5, and likewise for y.
    /// The often-quoted cx' = sx·cx is the same rule for a convention with pixel *corners*
    /// at integers; used with OpenCV-style K matrices it is off by (sx − 1)/2 px. We use the
    /// exact form for our convention.
    pub fn scaled(&self, sx: f64, sy: f64) -> Result<Self, CameraError> {
        positive(sx, "sx")?;
        positive(sy, "sy")?;
        Self::new(
            self.fx * sx,
            self.fy * sy,
            (self.cx + 0.5) * sx - 0.5,
            (self.cy + 0.5) * sy - 0.5,
            self.distortion,
        )
    }

    /// Applies the distortion to normalized coordinates (OpenCV's order of operations).
    pub fn distort_normalized(&self, [x, y]: [f64; 2]) -> [f64; 2] {
        let [k1, k2, p1, p2, k3] = self.distortion;
        let r2 = x * x + y * y;
        let r4 = r2 * r2;
        let r6 = r4 * r2;
        let a1 = 2.0 * x * y;
        let a2 = r2 + 2.0 * x * x;
        let a3 = r2 + 2.0 * y * y;
        let cdist = 1.0 + k1 * r2 + k2 * r4 + k3 * r6;
        [x * cdist + p1 * a1 + p2 * a2, y * cdist + p1 * a3 + p2 * a1]
    }

    /// Pixel of normalized (undistorted) coordinates `[x, y]`.
    pub fn normalized_to_pixel(&self, xy: [f64; 2]) -> [f64; 2] {
        let [xd, yd] = self.distort_normalized(xy);
        [self.fx * xd + self.cx, self.fy * yd + self.cy]
    }

    /// Projects a camera-frame point (metres, Z forward) to a pixel, as OpenCV's
    /// `projectPoints` with zero rvec/tvec. `None` when the point is not in front of the camera
    /// (Z ≤ 0) or the result is not finite.
    pub fn project(&self, point_camera_m: [f64; 3]) -> Option<[f64; 2]> {
        let [x, y, z] = point_camera_m;
        if z.is_nan() || z <= 0.0 {
            return None;
        }
        let iz = 1.0 / z;
        let uv = self.normalized_to_pixel([x * iz, y * iz]);
        (uv[0].is_finite() && uv[1].is_finite()).then_some(uv)
    }

    /// Normalized undistorted coordinates `[x_n, y_n]` of a pixel: the inverse of
    /// [`Intrinsics::normalized_to_pixel`].
    ///
    /// Runs OpenCV's fixed-point iteration (as in `undistortPoints`) until the update is below
    /// 1e-12 or 200 iterations, then Newton steps on the 2×2 system, so that mapping the result
    /// back lands within 1e-6 px of the input (in practice ~1e-12 px). OpenCV's default of five
    /// iterations is far from converged where distortion is strong: on the wide test lens of
    /// `tests/reference/gen_camera.py` it leaves a median 0.04 px and over 100 px in the
    /// corners (measured with OpenCV 5.0; the numbers are stored in `gen_camera.json`).
    ///
    /// `None` when no such point exists within the lens's valid region: the pixel lies beyond
    /// the radius where the distortion polynomial folds back, or the iteration fails.
    pub fn undistort_pixel(&self, [u, v]: [f64; 2]) -> Option<[f64; 2]> {
        if !(u.is_finite() && v.is_finite()) {
            return None;
        }
        let [k1, k2, p1, p2, k3] = self.distortion;
        let x0 = (u - self.cx) / self.fx;
        let y0 = (v - self.cy) / self.fy;
        let (mut x, mut y) = (x0, y0);
        if self.distortion != [0.0; 5] {
            for _ in 0..UNDISTORT_MAX_ITER {
                let r2 = x * x + y * y;
                let icdist = 1.0 / (1.0 + ((k3 * r2 + k2) * r2 + k1) * r2);
                if !(icdist.is_finite() && icdist > 0.0) {
                    // OpenCV gives up here too; Newton from the distorted point may still work.
                    (x, y) = (x0, y0);
                    break;
                }
                let dx = 2.0 * p1 * x * y + p2 * (r2 + 2.0 * x * x);
                let dy = p1 * (r2 + 2.0 * y * y) + 2.0 * p2 * x * y;
                let nx = (x0 - dx) * icdist;
                let ny = (y0 - dy) * icdist;
                if !(nx.is_finite() && ny.is_finite()) {
                    (x, y) = (x0, y0);
                    break;
                }
                let step = (nx - x).abs().max((ny - y).abs());
                (x, y) = (nx, ny);
                if step < 1e-12 {
                    break;
                }
            }
            for _ in 0..UNDISTORT_MAX_NEWTON {
                let [fx_, fy_] = self.distort_normalized([x, y]);
                let (ex, ey) = (fx_ - x0, fy_ - y0);
                if (ex * self.fx).hypot(ey * self.fy) < 1e-13 {
                    break;
                }
                let [[a, b], [c, d]] = self.distortion_jacobian([x, y]);
                let det = a * d - b * c;
                if det.is_nan() || det.abs() <= 1e-300 {
                    return None;
                }
                x -= (d * ex - b * ey) / det;
                y -= (a * ey - c * ex) / det;
                if !(x.is_finite() && y.is_finite()) {
                    return None;
                }
            }
            // Beyond the fold the map is no longer one-to-one; a root there is not the pixel's ray.
            let [[a, b], [c, d]] = self.distortion_jacobian([x, y]);
            let jacobian_det = a * d - b * c;
            if jacobian_det.is_nan() || jacobian_det <= 0.0 {
                return None;
            }
        }
        let [pu, pv] = self.normalized_to_pixel([x, y]);
        ((pu - u).hypot(pv - v) <= UNDISTORT_ACCEPT_PX).then_some([x, y])
    }

    /// ∂(x_d, y_d)/∂(x, y) of [`Intrinsics::distort_normalized`], row-major.
    fn distortion_jacobian(&self, [x, y]: [f64; 2]) -> [[f64; 2]; 2] {
        let [k1, k2, p1, p2, k3] = self.distortion;
        let r2 = x * x + y * y;
        let c = 1.0 + k1 * r2 + k2 * r2 * r2 + k3 * r2 * r2 * r2;
        let dc = k1 + 2.0 * k2 * r2 + 3.0 * k3 * r2 * r2;
        let cross = 2.0 * x * y * dc + 2.0 * p1 * x + 2.0 * p2 * y;
        [
            [c + 2.0 * x * x * dc + 2.0 * p1 * y + 6.0 * p2 * x, cross],
            [cross, c + 2.0 * y * y * dc + 6.0 * p1 * y + 2.0 * p2 * x],
        ]
    }
}

/// The plane the robot works on, in camera coordinates: the points X (metres) with
/// n·X = offset_m, n a unit vector.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "WorkPlaneParams")]
pub struct WorkPlane {
    normal: [f64; 3],
    offset_m: f64,
}

/// Unchecked work plane as it arrives in JSON; see [`WorkPlane`].
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct WorkPlaneParams {
    /// Plane normal in camera coordinates (any nonzero length).
    pub normal: [f64; 3],
    /// n·X = offset_m for the given normal.
    pub offset_m: f64,
}

impl TryFrom<WorkPlaneParams> for WorkPlane {
    type Error = CameraError;
    fn try_from(p: WorkPlaneParams) -> Result<Self, CameraError> {
        WorkPlane::new(p.normal, p.offset_m)
    }
}

impl WorkPlane {
    /// Checks and builds a plane n·X = offset_m. The normal is scaled to unit length and the
    /// offset with it, so the set of points is unchanged.
    pub fn new(normal: [f64; 3], offset_m: f64) -> Result<Self, CameraError> {
        for v in normal {
            finite(v, "normal")?;
        }
        finite(offset_m, "offset_m")?;
        let len = norm3(normal);
        if !(len.is_finite() && len > 0.0) {
            return Err(CameraError::ZeroNormal);
        }
        Ok(Self {
            normal: normal.map(|v| v / len),
            offset_m: offset_m / len,
        })
    }
    /// Unit normal in camera coordinates.
    pub fn normal(&self) -> [f64; 3] {
        self.normal
    }
    /// Signed distance of the plane from the camera centre along the normal, metres.
    pub fn offset_m(&self) -> f64 {
        self.offset_m
    }
}

/// Where the camera sits in the robot base frame: X_base = R·X_cam + t.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "PoseParams")]
pub struct Pose {
    rotation: [[f64; 3]; 3],
    translation_m: [f64; 3],
}

/// Unchecked pose as it arrives in JSON; see [`Pose`].
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PoseParams {
    /// R, row-major.
    pub rotation: [[f64; 3]; 3],
    /// t in metres.
    pub translation_m: [f64; 3],
}

impl TryFrom<PoseParams> for Pose {
    type Error = CameraError;
    fn try_from(p: PoseParams) -> Result<Self, CameraError> {
        Pose::new(p.rotation, p.translation_m)
    }
}

/// Largest accepted deviation of RᵀR from I (entrywise) and of det R from 1.
pub const ROTATION_TOLERANCE: f64 = 1e-6;

impl Pose {
    /// Checks and builds a pose: R orthonormal within [`ROTATION_TOLERANCE`] with det +1.
    pub fn new(rotation: [[f64; 3]; 3], translation_m: [f64; 3]) -> Result<Self, CameraError> {
        for v in rotation.iter().flatten() {
            finite(*v, "rotation")?;
        }
        for v in translation_m {
            finite(v, "translation_m")?;
        }
        let r = &rotation;
        let mut error: f64 = 0.0;
        for a in 0..3 {
            for b in 0..3 {
                let dot: f64 = (0..3).map(|k| r[k][a] * r[k][b]).sum();
                let want = if a == b { 1.0 } else { 0.0 };
                error = error.max((dot - want).abs());
            }
        }
        let det = r[0][0] * (r[1][1] * r[2][2] - r[1][2] * r[2][1])
            - r[0][1] * (r[1][0] * r[2][2] - r[1][2] * r[2][0])
            + r[0][2] * (r[1][0] * r[2][1] - r[1][1] * r[2][0]);
        error = error.max((det - 1.0).abs());
        if error.is_nan() || error > ROTATION_TOLERANCE {
            return Err(CameraError::NotARotation { error });
        }
        Ok(Self {
            rotation,
            translation_m,
        })
    }
    /// R, row-major.
    pub fn rotation(&self) -> [[f64; 3]; 3] {
        self.rotation
    }
    /// t in metres.
    pub fn translation_m(&self) -> [f64; 3] {
        self.translation_m
    }
    /// X_base = R·X_cam + t.
    pub fn camera_to_base(&self, x_cam: [f64; 3]) -> [f64; 3] {
        let r = &self.rotation;
        std::array::from_fn(|i| {
            r[i][0] * x_cam[0] + r[i][1] * x_cam[1] + r[i][2] * x_cam[2] + self.translation_m[i]
        })
    }
}

fn norm3(v: [f64; 3]) -> f64 {
    v[0].hypot(v[1]).hypot(v[2])
}

/// The camera-frame point (metres) where the ray through pixel `[u, v]` meets the work plane.
///
/// The pixel is undistorted first. `None` when the pixel cannot be undistorted, the ray is
/// parallel to the plane, or the plane lies behind the camera along that ray.
pub fn pixel_to_plane(
    intrinsics: &Intrinsics,
    plane: &WorkPlane,
    uv: [f64; 2],
) -> Option<[f64; 3]> {
    let [x, y] = intrinsics.undistort_pixel(uv)?;
    let ray = [x, y, 1.0];
    let n = plane.normal;
    let denom = n[0] * ray[0] + n[1] * ray[1] + n[2] * ray[2];
    if denom.is_nan() || denom.abs() <= 1e-12 * norm3(ray) {
        return None;
    }
    let s = plane.offset_m / denom;
    if !(s.is_finite() && s > 0.0) {
        return None;
    }
    Some(ray.map(|c| c * s))
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::Value;

    /// Vectors from OpenCV (cv2.projectPoints, cv2.undistortPoints run to convergence); see
    /// tests/reference/gen_camera.py.
    const REFERENCE: &str = include_str!(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../../tests/reference/gen_camera.json"
    ));

    fn pairs(v: &Value) -> Vec<[f64; 2]> {
        v.as_array()
            .unwrap()
            .iter()
            .map(|p| [p[0].as_f64().unwrap(), p[1].as_f64().unwrap()])
            .collect()
    }

    fn lenses() -> Vec<(String, Intrinsics, Value)> {
        let doc: Value = serde_json::from_str(REFERENCE).unwrap();
        doc["lenses"]
            .as_array()
            .unwrap()
            .iter()
            .map(|l| {
                let d: Vec<f64> = l["distortion"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(|v| v.as_f64().unwrap())
                    .collect();
                let k = Intrinsics::new(
                    l["fx"].as_f64().unwrap(),
                    l["fy"].as_f64().unwrap(),
                    l["cx"].as_f64().unwrap(),
                    l["cy"].as_f64().unwrap(),
                    d.try_into().unwrap(),
                )
                .unwrap();
                (l["name"].as_str().unwrap().to_string(), k, l.clone())
            })
            .collect()
    }

    #[test]
    fn projection_matches_opencv_project_points() {
        for (name, k, l) in lenses() {
            let expected = pairs(&l["projected_px"]);
            for (p, e) in l["points_camera_m"]
                .as_array()
                .unwrap()
                .iter()
                .zip(expected)
            {
                let x = [0, 1, 2].map(|i| p[i].as_f64().unwrap());
                let got = k.project(x).unwrap();
                let err = (got[0] - e[0]).hypot(got[1] - e[1]);
                assert!(err <= 1e-9, "{name}: {got:?} vs {e:?} ({err:e} px)");
            }
        }
    }

    #[test]
    fn undistortion_matches_converged_opencv_and_round_trips() {
        for (name, k, l) in lenses() {
            let pixels = pairs(&l["pixels"]);
            let expected = pairs(&l["undistorted_converged"]);
            for (px, e) in pixels.iter().zip(expected) {
                let n = k
                    .undistort_pixel(*px)
                    .unwrap_or_else(|| panic!("{name}: {px:?}"));
                // Compare in pixels of the focal length: both sides converge to ~1e-12 px.
                let diff = ((n[0] - e[0]) * k.fx()).hypot((n[1] - e[1]) * k.fy());
                assert!(diff <= 1e-8, "{name}: {px:?}: {n:?} vs {e:?}");
                let back = k.normalized_to_pixel(n);
                let rt = (back[0] - px[0]).hypot(back[1] - px[1]);
                assert!(rt <= 1e-6, "{name}: round trip {rt:e} px at {px:?}");
            }
            // OpenCV's default five iterations are far off on the wide lens (measured there).
            if name == "wide" {
                assert!(l["default_five_iter_max_roundtrip_px"].as_f64().unwrap() > 1.0);
            }
        }
    }

    #[test]
    fn undistortion_refuses_pixels_beyond_the_fold() {
        // Strong barrel: r_d(r) = r (1 − 0.5 r²) peaks at r_d ≈ 0.544; farther pixels have no ray.
        let k = Intrinsics::new(500.0, 500.0, 0.0, 0.0, [-0.5, 0.0, 0.0, 0.0, 0.0]).unwrap();
        assert!(k.undistort_pixel([0.5 * 500.0, 0.0]).is_some());
        assert!(k.undistort_pixel([0.6 * 500.0, 0.0]).is_none());
        assert!(k.undistort_pixel([f64::NAN, 0.0]).is_none());
    }

    #[test]
    fn no_distortion_is_the_plain_pinhole() {
        let k = Intrinsics::new(600.0, 610.0, 319.5, 239.5, [0.0; 5]).unwrap();
        let uv = k.project([0.2, -0.1, 2.0]).unwrap();
        assert_eq!(uv, [600.0 * 0.1 + 319.5, 610.0 * -0.05 + 239.5]);
        let n = k.undistort_pixel(uv).unwrap();
        assert!((n[0] - 0.1).abs() < 1e-15 && (n[1] + 0.05).abs() < 1e-15);
        assert_eq!(k.project([0.0, 0.0, 0.0]), None);
        assert_eq!(k.project([0.0, 0.0, -1.0]), None);
    }

    #[test]
    fn checked_constructor_refuses_bad_values() {
        assert!(matches!(
            Intrinsics::new(0.0, 1.0, 0.0, 0.0, [0.0; 5]),
            Err(CameraError::NonPositive { field: "fx", .. })
        ));
        assert!(Intrinsics::new(1.0, -1.0, 0.0, 0.0, [0.0; 5]).is_err());
        assert!(Intrinsics::new(1.0, 1.0, f64::NAN, 0.0, [0.0; 5]).is_err());
        assert!(Intrinsics::new(1.0, 1.0, 0.0, 0.0, [0.0, f64::INFINITY, 0.0, 0.0, 0.0]).is_err());
        let bad: Result<Intrinsics, _> = serde_json::from_str(
            r#"{"fx": -3, "fy": 1, "cx": 0, "cy": 0, "distortion": [0,0,0,0,0]}"#,
        );
        assert!(bad.is_err());
        let ok: Intrinsics = serde_json::from_str(
            r#"{"fx": 3, "fy": 1, "cx": 0, "cy": 0, "distortion": [0.1,0,0,0,0]}"#,
        )
        .unwrap();
        assert_eq!(ok.distortion()[0], 0.1);
        assert_eq!(
            serde_json::to_value(ok).unwrap(),
            serde_json::json!({"fx": 3.0, "fy": 1.0, "cx": 0.0, "cy": 0.0, "distortion": [0.1, 0.0, 0.0, 0.0, 0.0]})
        );
    }

    #[test]
    fn camera_info_round_trip_and_errors() {
        let k =
            Intrinsics::new(900.0, 905.0, 640.2, 359.7, [-0.1, 0.02, 1e-4, -2e-4, 0.003]).unwrap();
        let info = k.to_camera_info(1280, 720);
        assert_eq!(info.p[3], 0.0);
        assert_eq!(info.p[2], 640.2);
        assert_eq!(info.r, identity9());
        let back = Intrinsics::from_camera_info(info.k, &info.d, &info.distortion_model).unwrap();
        assert_eq!(back, k);
        let json = serde_json::to_value(&info).unwrap();
        assert_eq!(json["distortion_model"], "plumb_bob");
        assert_eq!(json["d"].as_array().unwrap().len(), 5);

        let empty = Intrinsics::from_camera_info(info.k, &[], "").unwrap();
        assert_eq!(empty.distortion(), [0.0; 5]);
        assert_eq!(
            Intrinsics::from_camera_info(info.k, &[0.0; 8], "rational_polynomial"),
            Err(CameraError::UnsupportedDistortionModel(
                "rational_polynomial".into()
            ))
        );
        assert_eq!(
            Intrinsics::from_camera_info(info.k, &[0.0; 4], "plumb_bob"),
            Err(CameraError::BadDistortionLength(4))
        );
        let mut skewed = info.k;
        skewed[1] = 0.5;
        assert!(matches!(
            Intrinsics::from_camera_info(skewed, &info.d, "plumb_bob"),
            Err(CameraError::BadCameraMatrix { index: 1, .. })
        ));
        let mut homogeneous = info.k;
        homogeneous[8] = 2.0;
        assert!(Intrinsics::from_camera_info(homogeneous, &info.d, "plumb_bob").is_err());
    }

    #[test]
    fn scaling_follows_the_pixel_centre_convention() {
        let k =
            Intrinsics::new(800.0, 780.0, 630.0, 350.0, [-0.2, 0.05, 1e-3, -1e-3, 0.01]).unwrap();
        let (sx, sy) = (0.5, 0.25);
        let s = k.scaled(sx, sy).unwrap();
        for x in [[0.1, 0.2, 1.5], [-0.4, 0.3, 2.0], [0.0, 0.0, 1.0]] {
            let a = k.project(x).unwrap();
            let b = s.project(x).unwrap();
            // A resize by s maps frame x to (x + 0.5)·s − 0.5.
            assert!((b[0] - ((a[0] + 0.5) * sx - 0.5)).abs() < 1e-9);
            assert!((b[1] - ((a[1] + 0.5) * sy - 0.5)).abs() < 1e-9);
        }
        // The image edges map to the image edges: −0.5 → −0.5 and W − 0.5 → sW − 0.5.
        assert_eq!((-0.5 + 0.5) * sx - 0.5, -0.5);
        assert!(k.scaled(0.0, 1.0).is_err());
        assert!(k.scaled(1.0, f64::NAN).is_err());
    }

    #[test]
    fn work_plane_and_pose_checks() {
        let p = WorkPlane::new([0.0, 0.0, 2.0], 3.0).unwrap();
        assert_eq!(p.normal(), [0.0, 0.0, 1.0]);
        assert_eq!(p.offset_m(), 1.5);
        assert_eq!(WorkPlane::new([0.0; 3], 1.0), Err(CameraError::ZeroNormal));
        assert!(WorkPlane::new([f64::NAN, 0.0, 1.0], 1.0).is_err());

        let (c, s) = (0.3_f64.cos(), 0.3_f64.sin());
        let r = [[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]];
        let pose = Pose::new(r, [0.1, 0.2, 0.3]).unwrap();
        let b = pose.camera_to_base([1.0, 0.0, 0.0]);
        assert!((b[0] - (c + 0.1)).abs() < 1e-15 && (b[1] - (s + 0.2)).abs() < 1e-15);
        // A reflection (det −1) and a scaled matrix are not rotations.
        let reflect = [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, -1.0]];
        assert!(matches!(
            Pose::new(reflect, [0.0; 3]),
            Err(CameraError::NotARotation { .. })
        ));
        let scaled = [[1.001, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]];
        assert!(Pose::new(scaled, [0.0; 3]).is_err());
        let nearly = [[1.0 + 1e-8, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]];
        assert!(Pose::new(nearly, [0.0; 3]).is_ok());
        let bad: Result<Pose, _> = serde_json::from_str(
            r#"{"rotation": [[2,0,0],[0,1,0],[0,0,1]], "translation_m": [0,0,0]}"#,
        );
        assert!(bad.is_err());
    }

    #[test]
    fn pixel_to_plane_meets_the_plane_and_projects_back() {
        let k = Intrinsics::new(
            550.0,
            550.0,
            641.3,
            358.2,
            [-0.3, 0.09, 8e-4, -6e-4, -0.002],
        )
        .unwrap();
        // A bench top 0.8 m away, tilted 20° about the camera's x axis.
        let (c, s) = (20f64.to_radians().cos(), 20f64.to_radians().sin());
        let plane = WorkPlane::new([0.0, -s, c], 0.8).unwrap();
        for uv in [
            [641.3, 358.2],
            [10.0, 20.0],
            [1200.0, 700.0],
            [300.0, 500.0],
        ] {
            let x = pixel_to_plane(&k, &plane, uv).unwrap();
            let n = plane.normal();
            let on_plane = n[0] * x[0] + n[1] * x[1] + n[2] * x[2] - plane.offset_m();
            assert!(on_plane.abs() < 1e-12, "{on_plane:e}");
            let back = k.project(x).unwrap();
            assert!((back[0] - uv[0]).hypot(back[1] - uv[1]) < 1e-6);
        }
        // A plane through the camera's side: parallel to the optical-axis ray.
        let side = WorkPlane::new([1.0, 0.0, 0.0], 0.5).unwrap();
        assert_eq!(pixel_to_plane(&k, &side, [641.3, 358.2]), None);
        // A plane behind the camera.
        let behind = WorkPlane::new([0.0, 0.0, 1.0], -1.0).unwrap();
        assert_eq!(pixel_to_plane(&k, &behind, [100.0, 100.0]), None);
    }
}
