"""Stage: physics. Sliding, comfort and rollover limit speeds of curves.

Public API:

* :func:`evaluate` (curve table + config -> limit-speed table, same index),
* :func:`run_record` (config -> JSON-serialisable description for the run record),
* :func:`load_presets`, :class:`Condition`, :class:`Vehicle` and the built-in catalogues,
* the vectorised formulas in :mod:`curvescan.physics.limits`.
"""

from __future__ import annotations

from . import limits
from .conditions import BUILTIN_CONDITIONS, STANDARD_CONDITION_NAMES, Condition
from .presets import Presets, load_presets
from .stage import PARAMETERS, evaluate, output_columns, run_record
from .vehicles import BUILTIN_VEHICLES, DEFAULT_VEHICLE, Vehicle

__all__ = [
    "PARAMETERS",
    "evaluate",
    "run_record",
    "output_columns",
    "load_presets",
    "Presets",
    "Condition",
    "Vehicle",
    "BUILTIN_CONDITIONS",
    "BUILTIN_VEHICLES",
    "STANDARD_CONDITION_NAMES",
    "DEFAULT_VEHICLE",
    "limits",
]
