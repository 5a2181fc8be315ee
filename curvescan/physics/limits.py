"""Vectorised cornering physics: sliding, comfort and rollover limits.

Every function here is pure numpy over arrays that broadcast together; nothing loops per
curve. Speeds are in m/s inside this module (``_ms``) unless a name says ``_kmh``.

Model (see ``docs/physics.md`` for the derivation):

* point mass on a curve of radius ``R`` banked at ``e = tan(theta)`` (positive toward the
  centre), available lateral friction ``f``, and an aerodynamic load
  ``L = 0.5 rho C_L A v^2`` normal to the road (downforce positive). Writing
  ``k = rho C_L A / (2 m)`` (1/m) the exact limit is::

      v^2 = g R (e + f) / (1 - e f - f k R sqrt(1 + e^2))

  With ``k = 0`` this is the exact banked point-mass relation of AASHTO's model
  (REFERENCES.md 1a). A non-positive denominator with a positive numerator means no finite
  limit (downforce grows as fast as the demand): the speed is ``inf``. A non-positive
  numerator (adverse bank steeper than the friction) gives 0.
* friction ellipse: a longitudinal demand ``a_x`` (in g) leaves ``sqrt(f^2 - a_x^2)`` for
  cornering (0 when ``a_x >= f``).
* speed-dependent friction ``f(v)`` (wet pavement, design side friction) is solved as the
  fixed point ``v = V(f(v))`` by bisection; ``f`` non-increasing in ``v`` makes the root
  unique.
"""

from __future__ import annotations

from typing import Callable

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import InputError

__all__ = [
    "STANDARD_GRAVITY_M_S2",
    "KMH_PER_MS",
    "SUPERELEVATION_RANGE",
    "SUPERELEVATION_RANGE_TEXT",
    "superelevation_accepted",
    "FRICTION_RANGE",
    "DESIGN_SIDE_FRICTION_KMH",
    "DESIGN_SIDE_FRICTION",
    "check_curve_inputs",
    "banked_limit_ms",
    "demand_friction",
    "friction_ellipse",
    "longitudinal_demand_g",
    "solve_speed_dependent_ms",
    "design_side_friction",
    "comfort_speed_ms",
    "hydroplaning_speed_kmh",
    "static_stability_factor",
    "minimum_radius_m",
]

#: Standard gravity g0 (m/s^2), exact by definition (3rd CGPM 1901; REFERENCES.md 9).
STANDARD_GRAVITY_M_S2 = 9.80665
#: km/h per m/s.
KMH_PER_MS = 3.6
#: Accepted superelevation (fraction), inclusive.
SUPERELEVATION_RANGE = (-0.15, 0.20)
#: The same range as text, for messages.
SUPERELEVATION_RANGE_TEXT = f"[{SUPERELEVATION_RANGE[0]:.2f}, {SUPERELEVATION_RANGE[1]:.2f}]"
#: Accepted friction (fraction): lower bound exclusive, upper inclusive.
FRICTION_RANGE = (0.0, 1.5)

#: Design speeds (km/h) of AASHTO 2011 (6th ed.) Table 3-7, metric.
DESIGN_SIDE_FRICTION_KMH = np.array(
    [15, 20, 30, 40, 50, 60, 70, 80, 90, 100, 110, 120, 130], dtype=float
)
#: Maximum design side-friction factors of the same table (REFERENCES.md 1b). 20, 40, 60,
#: 80, 100 and 120 km/h are V-2nd; the other columns are from memory.
DESIGN_SIDE_FRICTION = np.array(
    [0.40, 0.35, 0.28, 0.23, 0.19, 0.17, 0.15, 0.14, 0.13, 0.12, 0.11, 0.09, 0.08]
)

#: 1 psi in kPa (exact from the pound-force and inch definitions).
_KPA_PER_PSI = 6.894757293168
#: 1 mph in km/h (exact).
_KMH_PER_MPH = 1.609344
#: NASA hydroplaning coefficient, mph per sqrt(psi) (Horne & Dreher; REFERENCES.md 4).
_HYDROPLANING_MPH_PER_SQRT_PSI = 10.35

_BISECTION_STEPS = 44
_SPEED_CAP_MS = 1000.0  # 3600 km/h: above it a limit is reported as inf


def superelevation_accepted(e: ArrayLike) -> NDArray[np.bool_]:
    """Whether each superelevation (fraction) lies in :data:`SUPERELEVATION_RANGE`
    (False for NaN)."""
    e = np.asarray(e, dtype=float)
    return (e >= SUPERELEVATION_RANGE[0]) & (e <= SUPERELEVATION_RANGE[1])


