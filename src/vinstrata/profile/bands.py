"""Grade bands: which lots count as top-graded, which as bottom-graded.

Two modes (``[bands] mode``):

* ``global`` (default): the cuts of ``[bands] cuts`` apply to every style, so a
  top lot is a top lot everywhere; grade < cuts[0] is the bottom band and
  grade >= cuts[-1] the top band;
* ``style_quantile``: inside each style, the cuts are that style's grade
  quantiles (``[bands] quantiles``, e.g. bottom 20 % and top 20 %), for ranges
  whose styles are graded on different levels. Tied grades cannot be split (a
  lot on a quantile joins the band above), so a style graded in coarse steps
  can miss its nominal shares: :func:`quantile_share_notes` says which styles
  miss them by more than 5 points, with the shares they reached.

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


SHARE_TOLERANCE = 0.05  # a per-style band this far from its nominal share is reported


def nominal_shares(quantiles: tuple[float, ...]) -> np.ndarray:
    """The share of lots each band should hold under per-style quantiles (bottom first)."""
    edges = np.concatenate([[0.0], np.asarray(quantiles, dtype=float), [1.0]])
    return np.diff(edges)


def reached_shares(bands: np.ndarray, n_bands: int) -> np.ndarray:
    """The share of a style's graded lots in each band (NaN without graded lots)."""
    counts = band_counts(bands, n_bands)
    total = counts.sum()
    return counts / total if total else np.full(n_bands, np.nan)


def quantile_share_notes(styles: list[str], bands: list[np.ndarray], settings: Bands,
                         tolerance: float = SHARE_TOLERANCE) -> list[str]:
    """Warnings for per-style quantile bands that miss their nominal shares.

    Tied grades cannot be split: a lot on a quantile cut joins the band above,
    so a style graded in coarse steps can end with far fewer bottom lots (and
    more top lots) than ``[bands] quantiles`` asks. Each style whose reached
    share of some band differs from the nominal one by more than ``tolerance``
    (5 points) gets one line with the shares it reached.

    Parameters
    ----------
    styles : list of str
    bands : list of ndarray
        Each style's lots' band indices (-1 ungraded).
    settings : Bands
    tolerance : float

    Returns
    -------
    list of str
        Empty under global cuts.
    """
    if settings.mode != "style_quantile":
        return []
    nominal = nominal_shares(settings.quantiles)
    out = []
    for style, style_bands in zip(styles, bands):
        reached = reached_shares(np.asarray(style_bands), len(nominal))
        if not np.isfinite(reached).all() or np.abs(reached - nominal).max() <= tolerance:
            continue
        said = ", ".join(f"{100 * r:.0f} % {label}" for r, label in zip(reached, settings.labels))
        asked = ", ".join(f"{100 * q:.0f} %" for q in nominal)
        out.append(f"{style}: per-style quantile bands reached {said} of its graded lots "
                   f"(nominal {asked}): tied grades at the cuts cannot be split; its top and "
                   "bottom bands are not the shares [bands] quantiles asks for")
    return out
