"""The lots of each style, and of the pooled range, with their grade bands."""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np
import pandas as pd

from vinstrata.config import Bands
from vinstrata.errors import InputError
from vinstrata.profile import stats
from vinstrata.profile.bands import assign_bands, lot_bands
from vinstrata.read.lots import UNASSIGNED

POOLED = "all"


@dataclass(frozen=True)
class Group:
    """The lots of one style (or of the pooled range) with their bands."""

    style: str
    trusted: bool
    rows: np.ndarray  # indices into the model's lots
    bands: np.ndarray
    note: str = ""


@dataclass(frozen=True)
class Resamples:
    """A group's top and bottom band and where their bootstrap draws begin.

    Drawn once per group and shared by every analyte's delta interval and cut
    interval. The multiplicities (lots x resamples) are not kept: each band
    keeps the generator state its draws start from, and :meth:`blocks`
    draws them again a block of resamples at a time, the same numbers in the
    same order, so memory stays within :data:`~vinstrata.profile.stats.CHUNK_CELLS`
    cells per band whatever the lots and resamples. ``top_state`` /
    ``bottom_state`` are None for an empty band.
    """

    top_rows: np.ndarray
    bottom_rows: np.ndarray
    bootstrap: int
    top_state: dict | None
    bottom_state: dict | None

    @property
    def complete(self) -> bool:
        """Whether both bands have lots (and so resamples)."""
        return self.top_state is not None and self.bottom_state is not None

    def blocks(self) -> Iterator[tuple[slice, np.ndarray, np.ndarray]]:
        """Each block of resamples with its top and bottom multiplicities (resamples x lots,
        int64), blocks as :func:`~vinstrata.profile.stats.blocks` over both bands' lots."""
        if not self.complete:
            return
        parts = stats.blocks(self.bootstrap, len(self.top_rows) + len(self.bottom_rows))
        yield from zip(parts, stats.count_blocks(self.top_state, len(self.top_rows), parts),
                       stats.count_blocks(self.bottom_state, len(self.bottom_rows), parts))

    def weights(self, band: str) -> np.ndarray | None:
        """The whole lots x resamples multiplicities of ``band`` ("top" or "bottom"), as
        :func:`~vinstrata.profile.stats.resample_weights` gives them: for small cases."""
        state = self.top_state if band == "top" else self.bottom_state
        if state is None:
            return None
        n = len(self.top_rows if band == "top" else self.bottom_rows)
        return stats.resample_weights(stats.generator_at(state), n, self.bootstrap)


def draw_resamples(group: Group, n_bands: int, bootstrap: int,
                   rng: np.random.Generator, advance: bool = True) -> Resamples:
    """The top and bottom band of ``group`` and ``bootstrap`` resamples of each (top first).

    Parameters
    ----------
    group : Group
    n_bands : int
        Number of grade bands (the top band is the last).
    bootstrap : int
        Resamples per band.
    rng : Generator
        Drawn from in group order, so that a run is reproducible from its seed; left
        past both bands' draws, as if they had been drawn whole.
    advance : bool
        Leave ``rng`` past the bottom band's draws too (a stream used for this group
        only need not).

    Returns
    -------
    Resamples
    """
    top_rows = group.rows[group.bands == n_bands - 1]
    bottom_rows = group.rows[group.bands == 0]
    states = []
    for rows, last in ((top_rows, False), (bottom_rows, True)):
        states.append(rng.bit_generator.state if len(rows) else None)
        if len(rows) and (advance or not last):
            stats.skip_draws(rng, len(rows), bootstrap)
    return Resamples(top_rows=top_rows, bottom_rows=bottom_rows, bootstrap=bootstrap,
                     top_state=states[0], bottom_state=states[1])


def style_groups(lots: pd.DataFrame, styles: pd.DataFrame, bands: Bands,
                 include_unassigned: bool) -> list[Group]:
    """The styles' lots (plus, if configured, their unassigned lots) and the pooled range.

    Parameters
    ----------
    lots : DataFrame
        ``grade``, ``style`` and ``nearest_style`` of each lot.
    styles : DataFrame
        ``style`` and ``trusted``, in report order.
    bands : Bands
    include_unassigned : bool
        Unassigned lots join their nearest style (``profile.include_unassigned``).

    Returns
    -------
    list of Group
        One per style, then the pooled range.

    Raises
    ------
    InputError
        No lot has a grade.
    """
    grades = lots["grade"].to_numpy(dtype=float)
    if not np.isfinite(grades).any():
        raise InputError("the lots have no grades; profiles need the grade column "
                         "([columns] grade)")
    style = lots["style"].to_numpy(dtype=object)
    home, bands_by_style = lot_bands(grades, style, lots["nearest_style"].to_numpy(dtype=object),
                                     bands, include_unassigned)
    trusted = dict(zip(styles["style"], styles["trusted"]))
    groups = []
    for sid in styles["style"]:
        rows = np.flatnonzero(home == sid)
        extra = int((style[rows] == UNASSIGNED).sum())
        note = f"includes {extra} unassigned lots under their nearest style" if extra else ""
        groups.append(Group(sid, bool(trusted[sid]), rows, bands_by_style[rows], note))
    pooled_bands = assign_bands(grades, np.full(len(lots), POOLED, dtype=object), bands)
    groups.append(Group(POOLED, True, np.arange(len(lots)), pooled_bands,
                        "pooled over every lot of the range, styles ignored"))
    return groups
