"""Exceptions and warnings raised by curvescan.

Every error a user can cause derives from :class:`CurvescanError` and also from the
matching built-in (``ValueError`` for bad values, ``OSError`` for files), so callers can
catch either. Nothing here imports click: the command line maps these to exit codes.
"""

from __future__ import annotations

__all__ = [
    "CurvescanError",
    "InputError",
    "CRSError",
    "DataSourceError",
    "OutputExistsError",
    "ConfigError",
    "CurvescanWarning",
    "DataQualityWarning",
    "AssumptionWarning",
]


class CurvescanError(Exception):
    """Root of all curvescan errors."""


class InputError(CurvescanError, ValueError):
    """The input data or a parameter value cannot be used as given."""


class CRSError(CurvescanError, ValueError):
    """A coordinate reference system is missing, unknown or not metric."""


class DataSourceError(CurvescanError, OSError):
    """A file cannot be opened, read or written."""


class OutputExistsError(DataSourceError):
    """The output exists and overwriting was not requested."""


class ConfigError(CurvescanError, ValueError):
    """A preset file (vehicles, conditions) is malformed or names something unknown."""


class CurvescanWarning(UserWarning):
    """Root of all curvescan warnings."""


class DataQualityWarning(CurvescanWarning):
    """Input rows or values were skipped, repaired or could not be parsed."""


class AssumptionWarning(CurvescanWarning):
    """A value was assumed because the data did not provide it."""
