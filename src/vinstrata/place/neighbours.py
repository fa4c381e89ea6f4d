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


def nearest_lots(model: StyleModel, space: np.ndarray, k: int,
                 index: embed.NeighbourIndex | None = None) -> pd.DataFrame:
    """The ``k`` nearest historical lots of each new lot in the clustering space.

    Parameters
    ----------
    model : StyleModel
    space : ndarray
        The new lots' clustering-space coordinates.
    k : int
        Neighbours per lot (``place.neighbours``).
    index : NeighbourIndex, optional
        Over ``model.space``, when already built (:mod:`vinstrata.place.context`).

    Returns
    -------
    DataFrame
        ``lot_id`` (the new lot's position), ``rank, neighbour_lot, style, grade,
        distance``; lot-major, nearest first.
    """
    index = index if index is not None else embed.NeighbourIndex(model.space)
    found = index.query(space, k)
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
                include_unassigned: bool, k: int, pools: PoolLookup | None = None
                ) -> tuple[np.ndarray, np.ndarray]:
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
    pools : tuple, optional
        Each historical lot's band and, per style, the rows of its graded lots with a
        tree over them, when already built (:func:`vinstrata.place.context.placing_context`).

    Returns
    -------
    shares : ndarray, shape (n_lots, n_bands)
        NaN where the style has no graded lots.
    counts : ndarray of int
        The neighbours each share rests on.
    """
    n_bands = len(bands.labels)
    shares = np.full((len(space), n_bands), np.nan)
    counts = np.zeros(len(space), dtype=int)
    if pools is None:
        pools = style_pools(model, bands, include_unassigned)
    lot_band, by_style = pools
    if lot_band is None:
        return shares, counts
    for sid in np.unique(home):
        pool = by_style.get(sid)
        mine = np.flatnonzero(home == sid)
        if pool is None:
            continue
        rows, index = pool
        found = index.query(space[mine], k)
        picked = lot_band[rows[found.indices]]
        for j in range(n_bands):
            shares[mine, j] = (picked == j).mean(axis=1)
        counts[mine] = found.indices.shape[1]
    return shares, counts


# each historical lot's band (None without grades); per style its graded rows and their tree
PoolLookup = tuple["np.ndarray | None", "dict[str, tuple[np.ndarray, embed.NeighbourIndex]]"]


def style_pools(model: StyleModel, bands: Bands, include_unassigned: bool) -> PoolLookup:
    """Each historical lot's grade band, and per style its graded lots with a tree over them.

    Parameters
    ----------
    model : StyleModel
    bands : Bands
    include_unassigned : bool
        Unassigned historical lots count under their nearest style.

    Returns
    -------
    lot_band : ndarray of int or None
        -1 for a lot without a band; None when no historical lot has a grade.
    pools : dict
        Style id -> (rows of its graded lots, NeighbourIndex over their positions).
    """
    lots = model.lots
    grades = lots["grade"].to_numpy(dtype=float)
    if not np.isfinite(grades).any():
        return None, {}
    styles, lot_band = lot_bands(grades, lots["style"].to_numpy(dtype=object),
                                 lots["nearest_style"].to_numpy(dtype=object), bands,
                                 include_unassigned)
    pools = {}
    for sid in model.style_ids:
        rows = np.flatnonzero((styles == sid) & (lot_band >= 0))
        if rows.size:
            pools[sid] = (rows, embed.NeighbourIndex(model.space[rows]))
    return lot_band, pools
