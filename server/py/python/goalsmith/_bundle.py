"""Bundles: a pinned goal revision, verified, scored in-process by the server's own code."""

from __future__ import annotations

import io
import json
import os
from dataclasses import dataclass
from typing import Any, List, Optional, Union

import numpy as np

from . import _native
from ._native import BundleError

__all__ = ["Bundle", "BundleError", "Camera", "CostResult", "Target3D", "open_bundle"]


@dataclass(frozen=True)
class Target3D:
    """A target point of the goal on the camera's work plane.

    ``term`` is the index of its term, ``point`` which point of the term (``target``,
    ``targets[k]`` or ``centroid``), ``pixel`` the target pixel ``[x, y]``, ``camera_m`` the point
    in camera coordinates (metres) and ``base_m`` in the robot base frame (metres; ``None``
    without a camera pose).
    """

    term: int
    point: str
    pixel: np.ndarray
    camera_m: np.ndarray
    base_m: Optional[np.ndarray]


@dataclass(frozen=True)
class Camera:
    """The camera a goal was drawn for, as the bundle's ``camera.json`` gives it.

    ``K`` is the 3×3 camera matrix and ``D`` the distortion ``[k1, k2, p1, p2, k3]`` (``None``
    for an uncalibrated camera). ``plane_normal`` (unit, camera frame) and ``plane_offset_m``
    describe the work plane ``n·X = offset`` (``None`` without one). ``pose`` is the 4×4
    camera-to-base transform ``X_base = R·X_cam + t`` (``None`` without one). ``targets_3d`` are
    the goal's targets on the plane (empty without intrinsics and a plane). ``raw`` is the
    whole ``camera.json``.
    """

    width: int
    height: int
    K: Optional[np.ndarray]
    D: Optional[np.ndarray]
    plane_normal: Optional[np.ndarray]
    plane_offset_m: Optional[float]
    pose: Optional[np.ndarray]
    targets_3d: List[Target3D]
    raw: dict


@dataclass(frozen=True)
class CostResult:
    """Costs of N candidates, as ``POST …/cost`` returns them.

    ``costs`` float64 (N,), ``per_point`` float64 (N, P) (each row sums to its cost), ``best`` the
    index of the cheapest candidate (the first on ties), and with ``grad=True`` ``grad`` float64
    (N, T, P, 2), the derivative of each candidate's cost with respect to its predicted points.
    """

    costs: np.ndarray
    per_point: np.ndarray
    best: int
    grad: Optional[np.ndarray] = None


def _array(value: Any, name: str) -> np.ndarray:
    """``value`` as an ndarray without copying (buffer or array protocol)."""
    try:
        arr = np.asarray(value)
    except Exception as e:  # an object numpy cannot read at all
        raise ValueError(f"{name} must be an array (buffer or array protocol): {e}") from None
    if arr.dtype == object:
        raise ValueError(f"{name} must be a numeric array, not objects")
    if not arr.flags.c_contiguous:
        raise ValueError(
            f"{name} must be C-contiguous (numpy.ascontiguousarray({name}) makes a contiguous "
            "copy); it is read in place, without copying"
        )
    return arr


