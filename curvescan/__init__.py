"""curvescan: find horizontal curves in road layers and screen them for safe speeds."""

from ._version import __version__

__all__ = ["__version__"]
