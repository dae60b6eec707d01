import os
from dataclasses import dataclass
from typing import Any, List, Optional, Sequence, Union

import numpy as np

FORMAT_VERSION: int
SAFETY_CAUTION: str
__version__: str

class BundleError(ValueError): ...

class ApiError(Exception):
    status: int
    code: str
    message: str
    field: Optional[str]
    def __init__(self, status: int, code: str, message: str, field: Optional[str] = ...) -> None: ...

@dataclass(frozen=True)
class Target3D:
    term: int
    point: str
    pixel: np.ndarray
    camera_m: np.ndarray
    base_m: Optional[np.ndarray]

@dataclass(frozen=True)
class Camera:
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
    costs: np.ndarray
    per_point: np.ndarray
    best: int
    grad: Optional[np.ndarray] = ...

class Bundle:
    goal: dict
    manifest: dict
    def __init__(self, data: bytes) -> None: ...
    @property
    def points(self) -> int: ...
    @property
    def width(self) -> int: ...
    @property
    def height(self) -> int: ...
    @property
    def caution(self) -> str: ...
    @property
    def files(self) -> List[str]: ...
    @property
    def cost_maps(self) -> np.ndarray: ...
    @property
    def camera(self) -> Camera: ...
    def file(self, name: str) -> bytes: ...
    def cost(
        self,
        points: Any = ...,
        maps: Any = ...,
        *,
        grad: bool = ...,
        threads: Optional[int] = ...,
    ) -> CostResult: ...

def open_bundle(path_or_bytes: Union[str, os.PathLike, bytes, bytearray, memoryview]) -> Bundle: ...

class Client:
    base_url: str
    cache_dir: Optional[os.PathLike]
    timeout: float
    def __init__(
        self,
        base_url: str,
        token: str,
        *,
        cache_dir: Optional[os.PathLike] = ...,
        timeout: float = ...,
    ) -> None: ...
    def goals(self) -> List[dict]: ...
    def goal(self, goal_id: str) -> dict: ...
    def bundle(self, goal_id: str, revision: Optional[int] = ...) -> Bundle: ...
    def goal_set_bundles(self, set_id: str) -> List[Bundle]: ...
    def record_outcome(
        self,
        goal_id: str,
        revision: int,
        final_points: Sequence[Sequence[float]],
        note: Optional[str] = ...,
    ) -> dict: ...
    def outcomes(self, goal_id: str) -> dict: ...
    def upload_frame(self, camera_id: str, image_path: os.PathLike) -> dict: ...
