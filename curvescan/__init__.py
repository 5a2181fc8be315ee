"""curvescan: find horizontal curves in road layers and screen them for safe speeds.

Screening only: flagged curves are candidates for an engineering study; local codes, the
road authority and licensed engineers decide.
"""

from ._version import __version__
from .cautions import CAUTION
from .config import SCAN_PARAMETERS, ScanConfig, make_config
from .errors import (
    ConfigError,
    CRSError,
    CurvescanError,
    CurvescanWarning,
    DataSourceError,
    InputError,
)
from .pipeline import ScanResult, scan

__all__ = [
    "__version__",
    "CAUTION",
    "scan",
    "ScanResult",
    "ScanConfig",
    "make_config",
    "SCAN_PARAMETERS",
    "CurvescanError",
    "CurvescanWarning",
    "InputError",
    "CRSError",
    "DataSourceError",
    "ConfigError",
]
