"""Vehicle profiles: static rollover threshold, tyre pressure and aerodynamic load.

The rollover threshold (in g) replaces the friction in the banked point-mass relation
(REFERENCES.md 5). For cars and light trucks it is NHTSA's static stability factor
``SSF = T / (2 H)``; for heavy vehicles it is the measured static rollover threshold.
"""

from __future__ import annotations

import re
from dataclasses import asdict, dataclass
from typing import Any

from ..errors import ConfigError

__all__ = ["Vehicle", "BUILTIN_VEHICLES", "DEFAULT_VEHICLE"]

DEFAULT_VEHICLE = "passenger-car"

_NAME = re.compile(r"^[a-z][a-z0-9_-]{0,40}$")


@dataclass(frozen=True)
class Vehicle:
    """A vehicle type for the rollover limit, the hydroplaning speed and aerodynamics.

    Parameters
    ----------
    name : str
        Identifier used by ``--vehicle``.
    label : str
        Human description.
    rollover_threshold_g : float
        Static rollover threshold (g).
    threshold_low_g, threshold_high_g : float
        Range of the threshold (g) for the uncertainty band.
    source : str
        Published source of the threshold, or "from memory" / "common practice".
    status : str
        ``V``, ``V-2nd``, ``M``, ``D``, ``common practice`` or ``user``.
    tyre_pressure_kpa : float
        Typical cold inflation pressure (kPa), for the hydroplaning speed.
    pressure_source : str
        Source of the tyre pressure.
    mass_kg, frontal_area_m2 : float
        For the aerodynamic load.
    downforce_coefficient : float
        ``C_L`` with downforce positive (lift negative); 0 for ordinary road vehicles.
    """

    name: str
    label: str
    rollover_threshold_g: float
    threshold_low_g: float
    threshold_high_g: float
    source: str
    status: str
    tyre_pressure_kpa: float
    pressure_source: str = "common practice"
    mass_kg: float = 1500.0
    frontal_area_m2: float = 2.2
    downforce_coefficient: float = 0.0

    def __post_init__(self) -> None:
        if not _NAME.match(self.name):
            raise ConfigError(
                f"vehicle name {self.name!r} must be lower-case letters, digits, '-' or '_'"
            )
        checks = {
            "rollover_threshold_g": (0.05, 3.0),
            "threshold_low_g": (0.05, 3.0),
            "threshold_high_g": (0.05, 3.0),
            "tyre_pressure_kpa": (50.0, 1500.0),
            "mass_kg": (1.0, 200000.0),
            "frontal_area_m2": (0.1, 50.0),
            "downforce_coefficient": (-5.0, 10.0),
        }
        for key, (lo, hi) in checks.items():
            value = getattr(self, key)
            number = isinstance(value, (int, float)) and not isinstance(value, bool)
            if not (number and lo <= value <= hi):
                raise ConfigError(
                    f"vehicle {self.name!r}: {key} must be a number in [{lo}, {hi}];"
                    f" got {value!r}"
                )
        if not self.threshold_low_g <= self.rollover_threshold_g <= self.threshold_high_g:
            raise ConfigError(
                f"vehicle {self.name!r}: need threshold_low_g <= rollover_threshold_g"
                " <= threshold_high_g"
            )

    def downforce_per_mass(self, air_density_kg_m3: float) -> float:
        """``k = rho C_L A / (2 m)`` (1/m): aerodynamic load per unit mass is ``k v^2``."""
        return (
            air_density_kg_m3 * self.downforce_coefficient * self.frontal_area_m2
            / (2.0 * self.mass_kg)
        )

    def as_record(self) -> dict[str, Any]:
        """JSON-serialisable description."""
        return asdict(self)


_HS809868 = (
    "NHTSA report HS-809 868, MY2003 sales-weighted average static stability factor"
)
_WINKLER = (
    "Winkler (UMTRI) as reported in Trailer/Body Builders 'TMC explores ways to prevent"
    " rollovers': typical 0.45 g; under-inflated tyres 0.40, soft suspension 0.35, lash and"
    " compliance 0.30, shifted cargo 0.25 g"
)
_CAR_TYRE = "220 kPa (32 psi) typical placard pressure (common practice)"
_TRUCK_TYRE = "760 kPa (110 psi) typical truck tyre pressure (common practice)"

#: Built-in vehicle profiles.
BUILTIN_VEHICLES: dict[str, Vehicle] = {
    v.name: v
    for v in (
        Vehicle(
            "passenger-car", "passenger car", 1.41, 1.25, 1.55,
            f"{_HS809868}: passenger cars 1.41; range from memory (4-star SSF cut-point"
            " 1.25; upper end common practice)",
            "V", 220.0, _CAR_TYRE, 1500.0, 2.2,
        ),
        Vehicle(
            "minivan", "minivan", 1.24, 1.14, 1.34,
            f"{_HS809868}: minivans 1.24; range +-0.10 assumed",
            "V", 240.0, "240 kPa (35 psi) (common practice)", 2000.0, 2.8,
        ),
        Vehicle(
            "suv", "sport utility vehicle", 1.17, 1.07, 1.27,
            f"{_HS809868}: SUVs 1.17; range +-0.10 assumed",
            "V", 240.0, "240 kPa (35 psi) (common practice)", 2100.0, 2.9,
        ),
        Vehicle(
            "pickup", "pickup truck", 1.18, 1.08, 1.28,
            f"{_HS809868}: pickups 1.18; range +-0.10 assumed",
            "V", 240.0, "240 kPa (35 psi) (common practice)", 2300.0, 3.0,
        ),
        Vehicle(
            "bus", "bus or coach", 0.55, 0.45, 0.65,
            "from memory: full-size buses and coaches roughly 0.5-0.6 g",
            "M", 690.0, "690 kPa (100 psi) (common practice)", 15000.0, 8.0,
        ),
        Vehicle(
            "single-unit-truck", "single-unit truck, loaded", 0.45, 0.35, 0.55,
            "from memory: loaded single-unit trucks roughly 0.4-0.5 g",
            "M", 760.0, _TRUCK_TYRE, 15000.0, 8.0,
        ),
        Vehicle(
            "tractor-semitrailer-empty", "tractor-semitrailer, empty", 0.65, 0.55, 0.80,
            "from memory: empty van semitrailers roughly 0.6-0.8 g (low centre of gravity)",
            "M", 760.0, _TRUCK_TYRE, 15000.0, 9.5,
        ),
        Vehicle(
            "tractor-semitrailer-loaded", "tractor-semitrailer, loaded", 0.45, 0.25, 0.45,
            f"{_WINKLER} (V-2nd); range down to the shifted-cargo case",
            "V-2nd", 760.0, _TRUCK_TYRE, 36000.0, 9.5,
        ),
        Vehicle(
            "tanker-loaded", "tank truck, loaded", 0.40, 0.30, 0.40,
            "NRC Canada (Billing & Patten), 'An assessment of tank truck roll stability':"
            " Canadian minimum roll threshold 0.40 g for tank trucks (V); 7 of 17 tested"
            " configurations fell below 0.35 g at allowable gross weight, so the band goes"
            " down to 0.30 g (D)",
            "V", 760.0, _TRUCK_TYRE, 36000.0, 9.5,
        ),
    )
}
