"""Stage: terrain (first version in progress)."""

from __future__ import annotations

from .declare import Param

PARAMETERS: tuple[Param, ...] = ()
