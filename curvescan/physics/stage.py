"""The physics stage: limit speeds for every curve of a curve table.

:func:`evaluate` takes the curve table (one row per curve) and the scan configuration and
returns a table with the same index holding, per surface condition, the sliding limit and
its uncertainty band, the governing limit (slide or roll) for the chosen vehicle, the
friction margin at the posted speed; plus the comfort speed, the rollover limit, the
side-friction demand at the posted speed and the hydroplaning speed. Column meanings are
listed in ``docs/physics.md``.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ..declare import Param
from ..errors import DataQualityWarning, InputError
from ..recording import warn_counted
from . import limits
from .limits import KMH_PER_MS
from .presets import Presets, load_presets
from .vehicles import DEFAULT_VEHICLE

__all__ = ["PARAMETERS", "evaluate", "run_record", "output_columns"]

PARAMETERS: tuple[Param, ...] = (
    Param("vehicle", "str", DEFAULT_VEHICLE,
          "Vehicle profile for the rollover limit, tyre pressure and aerodynamics"
          " (see `curvescan vehicles`).", stage="physics"),
    Param("conditions", "str", "dry,wet,snow,ice",
          "Comma list of surface conditions to evaluate (see `curvescan conditions`);"
          " dry, wet, snow and ice are always included.", stage="physics"),
    Param("presets_file", "path", None,
          "TOML file of extra or replacement [vehicles.NAME] / [conditions.NAME] presets.",
          stage="physics"),
    Param("braking_g", "float", 0.0,
          "Braking deceleration while cornering, in g; takes friction from cornering"
          " (friction ellipse).", unit="g", stage="physics", minimum=0.0, maximum=1.0),
    Param("use_grade_in_friction", "bool", True,
          "Count the downhill grade component (holding speed downhill) as longitudinal"
          " friction demand.", stage="physics"),
    Param("air_density_kg_m3", "float", 1.225,
          "Air density for the aerodynamic load, kg/m3 (ISA sea level 1.225).",
          unit="kg/m3", stage="physics", minimum=0.5, maximum=1.5, advanced=True),
    Param("tyre_pressure_kpa", "float", None,
          "Tyre inflation pressure for the hydroplaning speed, kPa (default: the"
          " vehicle's).", unit="kPa", stage="physics", minimum=50.0, maximum=1500.0),
    Param("superelevation_se_default", "float", 0.02,
          "Standard error of superelevation (fraction) where the curve table gives none.",
          unit="fraction", stage="physics", minimum=0.0, maximum=0.1, advanced=True),
    Param("radius_se_default_fraction", "float", 0.05,
          "Standard error of radius as a fraction of the radius where the curve table"
          " gives none.", unit="fraction", stage="physics", minimum=0.0, maximum=0.5,
          advanced=True),
    Param("on_bad_curve", "choice", "warn",
          "What to do with a curve whose radius or superelevation cannot be used: warn"
          " (its speeds are null) or raise.", stage="physics", choices=("warn", "raise"),
          advanced=True),
)

_REQUIRED = ("radius_m", "superelevation")
_OPTIONAL = ("radius_se_m", "superelevation_se", "grade", "posted_kmh")
_BAND_SE = 2.0  # the band spans +-2 standard errors (about 95 %)


def output_columns(condition_names: list[str] | tuple[str, ...]) -> list[str]:
    """Names of the columns :func:`evaluate` returns, in order, for these conditions."""
    cols: list[str] = []
    for c in condition_names:
        cols += [f"v_{c}_kmh", f"v_{c}_low_kmh", f"v_{c}_high_kmh", f"v_{c}_limit_kmh",
                 f"mechanism_{c}", f"friction_margin_{c}"]
    return cols + [
        "v_comfort_kmh", "v_rollover_kmh", "v_rollover_low_kmh", "v_rollover_high_kmh",
        "f_demand_posted", "longitudinal_demand_g", "hydroplaning_kmh",
        "posted_over_hydroplaning",
    ]


def _warn(template: str, counts: dict, fixed: dict | None = None) -> None:
    """Warn (or, with nothing to warn about, only record) ``{bad} of {n}`` curves."""
    warn_counted(template, DataQualityWarning, counts, fixed,
                 when=[k for k in counts if k != "n"], stacklevel=4)


def _curve_arrays(curves: pd.DataFrame, config: Any) -> dict[str, NDArray[np.float64]]:
    """Pull the numeric input columns, masking unusable rows (warn or raise)."""
    if not isinstance(curves, pd.DataFrame):
        raise InputError(f"physics needs a curve table (DataFrame); got {type(curves).__name__}")
    missing = [c for c in _REQUIRED if c not in curves.columns]
    if missing:
        raise InputError(
            f"curve table lacks column(s) {', '.join(missing)}; needs {', '.join(_REQUIRED)}"
            f" (optional: {', '.join(_OPTIONAL)})"
        )
    n = len(curves)
    data = {
        c: (pd.to_numeric(curves[c], errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
            if c in curves.columns else np.full(n, np.nan))
        for c in _REQUIRED + _OPTIONAL
    }
    r, e = data["radius_m"], data["superelevation"]
    problems = {
        "radius (NaN or <= 0)": ~(np.isfinite(r) & (r > 0)),
        f"superelevation (NaN or outside {limits.SUPERELEVATION_RANGE_TEXT})":
            ~limits.superelevation_accepted(e),
    }
    bad = np.zeros(n, dtype=bool)
    for what, mask in problems.items():
        count = int(mask.sum())
        if count and config.on_bad_curve == "raise":
            first = curves.index[np.flatnonzero(mask)[0]]
            raise InputError(f"{count} of {n} curve(s) have an unusable {what}; first at "
                             f"index {first!r}")
        _warn("{count} of {n} curve(s) have an unusable {what}; their limit speeds are "
              "null", {"count": count, "n": n}, {"what": what})
        bad |= mask
    data["radius_m"] = np.where(bad, np.nan, r)
    data["superelevation"] = np.where(bad, np.nan, e)
    posted = data["posted_kmh"]
    nonpositive = int(np.sum(posted <= 0))
    _warn("{nonpositive} of {n} posted speed(s) are <= 0 and are treated as unknown",
          {"nonpositive": nonpositive, "n": n})
    if nonpositive:
        data["posted_kmh"] = np.where(posted > 0, posted, np.nan)
    rse = data["radius_se_m"]
    data["radius_se_m"] = np.where(rse >= 0, rse, config.radius_se_default_fraction * r)
    ese = data["superelevation_se"]
    data["superelevation_se"] = np.where(ese >= 0, ese, config.superelevation_se_default)
    return data


def _sliding_ms(radius_m: NDArray, superelevation: NDArray, condition: Any, which: str,
                longitudinal_g: NDArray, k: float) -> NDArray[np.float64]:
    """Sliding limit (m/s) for one condition and one end of its friction range."""
    if condition.speed_dependent:
        return limits.solve_speed_dependent_ms(
            radius_m, superelevation,
            lambda v: limits.friction_ellipse(
                condition.friction_at(v * KMH_PER_MS, which), longitudinal_g),
            downforce_per_mass=k,
        )
    f = condition.friction_at(np.zeros_like(radius_m), which)
    return limits.banked_limit_ms(
        radius_m, superelevation, limits.friction_ellipse(f, longitudinal_g),
        downforce_per_mass=k,
    )


def _resolve(config: Any) -> tuple[Presets, Any, list[Any], float]:
    presets = load_presets(config.presets_file)
    vehicle = presets.vehicle(config.vehicle)
    conditions = presets.select_conditions(config.conditions)
    pressure = config.tyre_pressure_kpa or vehicle.tyre_pressure_kpa
    return presets, vehicle, conditions, float(pressure)


def evaluate(curves: pd.DataFrame, config: Any) -> pd.DataFrame:
    """Compute the limit speeds of every curve.

    Parameters
    ----------
    curves : pandas.DataFrame
        One row per curve with ``radius_m`` and ``superelevation`` and optionally
        ``radius_se_m``, ``superelevation_se``, ``grade`` and ``posted_kmh``.
    config : curvescan.config.ScanConfig
        Uses the parameters declared in :data:`PARAMETERS`.

    Returns
    -------
    pandas.DataFrame
        Same index as ``curves``; columns as listed by :func:`output_columns`.

    Raises
    ------
    InputError
        Missing columns, unknown vehicle or condition, or (with ``on_bad_curve="raise"``)
        an unusable radius or superelevation.
    ConfigError
        A malformed preset file.

    Warns
    -----
    DataQualityWarning
        Rows with an unusable radius or superelevation (speeds null), posted speeds <= 0.
    """
    _, vehicle, conditions, pressure_kpa = _resolve(config)
    d = _curve_arrays(curves, config)
    r, e, posted = d["radius_m"], d["superelevation"], d["posted_kmh"]
    r_lo = np.maximum(r - _BAND_SE * d["radius_se_m"], 1e-6)
    r_hi = r + _BAND_SE * d["radius_se_m"]
    e_lo = e - _BAND_SE * d["superelevation_se"]
    e_hi = e + _BAND_SE * d["superelevation_se"]
    k = vehicle.downforce_per_mass(config.air_density_kg_m3)
    ax = limits.longitudinal_demand_g(config.braking_g, d["grade"],
                                      use_grade=config.use_grade_in_friction)
    posted_ms = posted / KMH_PER_MS

    out: dict[str, Any] = {}
    v_roll = limits.banked_limit_ms(r, e, vehicle.rollover_threshold_g) * KMH_PER_MS
    f_demand_vehicle = limits.demand_friction(posted_ms, r, e, downforce_per_mass=k)
    for c in conditions:
        v = _sliding_ms(r, e, c, "nominal", ax, k) * KMH_PER_MS
        out[f"v_{c.name}_kmh"] = v
        out[f"v_{c.name}_low_kmh"] = _sliding_ms(r_lo, e_lo, c, "low", ax, k) * KMH_PER_MS
        out[f"v_{c.name}_high_kmh"] = _sliding_ms(r_hi, e_hi, c, "high", ax, k) * KMH_PER_MS
        out[f"v_{c.name}_limit_kmh"] = np.fmin(v, v_roll)
        mechanism = np.where(v <= v_roll, "slide", "roll").astype(object)
        mechanism[np.isnan(v) | np.isnan(v_roll)] = None
        out[f"mechanism_{c.name}"] = mechanism
        available = limits.friction_ellipse(c.friction_at(posted), ax)
        out[f"friction_margin_{c.name}"] = available - f_demand_vehicle
    out["v_comfort_kmh"] = limits.comfort_speed_ms(r, e) * KMH_PER_MS
    out["v_rollover_kmh"] = v_roll
    out["v_rollover_low_kmh"] = (
        limits.banked_limit_ms(r_lo, e_lo, vehicle.threshold_low_g) * KMH_PER_MS)
    out["v_rollover_high_kmh"] = (
        limits.banked_limit_ms(r_hi, e_hi, vehicle.threshold_high_g) * KMH_PER_MS)
    out["f_demand_posted"] = limits.demand_friction(posted_ms, r, e)
    out["longitudinal_demand_g"] = np.where(np.isnan(r), np.nan, ax)
    hydro = float(limits.hydroplaning_speed_kmh(pressure_kpa))
    out["hydroplaning_kmh"] = np.full(len(r), hydro)
    out["posted_over_hydroplaning"] = pd.array(
        np.where(np.isnan(posted), None, posted > hydro), dtype="boolean"
    )
    return pd.DataFrame(out, index=curves.index)


def run_record(config: Any) -> dict[str, Any]:
    """Describe the physics settings of a run for the run record (JSON-serialisable).

    Parameters
    ----------
    config : curvescan.config.ScanConfig

    Returns
    -------
    dict
        ``model``, ``conditions`` (friction, low, high, source and speed dependence per
        condition), ``vehicle`` (threshold, range, source, tyre pressure, aerodynamics),
        ``hydroplaning_kmh``, ``comfort_side_friction`` and the longitudinal settings.
    """
    presets, vehicle, conditions, pressure_kpa = _resolve(config)
    return {
        "model": "exact banked point mass v^2 = g R (e + f) / (1 - e f - f k R sqrt(1+e^2)),"
                 " g = 9.80665 m/s2; friction ellipse for longitudinal demand",
        "presets": presets.origin,
        "conditions": {c.name: c.as_record() for c in conditions},
        "vehicle": vehicle.as_record(),
        "braking_g": float(config.braking_g),
        "use_grade_in_friction": bool(config.use_grade_in_friction),
        "grade_direction": "downhill direction of each curve (conservative)",
        "air_density_kg_m3": float(config.air_density_kg_m3),
        "tyre_pressure_kpa": pressure_kpa,
        "hydroplaning_kmh": float(limits.hydroplaning_speed_kmh(pressure_kpa)),
        "hydroplaning_source": "NASA TN D-2056 (Horne & Dreher 1963, from memory):"
                               " V_p = 10.35 sqrt(p) mph, p in psi",
        "comfort_side_friction": {
            "source": "AASHTO A Policy on Geometric Design of Highways and Streets, 2011"
                      " (6th ed.), Table 3-7 metric f_max (V-2nd at 20/40/60/80/100/120 km/h,"
                      " other columns from memory), linearly interpolated",
            "speed_kmh": limits.DESIGN_SIDE_FRICTION_KMH.tolist(),
            "side_friction": limits.DESIGN_SIDE_FRICTION.tolist(),
        },
        "band": "+-2 standard errors of radius and superelevation combined with the"
                " friction (or threshold) range, worst case",
        "superelevation_se_default": float(config.superelevation_se_default),
        "radius_se_default_fraction": float(config.radius_se_default_fraction),
    }
