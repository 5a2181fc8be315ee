"""Synthetic road alignments with exactly known geometry, for tests, benchmarks and demos.

An alignment is a sequence of elements whose curvature is linear in distance: tangents
(zero), circular arcs (constant) and clothoid transitions (linear), positioned exactly with
Fresnel integrals (:func:`scipy.special.fresnel`). The truth table lists every circular
part with its radius and stations, so a curve finder can be scored against it.

Degradations mimic real data: vertices at regular or irregular spacing, Gaussian noise,
Douglas-Peucker simplification, and splitting into features, some digitised backwards.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import shapely
from scipy.special import fresnel

__all__ = ["Element", "Alignment", "build", "random_alignment", "vertices", "split_features"]


@dataclass(frozen=True)
class Element:
    """One element: curvature goes linearly from ``k0`` to ``k1`` (1/m, +left) over ``length_m``.

    ``kind`` is ``tangent``, ``transition`` or ``arc``; ``curve`` groups the elements of one
    curve (0 for tangents).
    """

    kind: str
    length_m: float
    k0: float
    k1: float
    curve: int = 0


@dataclass
class Alignment:
    """Exact alignment: elements, their start poses, and a truth table of circular parts."""

    elements: list[Element]
    x0: np.ndarray
    y0: np.ndarray
    h0: np.ndarray
    s0: np.ndarray

    @property
    def length_m(self) -> float:
        """Total length (m)."""
        return float(self.s0[-1] + self.elements[-1].length_m)

    def points(self, s: np.ndarray) -> np.ndarray:
        """Exact coordinates at distances ``s`` along the alignment."""
        s = np.clip(np.asarray(s, dtype=float), 0.0, self.length_m)
        i = np.clip(np.searchsorted(self.s0, s, side="right") - 1, 0, len(self.elements) - 1)
        k0 = np.array([e.k0 for e in self.elements])[i]
        k1 = np.array([e.k1 for e in self.elements])[i]
        length = np.array([e.length_m for e in self.elements])[i]
        x, y, _ = _advance(self.x0[i], self.y0[i], self.h0[i], k0, (k1 - k0) / length,
                           s - self.s0[i])
        return np.column_stack([x, y])

    def curvature(self, s: np.ndarray) -> np.ndarray:
        """Exact curvature at ``s`` (1/m, +left)."""
        i = np.clip(np.searchsorted(self.s0, s, side="right") - 1, 0, len(self.elements) - 1)
        k0 = np.array([e.k0 for e in self.elements])[i]
        k1 = np.array([e.k1 for e in self.elements])[i]
        length = np.array([e.length_m for e in self.elements])[i]
        return k0 + (k1 - k0) * (np.asarray(s) - self.s0[i]) / length

    def truth(self) -> pd.DataFrame:
        """One row per circular part: radius, direction, stations, curve extent, deflection."""
        rows = []
        for j, e in enumerate(self.elements):
            if e.kind != "arc":
                continue
            same = [k for k, f in enumerate(self.elements) if f.curve == e.curve and f.curve]
            first, last = min(same), max(same)
            end_last = self.s0[last] + self.elements[last].length_m
            defl = sum(0.5 * (f.k0 + f.k1) * f.length_m for f in
                       (self.elements[k] for k in same))
            rows.append({
                "curve": e.curve, "radius_m": 1.0 / abs(e.k0),
                "direction": "left" if e.k0 > 0 else "right",
                "circ_start_m": self.s0[j], "circ_end_m": self.s0[j] + e.length_m,
                "s_start_m": self.s0[first], "s_end_m": end_last,
                "circ_deflection_deg": np.degrees(abs(e.k0) * e.length_m),
                "deflection_deg": abs(np.degrees(defl)),
            })
        return pd.DataFrame(rows)


def _advance(x, y, h, k, c, t):
    """Pose after distance ``t`` from ``(x, y, h)`` with curvature ``k + c*t`` (exact)."""
    x, y, h, k, c, t = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (x, y, h, k, c, t)))
    xo, yo = np.empty_like(x), np.empty_like(y)
    ho = h + k * t + 0.5 * c * t * t
    straight = (np.abs(c) < 1e-15) & (np.abs(k) < 1e-15)
    arc = (np.abs(c) < 1e-15) & ~straight
    spiral = ~(straight | arc)
    xo[straight] = x[straight] + t[straight] * np.cos(h[straight])
    yo[straight] = y[straight] + t[straight] * np.sin(h[straight])
    ka = k[arc]
    xo[arc] = x[arc] + (np.sin(ho[arc]) - np.sin(h[arc])) / ka
    yo[arc] = y[arc] - (np.cos(ho[arc]) - np.cos(h[arc])) / ka
    if spiral.any():
        cs, ks, hs, ts = c[spiral], k[spiral], h[spiral], t[spiral]
        # theta(u) = phi + (c/2) u^2 with u = t + k/c
        phi = hs - ks * ks / (2 * cs)
        scale = np.sqrt(np.pi / np.abs(cs))
        v0 = (ks / cs) / scale
        v1 = (ts + ks / cs) / scale
        S0, C0 = fresnel(v0)
        S1, C1 = fresnel(v1)
        dC, dS = C1 - C0, S1 - S0
        sgn = np.sign(cs)
        xo[spiral] = x[spiral] + scale * (np.cos(phi) * dC - sgn * np.sin(phi) * dS)
        yo[spiral] = y[spiral] + scale * (np.sin(phi) * dC + sgn * np.cos(phi) * dS)
    return xo, yo, ho


def build(elements: list[Element], x: float = 0.0, y: float = 0.0,
          heading: float = 0.0) -> Alignment:
    """Place elements one after the other from the pose ``(x, y, heading)``."""
    n = len(elements)
    x0, y0, h0, s0 = np.zeros(n), np.zeros(n), np.zeros(n), np.zeros(n)
    cx, cy, ch, cs = float(x), float(y), float(heading), 0.0
    for i, e in enumerate(elements):
        x0[i], y0[i], h0[i], s0[i] = cx, cy, ch, cs
        nx, ny, nh = _advance(cx, cy, ch, e.k0, (e.k1 - e.k0) / e.length_m, e.length_m)
        cx, cy, ch, cs = float(nx), float(ny), float(nh), cs + e.length_m
    return Alignment(list(elements), x0, y0, h0, s0)


def curve_elements(radius_m: float, arc_m: float, spiral_in_m: float = 0.0,
                   spiral_out_m: float | None = None, left: bool = True,
                   curve: int = 1) -> list[Element]:
    """Transition, arc, transition of one simple curve."""
    k = (1.0 if left else -1.0) / radius_m
    spiral_out_m = spiral_in_m if spiral_out_m is None else spiral_out_m
    out = []
    if spiral_in_m > 0:
        out.append(Element("transition", spiral_in_m, 0.0, k, curve))
    out.append(Element("arc", arc_m, k, k, curve))
    if spiral_out_m > 0:
        out.append(Element("transition", spiral_out_m, k, 0.0, curve))
    return out


def random_alignment(rng: np.random.Generator, n_curves: int = 6, *,
                     radius_range_m: tuple[float, float] = (40.0, 1500.0),
                     deflection_range_deg: tuple[float, float] = (10.0, 120.0),
                     tangent_range_m: tuple[float, float] = (80.0, 400.0),
                     spiral_share: float = 0.6, compound_share: float = 0.15,
                     reverse_share: float = 0.2) -> Alignment:
    """A random road: tangents and curves (simple, spiralled, compound, reverse).

    Radii are log-uniform in ``radius_range_m``; circular-part deflections uniform in
    ``deflection_range_deg``. A reverse pair has no tangent between its curves; a
    compound curve has two arcs of one direction whose radii differ by 1.5-2.5 times.
    """
    elements: list[Element] = [Element("tangent", float(rng.uniform(*tangent_range_m)), 0.0, 0.0)]
    curve = 0
    left = bool(rng.random() < 0.5)
    lo, hi = np.log(radius_range_m[0]), np.log(radius_range_m[1])
    i = 0
    while i < n_curves:
        curve += 1
        radius = float(np.exp(rng.uniform(lo, hi)))
        defl = np.radians(rng.uniform(*deflection_range_deg))
        arc = radius * defl
        spiral = 0.0
        if rng.random() < spiral_share:
            spiral = float(np.clip(rng.uniform(0.15, 0.5) * np.sqrt(24 * 1.0 * radius) * 2,
                                   20.0, 0.8 * arc + 20.0))
        k = (1.0 if left else -1.0) / radius
        if rng.random() < compound_share and i + 1 < n_curves:
            r2 = radius * float(rng.uniform(1.5, 2.5)) * (1 if rng.random() < 0.5 else 1 / 2.0)
            r2 = float(np.clip(r2, radius_range_m[0], radius_range_m[1]))
            if abs(r2 / radius - 1) < 0.4:
                r2 = radius * 2.0 if radius * 2.0 <= radius_range_m[1] else radius / 2.0
            k2 = np.sign(k) / r2
            arc2 = r2 * np.radians(rng.uniform(*deflection_range_deg))
            if spiral:
                elements.append(Element("transition", spiral, 0.0, k, curve))
            elements.append(Element("arc", arc, k, k, curve))
            curve += 1
            elements.append(Element("arc", arc2, k2, k2, curve))
            if spiral:
                elements.append(Element("transition", spiral, k2, 0.0, curve))
            i += 2
        else:
            elements += curve_elements(radius, arc, spiral, spiral, left, curve)
            i += 1
        if rng.random() < reverse_share:
            left = not left  # next curve turns the other way, right away
        else:
            left = bool(rng.random() < 0.5)
            elements.append(Element("tangent", float(rng.uniform(*tangent_range_m)), 0.0, 0.0))
    if elements[-1].kind != "tangent":
        elements.append(Element("tangent", float(rng.uniform(*tangent_range_m)), 0.0, 0.0))
    return build(elements, heading=float(rng.uniform(-np.pi, np.pi)))


def vertices(al: Alignment, rng: np.random.Generator | None = None, *, spacing_m: float = 10.0,
             jitter: tuple[float, float] | None = None, noise_m: float = 0.0,
             simplify_m: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Digitise an alignment: returns ``(xy, s)`` of the vertices.

    Parameters
    ----------
    spacing_m : float
        Regular vertex spacing (ignored when ``jitter`` is given).
    jitter : (min, max), optional
        Irregular spacing drawn uniformly from this range (m).
    noise_m : float
        Standard deviation of Gaussian noise added to each coordinate (m).
    simplify_m : float
        Douglas-Peucker tolerance applied (to 1 m vertices) before noise.
    """
    rng = rng or np.random.default_rng(0)
    total = al.length_m
    if simplify_m > 0:
        s = np.linspace(0.0, total, int(np.ceil(total / 1.0)) + 1)
        line = shapely.LineString(al.points(s))
        kept = shapely.get_coordinates(shapely.simplify(line, simplify_m, preserve_topology=False))
        xy = al.points(s)
        # keep the exact stations of the kept vertices
        idx = np.searchsorted(s, _project(line, kept))
        idx = np.clip(idx, 0, len(s) - 1)
        s, xy = s[idx], xy[idx]
    elif jitter is not None:
        steps = rng.uniform(jitter[0], jitter[1], size=int(total / jitter[0]) + 2)
        s = np.concatenate([[0.0], np.cumsum(steps)])
        s = np.append(s[s < total], total)
        xy = al.points(s)
    else:
        s = np.append(np.arange(0.0, total, spacing_m), total)
        xy = al.points(s)
    if noise_m > 0:
        xy = xy + rng.normal(0.0, noise_m, size=xy.shape)
    return xy, s