def _as_float(x: ArrayLike) -> NDArray[np.float64]:
    return np.asarray(x, dtype=np.float64)


def check_curve_inputs(
    radius_m: ArrayLike, superelevation: ArrayLike, friction: ArrayLike | None = None
) -> None:
    """Raise :class:`InputError` if any radius, superelevation or friction is out of range.

    Parameters
    ----------
    radius_m : array_like
        Radius (m); must be finite and > 0.
    superelevation : array_like
        Superelevation (fraction); must lie in [-0.15, 0.20].
    friction : array_like, optional
        Friction (fraction); must lie in (0, 1.5].

    Raises
    ------
    InputError
        Naming the first offending value and how many values are bad.
    """
    checks = [
        ("radius_m", _as_float(radius_m), lambda r: np.isfinite(r) & (r > 0), "> 0"),
        (
            "superelevation",
            _as_float(superelevation),
            superelevation_accepted,
            f"in {SUPERELEVATION_RANGE_TEXT}",
        ),
    ]
    if friction is not None:
        checks.append(
            (
                "friction",
                _as_float(friction),
                lambda f: (f > FRICTION_RANGE[0]) & (f <= FRICTION_RANGE[1]),
                "in (0, 1.5]",
            )
        )
    for name, values, ok_fn, rule in checks:
        values = np.atleast_1d(values)
        bad = ~ok_fn(values)
        if np.any(bad):
            first = float(values[bad][0])
            raise InputError(
                f"{name} must be {rule}; got {first!r} ({int(np.sum(bad))} bad value(s))"
            )


def banked_limit_ms(
    radius_m: ArrayLike,
    superelevation: ArrayLike,
    friction: ArrayLike,
    *,
    downforce_per_mass: ArrayLike = 0.0,
) -> NDArray[np.float64]:
    """Exact limit speed of a point mass on a banked curve (m/s).

    Parameters
    ----------
    radius_m : array_like
        Curve radius (m).
    superelevation : array_like
        Bank ``e = tan(theta)`` (fraction), positive toward the curve centre.
    friction : array_like
        Available lateral friction (fraction), or a rollover threshold in g.
    downforce_per_mass : array_like, optional
        ``k = rho C_L A / (2 m)`` in 1/m; aerodynamic load per unit mass is ``k v^2``,
        downforce positive, lift negative. Default 0.

    Returns
    -------
    ndarray
        Limit speed (m/s): ``inf`` where no finite limit exists, ``0`` where
        ``e + f <= 0``, NaN where an input is NaN or the radius is not positive.

    Examples
    --------
    >>> round(float(banked_limit_ms(100.0, 0.0, 0.35)) * 3.6, 2)
    66.7
    """
    r, e, f, k = np.broadcast_arrays(
        _as_float(radius_m), _as_float(superelevation), _as_float(friction),
        _as_float(downforce_per_mass),
    )
    numerator = STANDARD_GRAVITY_M_S2 * r * (e + f)
    denominator = 1.0 - e * f - f * k * r * np.sqrt(1.0 + e * e)
    with np.errstate(divide="ignore", invalid="ignore"):
        v = np.sqrt(numerator / denominator)
    v = np.where(numerator <= 0, 0.0, np.where(denominator <= 0, np.inf, v))
    invalid = np.isnan(r) | np.isnan(e) | np.isnan(f) | np.isnan(k) | ~(r > 0)
    return np.where(invalid, np.nan, v)


def demand_friction(
    speed_ms: ArrayLike,
    radius_m: ArrayLike,
    superelevation: ArrayLike,
    *,
    downforce_per_mass: ArrayLike = 0.0,
) -> NDArray[np.float64]:
    """Side-friction demand at a speed, exact form ``f = (a - e) / (1 + a e + k' v^2 / g)``.

    ``a = v^2 / (g R)``; ``k' = k sqrt(1 + e^2)`` carries the aerodynamic load (zero by
    default, which gives REFERENCES.md 11's ``(a - e) / (1 + a e)``).

    Parameters
    ----------
    speed_ms : array_like
        Speed (m/s).
    radius_m, superelevation : array_like
        Curve radius (m) and bank (fraction).
    downforce_per_mass : array_like, optional
        See :func:`banked_limit_ms`.

    Returns
    -------
    ndarray
        Friction demand (fraction); negative when the bank alone over-holds the vehicle.
    """
    v, r, e, k = np.broadcast_arrays(
        _as_float(speed_ms), _as_float(radius_m), _as_float(superelevation),
        _as_float(downforce_per_mass),
    )
    with np.errstate(divide="ignore", invalid="ignore"):
        a = v * v / (STANDARD_GRAVITY_M_S2 * r)
        aero = k * np.sqrt(1.0 + e * e) * v * v / STANDARD_GRAVITY_M_S2
        out = (a - e) / (1.0 + a * e + aero)
    return np.where(r > 0, out, np.nan)


