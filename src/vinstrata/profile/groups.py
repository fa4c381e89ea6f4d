"""The lots of each style, and of the pooled range, with their grade bands."""

from __future__ import annotations

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
    """A group's top and bottom band and their bootstrap multiplicities.

    Drawn once per group and shared by every analyte's delta interval and cut
    interval; ``top`` and ``bottom`` are None for an empty band.
    """

    top_rows: np.ndarray
    bottom_rows: np.ndarray
    top: np.ndarray | None
    bottom: np.ndarray | None


def draw_resamples(group: Group, n_bands: int, bootstrap: int,
                   rng: np.random.Generator) -> Resamples:
    """The top and bottom band of ``group`` and ``bootstrap`` resamples of each (top first).

    Parameters
    ----------
    group : Group
    n_bands : int
        Number of grade bands (the top band is the last).
    bootstrap : int
        Resamples per band.
    rng : Generator
        Drawn from in group order, so that a run is reproducible from its seed.

    Returns
    -------
    Resamples
    """
    top_rows = group.rows[group.bands == n_bands - 1]
    bottom_rows = group.rows[group.bands == 0]
    top = stats.resample_weights(rng, len(top_rows), bootstrap) if len(top_rows) else None
    bottom = (stats.resample_weights(rng, len(bottom_rows), bootstrap) if len(bottom_rows)
              else None)
    return Resamples(top_rows=top_rows, bottom_rows=bottom_rows, top=top, bottom=bottom)


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
