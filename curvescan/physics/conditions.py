"""Surface conditions: representative tyre-road friction, its range and its source.

Each condition carries a nominal friction, a low-high range and the published source of
both (REFERENCES.md section 3). Wet pavement loses friction with speed; that is modelled
with the exponential form of the Penn State model (REFERENCES.md 4; the exact form is from
memory), anchored at a reference speed::

    f(V) = f_ref * exp(-(PNG / 100) * (V - V_ref))

which equals ``SN0 * exp(-(PNG / 100) * V)`` with ``SN0 = f_ref * exp(PNG V_ref / 100)``.
The travel speed is used as the slip speed (conservative). The model is not extrapolated
beyond :data:`SPEED_DEPENDENCE_MAX_KMH` (130 km/h, the top of the design-speed table):
above it the friction is held at its 130 km/h value. Conditions with ``PNG = 0`` have
speed-independent friction.
"""

from __future__ import annotations

import re
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import ConfigError
from .limits import FRICTION_RANGE

__all__ = [
    "Condition", "BUILTIN_CONDITIONS", "STANDARD_CONDITION_NAMES", "SPEED_DEPENDENCE_MAX_KMH",
]

#: Conditions whose speed columns are part of the output contract (DESIGN.md section 4).
STANDARD_CONDITION_NAMES = ("dry", "wet", "snow", "ice")

#: Speed (km/h) above which speed-dependent friction is held constant.
SPEED_DEPENDENCE_MAX_KMH = 130.0

_NAME = re.compile(r"^[a-z][a-z0-9_]{0,30}$")

#: Names that would give a condition the columns of another limit (``v_comfort_kmh``,
#: ``v_rollover_kmh``) or of another condition's band (``v_dry_low_kmh``).
_RESERVED = ("comfort", "rollover")
_RESERVED_ENDS = ("_low", "_high", "_limit")


@dataclass(frozen=True)
class Condition:
    """A surface condition and its available tyre-road friction.

    Parameters
    ----------
    name : str
        Lower-case identifier used in column names (``v_<name>_kmh``).
    label : str
        Human description.
    friction : float
        Representative friction (fraction) at ``reference_speed_kmh``.
    friction_low, friction_high : float
        Range of friction (fraction) used for the uncertainty band.
    source : str
        Published source of the values (title, edition, table) or "user".
    status : str
        How sure: ``V``, ``V-2nd``, ``M`` (from memory), ``D`` (derived), ``user``.
    speed_gradient_png : float
        Penn State percent normalised gradient (% per km/h); 0 for none.
    reference_speed_kmh : float
        Speed (km/h) at which ``friction`` applies when ``speed_gradient_png > 0``.
    speed_source : str
        Source of the speed dependence.
    """

    name: str
    label: str
    friction: float
    friction_low: float
    friction_high: float
    source: str
    status: str
    speed_gradient_png: float = 0.0
    reference_speed_kmh: float = 0.0
    speed_source: str = ""

    def __post_init__(self) -> None:
        if not _NAME.match(self.name):
            raise ConfigError(
                f"condition name {self.name!r} must be lower-case letters, digits or '_',"
                " starting with a letter"
            )
        if self.name in _RESERVED or self.name.endswith(_RESERVED_ENDS):
            raise ConfigError(
                f"condition name {self.name!r} is reserved: its speed columns would be those"
                f" of another limit; names may not be {' or '.join(_RESERVED)} nor end in"
                f" {', '.join(_RESERVED_ENDS)}"
            )
        lo, hi = FRICTION_RANGE
        for key in ("friction", "friction_low", "friction_high"):
            value = getattr(self, key)
            number = isinstance(value, (int, float)) and not isinstance(value, bool)
            if not (number and lo < value <= hi):
                raise ConfigError(
                    f"condition {self.name!r}: {key} must be a number in (0, 1.5]; got {value!r}"
                )
        if not self.friction_low <= self.friction <= self.friction_high:
            raise ConfigError(
                f"condition {self.name!r}: need friction_low <= friction <= friction_high"
                f" (got {self.friction_low}, {self.friction}, {self.friction_high})"
            )
        for key in ("speed_gradient_png", "reference_speed_kmh"):
            value = getattr(self, key)
            if not isinstance(value, (int, float)) or isinstance(value, bool):
                raise ConfigError(f"condition {self.name!r}: {key} must be a number;"
                                  f" got {value!r}")
        if not 0.0 <= self.speed_gradient_png <= 5.0:
            raise ConfigError(
                f"condition {self.name!r}: speed_gradient_png must be in [0, 5] % per km/h"
            )
        if not 0.0 <= self.reference_speed_kmh <= 200.0:
            raise ConfigError(
                f"condition {self.name!r}: reference_speed_kmh must be in [0, 200]"
            )

    @property
    def speed_dependent(self) -> bool:
        """True when friction falls with speed."""
        return self.speed_gradient_png > 0.0

    def friction_at(self, speed_kmh: ArrayLike, which: str = "nominal") -> NDArray[np.float64]:
        """Available friction at a speed.

        Parameters
        ----------
        speed_kmh : array_like
            Travel speed (km/h); speeds above 130 km/h use the 130 km/h value.
        which : {"nominal", "low", "high"}
            Which friction of the range to scale.

        Returns
        -------
        ndarray
            Friction (fraction).
        """
        base = {"nominal": self.friction, "low": self.friction_low, "high": self.friction_high}[
            which
        ]
        v = np.minimum(np.asarray(speed_kmh, dtype=np.float64), SPEED_DEPENDENCE_MAX_KMH)
        if not self.speed_dependent:
            return np.full(v.shape, base)
        return base * np.exp(-(self.speed_gradient_png / 100.0) * (v - self.reference_speed_kmh))

    def as_record(self) -> dict[str, Any]:
        """JSON-serialisable description."""
        return asdict(self)


