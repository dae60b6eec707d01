# Type stub of the package: the names it exports, typed where they are defined (the pure-Python
# modules carry their annotations; `_native.pyi` types the compiled part).
from ._bundle import Bundle as Bundle
from ._bundle import BundleError as BundleError
from ._bundle import Camera as Camera
from ._bundle import CostResult as CostResult
from ._bundle import Target3D as Target3D
from ._bundle import open_bundle as open_bundle
from ._client import ApiError as ApiError
from ._client import Client as Client

FORMAT_VERSION: int
SAFETY_CAUTION: str
__version__: str
__all__: list[str]
