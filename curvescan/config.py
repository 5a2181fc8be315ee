"""The scan configuration, built from every stage's declared parameters.

:class:`ScanConfig` is a frozen dataclass whose fields are exactly the parameters the stage
modules declare in their ``PARAMETERS`` tuples (see :mod:`curvescan.declare`). It is
validated on construction, picklable (so it can travel to dask workers) and passed
explicitly to each stage; there is no global state.
"""

from __future__ import annotations

import dataclasses
from typing import Any

from . import assess, export, parallel, prepare, read, terrain
from .declare import Param, collect
from .errors import InputError
from .geometry import PARAMETERS as _GEOMETRY
from .physics import PARAMETERS as _PHYSICS

__all__ = ["ScanConfig", "SCAN_PARAMETERS", "make_config"]

#: All parameters of a scan, in pipeline order.
SCAN_PARAMETERS: tuple[Param, ...] = collect(
    read.PARAMETERS,
    prepare.PARAMETERS,
    _GEOMETRY,
    terrain.PARAMETERS,
    _PHYSICS,
    assess.PARAMETERS,
    export.PARAMETERS,
    parallel.PARAMETERS,
)
_BY_NAME = {p.name: p for p in SCAN_PARAMETERS}


def _post_init(self: Any) -> None:
    for p in SCAN_PARAMETERS:
        object.__setattr__(self, p.name, p.validate(getattr(self, p.name)))


ScanConfig = dataclasses.make_dataclass(
    "ScanConfig",
    [(p.name, Any, dataclasses.field(default=p.default)) for p in SCAN_PARAMETERS],
    frozen=True,
    namespace={
        "__post_init__": _post_init,
        "__doc__": "Validated, immutable settings of one scan; fields are the declared parameters.",
        "replace": lambda self, **kw: make_config(self, **kw),
        "as_dict": lambda self: dataclasses.asdict(self),
    },
)
ScanConfig.__module__ = __name__


def make_config(base: Any = None, /, **overrides: Any) -> Any:
    """Return a :class:`ScanConfig` from ``base`` (a config or None) and keyword overrides.

    Unknown names raise :class:`curvescan.errors.InputError` listing the known ones.
    """
    unknown = sorted(set(overrides) - set(_BY_NAME))
    if unknown:
        raise InputError(
            f"unknown parameter(s) {', '.join(unknown)}; known: {', '.join(sorted(_BY_NAME))}"
        )
    values = dataclasses.asdict(base) if base is not None else {}
    values.update(overrides)
    return ScanConfig(**values)