_NUTI = (
    "J. S. Baker, Traffic Accident Investigation Manual (NUTI 1975; Fricke 1990 ed.),"
    " friction table as quoted at mfes.com/friction.html"
)
_NOON = (
    "R. K. Noon, Engineering Analysis of Vehicular Accidents (CRC 1994), coefficient of"
    " traction table"
)
_CIS = "CIS practice table of tyre adhesion coefficients (low authority retailer page)"
_PENN_STATE = (
    "Penn State exponential model SN(S) = SN0 exp(-PNG S / 100) (TRB 2010 'Evaluation of the"
    " speed constant...'; exact form from memory); gradient 0.33 %/(km/h) assumed: cornering"
    " slip speed is a fraction of travel speed, so milder than locked-wheel values"
)

#: Built-in conditions. Nominal values are REFERENCES.md 3's suggested defaults (D), each
#: inside the published ranges named in ``source``.
BUILTIN_CONDITIONS: dict[str, Condition] = {
    c.name: c
    for c in (
        Condition(
            "dry", "dry asphalt or concrete", 0.70, 0.55, 0.88,
            "nominal 0.70 inside Noon 1994 dry asphaltic 0.65 / concrete 0.75 (V-2nd);"
            f" low 0.55: {_NUTI}, traveled asphalt >30 mph 0.55-0.70 (V-2nd); high 0.88:"
            " Bartlett dry-asphalt synthesis 95 % range 0.64-0.88 g, Rollover Accident"
            " Reconstruction ch. 45 (V-2nd)",
            "D",
        ),
        Condition(
            "wet", "wet asphalt or concrete", 0.45, 0.40, 0.60,
            f"nominal 0.45 at 60 km/h: {_CIS} wet 0.45-0.55 (V); Noon 1994 wet asphaltic"
            f" 0.50 (V-2nd); range 0.40-0.60: {_NUTI}, wet traveled/polished >30 mph (from"
            " memory)",
            "D",
            speed_gradient_png=0.33,
            reference_speed_kmh=60.0,
            speed_source=_PENN_STATE,
        ),
        Condition(
            "snow", "packed snow", 0.25, 0.15, 0.35,
            f"{_NOON} snow 0.20-0.25 (V-2nd); {_CIS} packed snow 0.25-0.35 (V);"
            " low 0.15: Wong, Theory of Ground Vehicles, hard-packed snow sliding (from memory)",
            "D",
        ),
        Condition(
            "ice", "ice", 0.10, 0.05, 0.15,
            f"{_NOON} ice 0.10-0.15 (V-2nd); {_CIS} glaze ice 0.05-0.15 (V)",
            "D",
        ),
    )
}
