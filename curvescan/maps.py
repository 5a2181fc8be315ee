"""Pictures of a scan: an overview map and a curvature-and-speed profile of one road.

Both use matplotlib with the non-interactive Agg canvas (no display needed) and the
colours of :mod:`curvescan.styles`, and both carry the screening caution.
"""

from __future__ import annotations

import textwrap
from pathlib import Path
from typing import Any, Sequence

import numpy as np
import pandas as pd
import shapely

from .cautions import CAUTION
from .errors import InputError
from .styles import CONDITION_STYLE, NONE_STYLE, WINTER_CLASSES, condition_style

__all__ = ["overview_map", "profile_plot", "profile_table"]

_MM_TO_PT = 72.0 / 25.4


def _figure(width_in: float, height_in: float, rows: int = 1, sharex: bool = False):
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_in, height_in), layout="constrained")
    fig.get_layout_engine().set(rect=(0.0, 0.045, 1.0, 0.955))  # room for the caution
    axes = fig.subplots(rows, 1, sharex=sharex, squeeze=False)[:, 0]
    return fig, axes


def _caution(fig: Any) -> None:
    fig.text(0.01, 0.002, "\n".join(textwrap.wrap("CAUTION: " + CAUTION, 150)),
             fontsize=6, color="#555555", va="bottom", ha="left")


def _lines(geoms: Any) -> list[np.ndarray]:
    """Coordinate arrays of line geometries (multi-parts split), for a LineCollection."""
    parts = shapely.get_parts(np.asarray(geoms, dtype=object))
    coords, index = shapely.get_coordinates(parts, return_index=True)
    if not len(coords):
        return []
    cuts = np.flatnonzero(np.diff(index)) + 1
    return np.split(coords, cuts)


def _add(ax: Any, geoms: Any, colour: str, width_mm: float, z: int, **kw: Any) -> None:
    from matplotlib.collections import LineCollection

    segs = _lines(geoms)
    if segs:
        ax.add_collection(LineCollection(segs, colors=colour, linewidths=width_mm * _MM_TO_PT,
                                         zorder=z, capstyle="round", **kw))


def overview_map(curves: pd.DataFrame, segments: pd.DataFrame | None, path: str | Path, *,
                 colour_by: str = "condition", winter: pd.DataFrame | None = None,
                 labels: int = 10, title: str | None = None, dpi: int = 150) -> Path:
    """Draw all curves on their road network, coloured, and write a PNG.

    Parameters
    ----------
    curves : GeoDataFrame
        The ``curves`` layer (``mildest_condition``, ``curve_id``).
    segments : GeoDataFrame, optional
        The ``segments`` layer, drawn as the thin grey network underneath.
    path : path
        Output PNG.
    colour_by : {"condition", "winter"}
        Mildest condition exceeded, or winter score class (needs ``winter``).
    winter : GeoDataFrame, optional
        The ``winter`` layer.
    labels : int
        Label this many worst curves with their ``curve_id``.
    title : str, optional
    dpi : int

    Returns
    -------
    Path
        The PNG written.
    """
    from matplotlib.lines import Line2D

    fig, (ax,) = _figure(9.0, 8.0)
    crs = getattr(curves, "crs", None)
    if segments is not None and len(segments):
        _add(ax, segments.geometry, "#C8C8C8", 0.3, 1)
    handles = []
    if colour_by == "winter":
        if winter is None:
            raise InputError("colour by winter needs the winter layer")
        _add(ax, curves.geometry, NONE_STYLE[0], NONE_STYLE[1], 2)
        score = winter["winter_score"].to_numpy(float)
        for z, (lo, hi, col, w, lab) in enumerate(WINTER_CLASSES):
            sel = (score >= lo) & (score < hi)
            _add(ax, winter.geometry[sel], col, w, 3 + z)
            handles.append(Line2D([], [], color=col, lw=w * _MM_TO_PT, label=f"score {lab}"))
        ranked = winter.sort_values("winter_rank").head(labels)
    else:
        mild = curves["mildest_condition"].astype(object).where(
            curves["mildest_condition"].notna(), None).to_numpy()
        names = list(CONDITION_STYLE) + sorted({str(m) for m in mild if m is not None}
                                               - set(CONDITION_STYLE))
        _add(ax, curves.geometry[pd.isna(mild)], NONE_STYLE[0], NONE_STYLE[1], 2)
        for k, c in enumerate(reversed(names)):
            col, w = condition_style(c, names.index(c))
            sel = mild == c
            _add(ax, curves.geometry[sel], col, w, 3 + k)
            handles.insert(0, Line2D([], [], color=col, lw=w * _MM_TO_PT,
                                     label=f"exceeded on {c} ({int(sel.sum())})"))
        handles.append(Line2D([], [], color=NONE_STYLE[0], lw=NONE_STYLE[1] * _MM_TO_PT,
                              label="not exceeded / no posted speed"))
        flagged = curves.loc[pd.notna(mild)].copy()
        flagged["_k"] = [names.index(m) for m in flagged["mildest_condition"]]
        excess = np.zeros(len(flagged))
        for c in names:
            if f"v_{c}_limit_kmh" in flagged:
                hit = (flagged["mildest_condition"] == c).to_numpy()
                excess = np.where(hit, (flagged["posted_kmh"]
                                        - flagged[f"v_{c}_limit_kmh"]).to_numpy(float), excess)
        flagged["_x"] = excess
        ranked = flagged.sort_values(["_k", "_x"], ascending=[True, False]).head(labels)
    if labels and len(ranked):
        pts = shapely.line_interpolate_point(np.asarray(ranked.geometry, dtype=object), 0.5,
                                             normalized=True)
        xy = shapely.get_coordinates(pts)
        for (x, y), cid in zip(xy, ranked["curve_id"].to_numpy()):
            ax.annotate(str(int(cid)), (x, y), xytext=(3, 3), textcoords="offset points",
                        fontsize=7, zorder=20,
                        bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "#888888",
                              "lw": 0.4, "alpha": 0.85})
    ax.autoscale_view()
    if crs is not None and getattr(crs, "is_geographic", False):
        lat = np.mean(ax.get_ylim())
        ax.set_aspect(1.0 / max(np.cos(np.radians(lat)), 0.05))
        ax.set_xlabel("longitude (deg)")
        ax.set_ylabel("latitude (deg)")
    else:
        ax.set_aspect("equal")
        ax.set_xlabel("x (m)")
        ax.set_ylabel("y (m)")
    ax.tick_params(labelsize=7)
    ax.legend(handles=handles, loc="best", fontsize=7, framealpha=0.9)
    ax.set_title(title or ("curves by mildest condition exceeded" if colour_by != "winter"
                           else "winter priority"), fontsize=10)
    _caution(fig)
    path = Path(path)
    fig.savefig(path, dpi=dpi)
    return path


