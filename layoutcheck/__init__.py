"""layoutcheck: verify the layout of scanned and born-digital forms before OCR.

All geometry is in PDF points (1/72 in) with a top-left origin and y down; see
:mod:`layoutcheck.elements`. The Python API (:mod:`layoutcheck.api`) is re-exported here.
"""

__version__ = "0.1.0"

from .api import *  # noqa: E402,F401,F403  (the API is the package's face)
from .api import __all__ as _api_all  # noqa: E402

__all__ = ["__version__", *_api_all]
