"""The nearest historical lots of new lots, and the grade bands among them."""

from __future__ import annotations

import numpy as np
import pandas as pd

from vinstrata.config import Bands
from vinstrata.profile.bands import lot_bands
from vinstrata.segment import embed
from vinstrata.segment.model import StyleModel


def join_near(near: pd.DataFrame, n: int) -> list[str]:
    """The neighbour ids of each lot, ';'-separated (``near`` is lot-major, rank-minor)."""
    if n == 0:
        return []
    ids = near["neighbour_lot"].astype(str).to_numpy().reshape(n, -1)
    return [";".join(row) for row in ids]


def nearest_lots(model: StyleModel, space: np.ndarray, k: int) -> pd.DataFrame:
    """The ``k`` nearest historical lots of each new lot in the clustering space.

    Parameters
    ----------
    model : StyleModel
    space : ndarray
        The new lots' clustering-space coordinates.
    k : int
        Neighbours per lot (``place.neighbours``).

    Returns
    -------
    DataFrame
        ``lot_id`` (the new lot's position), ``rank, neighbour_lot, style, grade,
        distance``; lot-major, nearest first.
    """
    found = embed.nearest(model.space, k, query=space)
    lots = model.lots
    n, kk = found.indices.shape
    flat = found.indices.ravel()
    return pd.DataFrame({
        "lot_id": np.repeat(np.arange(n), kk), "rank": np.tile(np.arange(1, kk + 1), n),
        "neighbour_lot": lots["lot_id"].to_numpy()[flat],
        "style": lots["style"].to_numpy()[flat], "grade": lots["grade"].to_numpy()[flat],
        "distance": np.round(found.distances.ravel(), 6),
    })


def band_shares(model: StyleModel, space: np.ndarray, home: np.ndarray, bands: Bands,
                include_unassigned: bool, k: int) -> tuple[np.ndarray, np.ndarray]:
    """Share of each grade band among the nearest historical lots of the same style.

    Parameters
    ----------
    model : StyleModel
    space : ndarray
        The new lots' clustering-space coordinates.
    home : ndarray of str
        Each new lot's style (its nearest style when it has none).
    bands : Bands
    include_unassigned : bool
        Unassigned historical lots count under their nearest style.
    k : int
        Neighbours per lot (``place.band_neighbours``).

    Returns
    -------
    shares : ndarray, shape (n_lots, n_bands)
        NaN where the style has no graded lots.
    counts : ndarray of int
        The neighbours each share rests on.
    """
    lots = model.lots
    n_bands = len(bands.labels)
    shares = np.full((len(space), n_bands), np.nan)
    counts = np.zeros(len(space), dtype=int)
    grades = lots["grade"].to_numpy(dtype=float)
    if not np.isfinite(grades).any():
        return shares, counts
    styles, lot_band = lot_bands(grades, lots["style"].to_numpy(dtype=object),
                                 lots["nearest_style"].to_numpy(dtype=object), bands,
                                 include_unassigned)
    for sid in np.unique(home):
        pool = np.flatnonzero((styles == sid) & (lot_band >= 0))
        mine = np.flatnonzero(home == sid)
        if pool.size == 0:
            continue
        kk = min(k, pool.size)
        found = embed.nearest(model.space[pool], kk, query=space[mine])
        picked = lot_band[pool[found.indices]]
        for j in range(n_bands):
            shares[mine, j] = (picked == j).mean(axis=1)
        counts[mine] = kk
    return shares, counts