def _select_chains(curves: pd.DataFrame, segments: pd.DataFrame, road: str | None,
                   chain: int | None) -> list[int]:
    if (road is None) == (chain is None):
        raise InputError("choose one road: --road NAME or --chain ID")
    if chain is not None:
        ids = [int(chain)] if int(chain) in set(segments["chain_id"].astype(int)) else []
        if not ids:
            raise InputError(f"chain {chain} not found; chains 0..{segments['chain_id'].max()}")
        return ids
    if "road_name" not in segments.columns:
        raise InputError("the result has no road_name field (scan with --name-field)")
    names = segments["road_name"].astype("string")
    hit = names.str.lower() == str(road).lower()
    if not hit.any():
        known = sorted(set(names.dropna()))
        near = [n for n in known if str(road).lower() in n.lower()]
        raise InputError(f"road {road!r} not found; "
                         + (f"did you mean {', '.join(near[:5])}?" if near
                            else f"roads: {', '.join(known[:12])}"))
    return sorted(set(segments.loc[hit, "chain_id"].astype(int)))


def profile_table(curves: pd.DataFrame, segments: pd.DataFrame,
                  chain_ids: Sequence[int]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Build the curvature diagram and the curve rows of some chains, laid end to end.

    Returns
    -------
    curvature : DataFrame
        ``x_km`` and ``curvature_per_km`` (1000 / R, positive to the left), two points per
        segment: tangents 0, circular parts constant, transitions linear between neighbours.
    rows : DataFrame
        The curves of those chains with ``x0_km`` / ``x1_km`` on the same axis.
    """
    seg = segments.loc[segments["chain_id"].astype(int).isin(chain_ids)].copy()
    seg["_order"] = seg["chain_id"].astype(int).map({c: k for k, c in enumerate(chain_ids)})
    seg = seg.sort_values(["_order", "s_start_m"])
    lengths = seg.groupby("_order")["s_end_m"].max()
    gap = 0.02 * float(lengths.sum())
    base = np.concatenate([[0.0], np.cumsum(lengths.to_numpy() + gap)[:-1]])
    offset = pd.Series(base, index=lengths.index)
    direction = curves.set_index("curve_id")["direction"] if len(curves) else pd.Series(dtype=str)
    sign = np.where(seg["curve_id"].map(direction).to_numpy(dtype=object) == "right", -1.0, 1.0)
    k = np.where(seg["kind"].to_numpy() == "curve", sign * 1000.0 / seg["radius_m"].to_numpy(float),
                 0.0)
    kind = seg["kind"].to_numpy()
    same_prev = np.r_[False, seg["_order"].to_numpy()[1:] == seg["_order"].to_numpy()[:-1]]
    same_next = np.r_[same_prev[1:], False]
    k_prev_end = np.where(same_prev, np.r_[0.0, k[:-1]], 0.0)
    k_next_start = np.where(same_next, np.r_[k[1:], 0.0], 0.0)
    trans = kind == "transition"
    k0 = np.where(trans, k_prev_end, k)
    k1 = np.where(trans, k_next_start, k)
    off = seg["_order"].map(offset).to_numpy()
    x0 = (seg["s_start_m"].to_numpy(float) + off) / 1000.0
    x1 = (seg["s_end_m"].to_numpy(float) + off) / 1000.0
    curvature = pd.DataFrame({"x_km": np.column_stack([x0, x1]).ravel(),
                              "curvature_per_km": np.column_stack([k0, k1]).ravel(),
                              "chain_id": np.repeat(seg["chain_id"].to_numpy(), 2)})
    rows = curves.loc[curves["chain_id"].astype(int).isin(chain_ids)].copy()
    roff = rows["chain_id"].astype(int).map(
        {c: offset[i] for i, c in enumerate(chain_ids) if i in offset.index}).to_numpy(float)
    rows["x0_km"] = (rows["s_start_m"].to_numpy(float) + roff) / 1000.0
    rows["x1_km"] = (rows["s_end_m"].to_numpy(float) + roff) / 1000.0
    return curvature, rows


def profile_plot(curves: pd.DataFrame, segments: pd.DataFrame, path: str | Path, *,
                 road: str | None = None, chain: int | None = None, dpi: int = 150) -> Path:
    """Curvature diagram and speed profile of one road (or chain) as a PNG.

    Top: curvature 1000/R (1/km, positive to the left) along the road. Bottom, per curve:
    posted speed, comfort speed and the limit of each surface condition, with the
    hazards marked in the colour of the mildest condition exceeded. Several chains of a
    road are laid end to end, separated by dotted lines.

    Parameters
    ----------
    curves, segments : DataFrame
        The ``curves`` and ``segments`` layers of a result.
    path : path
        Output PNG.
    road : str, optional
        Road name (``road_name``, case-insensitive).
    chain : int, optional
        Chain id instead of a name.
    dpi : int

    Returns
    -------
    Path

    Raises
    ------
    InputError
        Neither or both of ``road`` and ``chain``, or no such road/chain.
    """
    chain_ids = _select_chains(curves, segments, road, chain)
    curvature, rows = profile_table(curves, segments, chain_ids)
    fig, (ax1, ax2) = _figure(10.0, 6.5, rows=2, sharex=True)
    ax1.plot(curvature["x_km"], curvature["curvature_per_km"], color="#333333", lw=1.0)
    ax1.axhline(0.0, color="#999999", lw=0.5)
    ax1.set_ylabel("curvature 1000/R (1/km)\n+ left, - right", fontsize=8)
    x0, x1 = rows["x0_km"].to_numpy(), rows["x1_km"].to_numpy()
    conds = [c for c in CONDITION_STYLE if f"v_{c}_limit_kmh" in rows.columns]
    for c in conds:
        col, _ = condition_style(c)
        ax2.hlines(rows[f"v_{c}_limit_kmh"], x0, x1, colors=col, lw=2.0, label=f"{c} limit")
    if "v_comfort_kmh" in rows:
        ax2.hlines(rows["v_comfort_kmh"], x0, x1, colors="#444444", lw=1.2, linestyles="dashed",
                   label="comfort speed")
    ax2.hlines(rows["posted_kmh"], x0, x1, colors="black", lw=1.6, label="posted speed")
    if "mildest_condition" in rows:
        flagged = rows.loc[rows["mildest_condition"].notna()]
        for c in flagged["mildest_condition"].unique():
            sel = flagged.loc[flagged["mildest_condition"] == c]
            ax2.scatter(0.5 * (sel["x0_km"] + sel["x1_km"]), sel["posted_kmh"], s=28,
                        marker="v", color=condition_style(c)[0], edgecolors="black",
                        linewidths=0.5, zorder=5, label=f"hazard ({c})")
    for xsep in curvature.groupby("chain_id")["x_km"].min().to_numpy()[1:]:
        for ax in (ax1, ax2):
            ax.axvline(xsep, color="#777777", lw=0.6, ls=":")
    posted_max = np.nanmax(np.r_[rows["posted_kmh"].to_numpy(float), 30.0])
    comfort_max = np.nanmax(np.r_[rows.get("v_comfort_kmh", rows["posted_kmh"]).to_numpy(float),
                                  30.0])
    ax2.set_ylim(0, min(1.25 * max(posted_max, comfort_max), 2.0 * posted_max))
    ax2.set_ylabel("speed (km/h)", fontsize=8)
    ax2.set_xlabel("distance along the road (km)", fontsize=8)
    ax2.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    for ax in (ax1, ax2):
        ax.tick_params(labelsize=7)
        ax.grid(True, lw=0.3, color="#DDDDDD")
    label = road if road is not None else f"chain {chain}"
    ax1.set_title(f"{label}: curvature and speeds ({len(rows)} curves, chains "
                  f"{', '.join(map(str, chain_ids))})", fontsize=10)
    _caution(fig)
    path = Path(path)
    fig.savefig(path, dpi=dpi)
    return path
