"""Resampled stations along chains: the flat-array form every later stage reads."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Stations"]


@dataclass
class Stations:
    """Stations at a uniform spacing along every chain, as flat arrays.

    Attributes
    ----------
    x, y : ndarray of float, shape (n,)
        Station coordinates in the metric working CRS (m).
    s : ndarray of float, shape (n,)
        Distance along the chain from its start (m).
    heading : ndarray of float, shape (n,)
        Direction of travel in the digitised direction, radians, counter-clockwise from
        the +x axis (``atan2(dy, dx)``).
    curvature : ndarray of float, shape (n,)
        Signed curvature (1/m), smoothed; positive turns left.
    chain : ndarray of int, shape (n,)
        Chain index of each station.
    offsets : ndarray of int, shape (n_chains + 1,)
        Stations of chain ``i`` are ``offsets[i]:offsets[i + 1]``.
    """

    x: np.ndarray
    y: np.ndarray
    s: np.ndarray
    heading: np.ndarray
    curvature: np.ndarray
    chain: np.ndarray
    offsets: np.ndarray

    def __len__(self) -> int:
        return int(self.x.shape[0])