class Bundle:
    """A goal revision's bundle, verified against its manifest.

    Open one with :func:`open_bundle` or :meth:`goalsmith.Client.bundle`. ``goal`` is the revision
    document, ``cost_maps`` the float32 (P, H, W) cost maps, ``camera`` the camera, ``caution``
    the safety caution every export carries. :meth:`cost` scores candidate futures exactly as
    the server's ``POST /api/goals/{id}/revisions/{n}/cost`` does, bit for bit.
    """

    def __init__(self, data: bytes):
        self._native = _native.NativeBundle(bytes(data))
        self.goal: dict = json.loads(self._native.goal_json)
        self.manifest: dict = json.loads(self._native.manifest_json)
        self._cost_maps: Optional[np.ndarray] = None
        self._camera: Optional[Camera] = None

    def __repr__(self) -> str:
        return (
            f"<goalsmith.Bundle goal {self.goal.get('goal_id')} revision "
            f"{self.goal.get('revision')}, P={self.points}, frame {self.width}x{self.height}>"
        )

    @property
    def points(self) -> int:
        """Number of source points P (``goal['derived']['points']``)."""
        return self._native.points

    @property
    def width(self) -> int:
        """Frame width W."""
        return self._native.frame_size[0]

    @property
    def height(self) -> int:
        """Frame height H."""
        return self._native.frame_size[1]

    @property
    def caution(self) -> str:
        """The safety caution (from the manifest)."""
        return str(self.manifest.get("caution", _native.SAFETY_CAUTION))

    def file(self, name: str) -> bytes:
        """The bytes of one of the bundle's files (each checked against its SHA-256)."""
        return self._native.file(name)

    @property
    def files(self) -> List[str]:
        """Names of the bundle's files, manifest.json aside."""
        return list(self._native.names())

    @property
    def cost_maps(self) -> np.ndarray:
        """float32 (P, H, W): entry [p, j, i] is the cost of point p at pixel centre (i, j)."""
        if self._cost_maps is None:
            arr = np.load(io.BytesIO(self.file("cost-maps.npy")), allow_pickle=False)
            arr.setflags(write=False)
            self._cost_maps = arr
        return self._cost_maps

    @property
    def camera(self) -> Camera:
        """The camera: K, D, the work plane and the pose as numpy arrays, with the 3-D targets."""
        if self._camera is None:
            self._camera = _camera(json.loads(self.file("camera.json")), self.goal)
        return self._camera

    def cost(
        self,
        points: Any = None,
        maps: Any = None,
        *,
        grad: bool = False,
        threads: Optional[int] = None,
    ) -> CostResult:
        """Scores candidates exactly as ``POST …/cost`` does.

        Give one of:

        - ``points``: predicted pixel positions ``[x, y]``, shape (N, T, P, 2), float32 or
          float64;
        - ``maps``: probability maps (N, T, P, h, w), float32 or float16, at any resolution (a
          map pixel (i, j) stands for the frame point ((i + 0.5)·W/w − 0.5,
          (j + 0.5)·H/h − 0.5), evaluated exactly).

        Arrays are read in place (they must be C-contiguous; anything with the buffer or array
        protocol is accepted, so a torch CPU tensor's ``.numpy()`` passes at no cost) and must
        not be written to while the call runs: the GIL is released during the computation.
        ``grad=True`` (points only) also returns ``grad`` (N, T, P, 2). ``threads`` sets the
        number of threads (default: one per core). Bad shapes, dtypes, NaN and negative
        probabilities raise ``ValueError`` with the server's messages.
        """
        if (points is None) == (maps is None):
            raise ValueError("give points or maps (exactly one of them)")
        if threads is not None and (isinstance(threads, bool) or not isinstance(threads, int)):
            raise ValueError(f"threads must be a whole number, not {threads!r}")
        p = self.points
        if points is not None:
            arr = _array(points, "points")
            if arr.dtype == np.float64:
                dtype = "f8"
            elif arr.dtype == np.float32:
                dtype = "f4"
            else:
                raise ValueError(f"points must be float32 or float64, not {arr.dtype}")
            if arr.ndim != 4 or arr.shape[2] != p or arr.shape[3] != 2:
                raise ValueError(
                    f"this goal has P = {p} source points: send maps of shape (N, T, {p}, h, w) "
                    f"or points of shape (N, T, {p}, 2), not {list(arr.shape)}"
                )
            n, t = arr.shape[0], arr.shape[1]
            if not arr.flags.aligned:
                raise ValueError("points must be aligned (numpy.require(points, requirements='A'))")
            raw = self._native.cost_points(arr, dtype, n, t, bool(grad), threads)
            return _result(raw, n, t, p)
        if grad:
            raise ValueError("grad is defined for points; maps give costs only")
        arr = _array(maps, "maps")
        if arr.ndim != 5 or arr.shape[2] != p:
            raise ValueError(
                f"this goal has P = {p} source points: send maps of shape (N, T, {p}, h, w) "
                f"or points of shape (N, T, {p}, 2), not {list(arr.shape)}"
            )
        if arr.dtype == np.float32:
            dtype, view = "f4", arr
        elif arr.dtype == np.float16:
            dtype, view = "f2", arr.view(np.uint16)
        else:
            raise ValueError(f"probability maps must be float32 or float16, not {arr.dtype}")
        if not arr.flags.aligned:
            raise ValueError("maps must be aligned (numpy.require(maps, requirements='A'))")
        n, t, _, h, w = arr.shape
        raw = self._native.cost_maps(view, dtype, n, t, h, w, threads)
        return _result(raw, n, t, p)


def _result(raw, n: int, t: int, p: int) -> CostResult:
    costs, per, best, g = raw
    return CostResult(
        costs=np.frombuffer(costs, dtype=np.float64),
        per_point=np.frombuffer(per, dtype=np.float64).reshape(n, p),
        best=int(best),
        grad=None if g is None else np.frombuffer(g, dtype=np.float64).reshape(n, t, p, 2),
    )


def _vec(v: Any) -> Optional[np.ndarray]:
    return None if v is None else np.asarray(v, dtype=np.float64)


def _camera(doc: dict, goal: dict) -> Camera:
    info = doc.get("camera_info") or {}
    plane = doc.get("work_plane")
    pose = doc.get("pose_in_base")
    pose_m = None
    if pose is not None:
        pose_m = np.eye(4)
        pose_m[:3, :3] = np.asarray(pose["rotation"], dtype=np.float64)
        pose_m[:3, 3] = np.asarray(pose["translation_m"], dtype=np.float64)
    targets = [
        Target3D(
            term=int(t["term"]),
            point=str(t["point"]),
            pixel=np.asarray(t["pixel"], dtype=np.float64),
            camera_m=np.asarray(t["camera_m"], dtype=np.float64),
            base_m=_vec(t.get("base_m")),
        )
        for t in (goal.get("derived") or {}).get("targets_3d") or []
    ]
    return Camera(
        width=int(doc["width"]),
        height=int(doc["height"]),
        K=None if "K" not in info else np.asarray(info["K"], dtype=np.float64).reshape(3, 3),
        D=_vec(info.get("D")),
        plane_normal=None if plane is None else _vec(plane["normal"]),
        plane_offset_m=None if plane is None else float(plane["offset_m"]),
        pose=pose_m,
        targets_3d=targets,
        raw=doc,
    )


def open_bundle(path_or_bytes: Union[str, os.PathLike, bytes, bytearray, memoryview]) -> Bundle:
    """Opens a bundle from a path or from its bytes and verifies it.

    Every file must match its SHA-256 in ``manifest.json``, the format must be one this package
    reads, and the revision must check; otherwise :class:`BundleError` (a ``ValueError``) says
    which file is at fault.
    """
    if isinstance(path_or_bytes, (bytes, bytearray, memoryview)):
        return Bundle(bytes(path_or_bytes))
    with open(path_or_bytes, "rb") as f:
        return Bundle(f.read())