def _project(line: shapely.LineString, pts: np.ndarray) -> np.ndarray:
    return shapely.line_locate_point(line, shapely.points(pts))


def add_chord_points(xy: np.ndarray, rng: np.random.Generator, share: float = 0.3
                     ) -> tuple[np.ndarray, np.ndarray]:
    """Put a point on a share of the segments, somewhere between 20 % and 80 % of the way,
    exactly on the chord: what a side road joining or a feature split leaves on a
    digitised line. Returns the new vertex sequence and the indices of the added points."""
    out, added = [xy[0]], []
    for a, b in zip(xy[:-1], xy[1:]):
        if rng.random() < share:
            out.append(a + rng.uniform(0.2, 0.8) * (b - a))
            added.append(len(out) - 1)
        out.append(b)
    return np.array(out), np.array(added, dtype=np.int64)


def split_features(xy: np.ndarray, rng: np.random.Generator, n_pieces: int = 3,
                   reverse_share: float = 0.5) -> list[np.ndarray]:
    """Cut a vertex sequence at random vertices into pieces; reverse some pieces."""
    n = len(xy)
    if n < 4 or n_pieces <= 1:
        return [xy]
    cuts = np.sort(rng.choice(np.arange(1, n - 1), size=min(n_pieces - 1, n - 2), replace=False))
    bounds = np.concatenate([[0], cuts, [n - 1]])
    pieces = []
    for a, b in zip(bounds[:-1], bounds[1:]):
        piece = xy[a:b + 1]
        if rng.random() < reverse_share:
            piece = piece[::-1]
        pieces.append(piece)
    return pieces