def friction_ellipse(friction: ArrayLike, longitudinal_g: ArrayLike) -> NDArray[np.float64]:
    """Lateral friction left after a longitudinal demand: ``sqrt(max(f^2 - a_x^2, 0))``.

    Parameters
    ----------
    friction : array_like
        Total available friction (fraction).
    longitudinal_g : array_like
        Longitudinal friction demand (fraction of the normal load, i.e. in g).

    Returns
    -------
    ndarray
        Lateral friction available (fraction), 0 when the longitudinal demand uses it all.
    """
    f = _as_float(friction)
    ax = _as_float(longitudinal_g)
    return np.sqrt(np.maximum(f * f - ax * ax, 0.0))


def longitudinal_demand_g(
    braking_g: float, grade: ArrayLike, *, use_grade: bool = True
) -> NDArray[np.float64]:
    """Longitudinal friction demand (g) of braking while holding speed downhill.

    The curve is taken in its downhill direction whatever the digitised direction
    (conservative: a curve is driven both ways), so the grade adds
    ``|grade| / sqrt(1 + grade^2)`` (the sine of the slope angle). Unknown grade (NaN)
    adds nothing.

    Parameters
    ----------
    braking_g : float
        Braking deceleration while cornering (fraction of g).
    grade : array_like
        Grade (fraction) along the digitised direction; NaN when unknown.
    use_grade : bool, optional
        Add the grade component (default True).

    Returns
    -------
    ndarray
        Longitudinal demand (fraction of g).
    """
    s = _as_float(grade)
    slope = np.abs(s) / np.sqrt(1.0 + s * s)
    slope = np.where(np.isfinite(slope), slope, 0.0) if use_grade else np.zeros_like(slope)
    return braking_g + slope


def solve_speed_dependent_ms(
    radius_m: ArrayLike,
    superelevation: ArrayLike,
    friction_of_speed: Callable[[NDArray[np.float64]], NDArray[np.float64]],
    *,
    downforce_per_mass: ArrayLike = 0.0,
) -> NDArray[np.float64]:
    """Solve ``v = V(f(v))`` for a friction that falls (or stays) with speed.

    ``h(v) = v - V(f(v))`` is strictly increasing when ``f`` is non-increasing in ``v``,
    so vectorised bisection finds the unique root: 44 halvings of the bracket
    ``[V(f(hi)), hi]`` with ``hi = min(V(f(0)), 1000 m/s)``, to better than 1e-10 m/s. A
    root above 1000 m/s (only possible with downforce) is reported as ``inf``.

    Parameters
    ----------
    radius_m, superelevation : array_like
        Curve radius (m) and bank (fraction).
    friction_of_speed : callable
        Maps an array of speeds (m/s, same shape as the broadcast inputs) to the available
        lateral friction; must be non-increasing in speed.
    downforce_per_mass : array_like, optional
        See :func:`banked_limit_ms`.

    Returns
    -------
    ndarray
        Limit speed (m/s); NaN where an input is NaN or the radius is not positive.
    """
    r, e, k = np.broadcast_arrays(
        _as_float(radius_m), _as_float(superelevation), _as_float(downforce_per_mass)
    )
    gr = STANDARD_GRAVITY_M_S2 * r
    aero = k * r * np.sqrt(1.0 + e * e)

    def inside(v: NDArray[np.float64]) -> NDArray[np.bool_]:
        # V(f(v)) >= v, written without roots or divisions: num > 0 and num >= v^2 den.
        f = friction_of_speed(v)
        num = gr * (e + f)
        return (num > 0) & (num >= v * v * (1.0 - e * f - f * aero))

    # Bracket: f(v) <= f(0) gives root <= V(f(0)); f(v) >= f(hi) on [0, hi] gives
    # root >= V(f(hi)).
    with np.errstate(invalid="ignore"):
        hi = np.fmin(banked_limit_ms(r, e, friction_of_speed(np.zeros(r.shape)),
                                     downforce_per_mass=k), _SPEED_CAP_MS)
        hi = np.where(np.isfinite(hi), hi, _SPEED_CAP_MS)
        above_cap = inside(np.full(r.shape, _SPEED_CAP_MS))
        lo = np.fmin(banked_limit_ms(r, e, friction_of_speed(hi), downforce_per_mass=k), hi)
        lo = np.where(np.isfinite(lo), lo, 0.0)
        # in place: the same halvings without new arrays per step
        lo, hi = np.array(lo, dtype=float), np.array(hi, dtype=float)
        mid, out = np.empty_like(lo), np.empty(lo.shape, dtype=bool)
        for _ in range(_BISECTION_STEPS):
            np.multiply(np.add(lo, hi, out=mid), 0.5, out=mid)
            ok = inside(mid)
            np.copyto(lo, mid, where=ok)
            np.copyto(hi, mid, where=np.logical_not(ok, out=out))
    v = np.where(above_cap, np.inf, 0.5 * (lo + hi))
    invalid = np.isnan(r) | np.isnan(e) | np.isnan(k) | ~(r > 0)
    return np.where(invalid, np.nan, v)


