"""Grade bands: which lots count as top-graded, which as bottom-graded.

Two modes (``[bands] mode``):

* ``global`` (default): the cuts of ``[bands] cuts`` apply to every style, so a
  top lot is a top lot everywhere; grade < cuts[0] is the bottom band and
  grade >= cuts[-1] the top band;
* ``style_quantile``: inside each style, the cuts are that style's grade
  quantiles (``[bands] quantiles``, e.g. bottom 20 % and top 20 %), for ranges
  whose styles are graded on different levels.

Bands are numbered 0 (bottom) to len(cuts) (top); -1 where the grade is missing.
"""

from __future__ import annotations

import numpy as np

from vinstrata.config import Bands
from vinstrata.read.lots import UNASSIGNED


def band_of(grades: np.ndarray, cuts: np.ndarray | tuple[float, ...]) -> np.ndarray:
    """Band index of each grade for ascending cuts; -1 where the grade is NaN."""
    grades = np.asarray(grades, dtype=float)
    out = np.searchsorted(np.asarray(cuts, dtype=float), grades, side="right")
    return np.where(np.isfinite(grades), out, -1)


def style_cuts(grades: np.ndarray, quantiles: tuple[float, ...]) -> np.ndarray:
    """Cuts at the given quantiles of one style's grades."""
    finite = grades[np.isfinite(grades)]
    if finite.size == 0:
        return np.full(len(quantiles), np.nan)
    return np.quantile(finite, quantiles)


def assign_bands(grades: np.ndarray, styles: np.ndarray, settings: Bands) -> np.ndarray:
    """Band index of every lot under the configured mode.

    Parameters
    ----------
    grades : ndarray of float
    styles : ndarray of str
        Each lot's style (any labels); used by ``style_quantile`` only.
    settings : Bands

    Returns
    -------
    ndarray of int
    """
    grades = np.asarray(grades, dtype=float)
    if settings.mode == "global":
        return band_of(grades, settings.cuts)
    out = np.full(len(grades), -1)
    for style in np.unique(styles):
        mask = styles == style
        cuts = style_cuts(grades[mask], settings.quantiles)
        if np.isfinite(cuts).all():
            # a lot exactly on the lower quantile belongs to the band above, as for global cuts
            out[mask] = band_of(grades[mask], cuts)
    return out


def lot_bands(grades: np.ndarray, style: np.ndarray, nearest: np.ndarray, settings: Bands,
              include_unassigned: bool) -> tuple[np.ndarray, np.ndarray]:
    """Each lot's home style and its band: the one labelling every stage shares.

    The home style is the lot's style, or for an unassigned lot its nearest style
    when profiles include unassigned lots (``profile.include_unassigned``);
    otherwise unassigned lots stay a group of their own.

    Returns
    -------
    home : ndarray of str
    bands : ndarray of int
    """
    style = np.asarray(style, dtype=object)
    home = np.where(style == UNASSIGNED, np.asarray(nearest, dtype=object), style) \
        if include_unassigned else style
    return home, assign_bands(grades, home, settings)


def band_counts(bands: np.ndarray, n_bands: int) -> np.ndarray:
    """Number of lots in each band (bottom first)."""
    valid = bands[bands >= 0]
    return np.bincount(valid, minlength=n_bands)[:n_bands]
