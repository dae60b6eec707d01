"""goalsmith for planners: pull pinned goals, score candidate futures in-process, report outcomes.

- :func:`open_bundle` reads and verifies a goal bundle; :meth:`Bundle.cost` scores candidates
  (points or probability maps) with the server's own code, bit for bit, and gives exact
  gradients for points.
- :class:`Client` talks to a goalsmith server: goals, bundles (cached by ETag), goal sets,
  outcomes and frames.

CAUTION: goals move real robots. Check every new goal in simulation or at reduced speed first,
keep an emergency stop within reach, respect the cell's safeguarding, and follow ISO 10218,
ISO/TS 15066, local rules and licensed practice. goalsmith defers to the robot's safety-rated
controller; it is not a safety function.
"""

from ._bundle import Bundle, BundleError, Camera, CostResult, Target3D, open_bundle
from ._client import ApiError, Client
from ._native import FORMAT_VERSION, SAFETY_CAUTION

__all__ = [
    "ApiError",
    "Bundle",
    "BundleError",
    "Camera",
    "Client",
    "CostResult",
    "FORMAT_VERSION",
    "SAFETY_CAUTION",
    "Target3D",
    "open_bundle",
]
__version__ = "0.1.0"
