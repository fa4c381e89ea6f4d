"""The lots of each style, and of the pooled range, with their grade bands."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from vinstrata.config import Config
from vinstrata.errors import InputError
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


def style_groups(lots: pd.DataFrame, styles: pd.DataFrame, config: Config) -> list[Group]:
    """The styles' lots (plus, if configured, their unassigned lots) and the pooled range."""
    grades = lots["grade"].to_numpy(dtype=float)
    if not np.isfinite(grades).any():
        raise InputError("the lots have no grades; profiles need the grade column "
                         "([columns] grade)")
    style = lots["style"].to_numpy(dtype=object)
    home, bands_by_style = lot_bands(grades, style, lots["nearest_style"].to_numpy(dtype=object),
                                     config.bands, config.profile.include_unassigned)
    trusted = dict(zip(styles["style"], styles["trusted"]))
    groups = []
    for sid in styles["style"]:
        rows = np.flatnonzero(home == sid)
        extra = int((style[rows] == UNASSIGNED).sum())
        note = f"includes {extra} unassigned lots under their nearest style" if extra else ""
        groups.append(Group(sid, bool(trusted[sid]), rows, bands_by_style[rows], note))
    pooled_bands = assign_bands(grades, np.full(len(lots), POOLED, dtype=object), config.bands)
    groups.append(Group(POOLED, True, np.arange(len(lots)), pooled_bands,
                        "pooled over every lot of the range, styles ignored"))
    return groups