def design_side_friction(speed_kmh: ArrayLike) -> NDArray[np.float64]:
    """AASHTO 2011 Table 3-7 design side friction at a speed, linearly interpolated.

    Held at 0.40 below 15 km/h and at 0.08 above 130 km/h.

    Parameters
    ----------
    speed_kmh : array_like
        Speed (km/h).

    Returns
    -------
    ndarray
        Design side-friction factor (fraction).
    """
    return np.interp(_as_float(speed_kmh), DESIGN_SIDE_FRICTION_KMH, DESIGN_SIDE_FRICTION)


def comfort_speed_ms(radius_m: ArrayLike, superelevation: ArrayLike) -> NDArray[np.float64]:
    """Comfort speed (m/s): the speed whose design side friction the curve just needs.

    Fixed point of ``v = V(f_design(3.6 v))`` with the exact banked relation, no
    aerodynamic load and no longitudinal demand.

    Parameters
    ----------
    radius_m, superelevation : array_like
        Curve radius (m) and bank (fraction).

    Returns
    -------
    ndarray
        Comfort speed (m/s).
    """
    return solve_speed_dependent_ms(
        radius_m, superelevation, lambda v: design_side_friction(v * KMH_PER_MS)
    )


def hydroplaning_speed_kmh(tyre_pressure_kpa: ArrayLike) -> NDArray[np.float64]:
    """NASA dynamic hydroplaning speed ``V_p = 10.35 sqrt(p)`` (mph, psi), in km/h.

    Metric equivalent ``6.3435 sqrt(p_kPa)`` (REFERENCES.md 4, D).

    Parameters
    ----------
    tyre_pressure_kpa : array_like
        Tyre inflation pressure (kPa).

    Returns
    -------
    ndarray
        Hydroplaning speed (km/h); NaN for non-positive pressure.
    """
    p = _as_float(tyre_pressure_kpa)
    with np.errstate(invalid="ignore"):
        mph = _HYDROPLANING_MPH_PER_SQRT_PSI * np.sqrt(p / _KPA_PER_PSI)
    return np.where(p > 0, mph * _KMH_PER_MPH, np.nan)


def static_stability_factor(
    track_width_m: ArrayLike, cg_height_m: ArrayLike
) -> NDArray[np.float64]:
    """NHTSA static stability factor ``SSF = T / (2 H)`` (REFERENCES.md 5).

    Parameters
    ----------
    track_width_m : array_like
        Track width T (m).
    cg_height_m : array_like
        Height H of the centre of gravity (m).

    Returns
    -------
    ndarray
        SSF, the static rollover threshold in g.
    """
    t = _as_float(track_width_m)
    h = _as_float(cg_height_m)
    if np.any(~(t > 0)) or np.any(~(h > 0)):
        raise InputError("track width and centre-of-gravity height must be > 0")
    return t / (2.0 * h)


def minimum_radius_m(
    speed_kmh: ArrayLike,
    superelevation: ArrayLike,
    friction: ArrayLike,
    *,
    exact: bool = True,
) -> NDArray[np.float64]:
    """Smallest radius on which a speed needs no more than a given friction (m).

    Parameters
    ----------
    speed_kmh : array_like
        Speed (km/h).
    superelevation, friction : array_like
        Bank and side friction (fractions).
    exact : bool, optional
        True: ``R = v^2 (1 - e f) / (g (e + f))``. False: the design-guide simplification
        ``R = v^2 / (g (e + f))`` (with ``g = g0``; the guides round ``3.6^2 g`` to 127).

    Returns
    -------
    ndarray
        Radius (m); ``inf`` where ``e + f <= 0``.
    """
    v = _as_float(speed_kmh) / KMH_PER_MS
    e = _as_float(superelevation)
    f = _as_float(friction)
    factor = (1.0 - e * f) if exact else 1.0
    with np.errstate(divide="ignore"):
        r = v * v * factor / (STANDARD_GRAVITY_M_S2 * (e + f))
    return np.where(e + f > 0, r, np.inf)
