"""The style table: sizes, medians, names and the trust verdict of each style."""

from __future__ import annotations

import numpy as np
import pandas as pd

from vinstrata.config import Bands
from vinstrata.profile.bands import band_counts, lot_bands
from vinstrata.read.lots import UNASSIGNED, AnalyteSpec
from vinstrata.segment.names import colour_mix, name_styles


def trust_notes(n_lots: np.ndarray, band_n: np.ndarray | None, min_style_lots: int,
                min_band_lots: int, band_labels: tuple[str, ...]) -> list[str]:
    """Why each style is untrusted ("" when trusted).

    Parameters
    ----------
    n_lots : ndarray of int
        Lots of each style.
    band_n : ndarray, shape (n_styles, n_bands), optional
        Lots of each style in each grade band (bottom first); None without grades.
    min_style_lots : int
        Fewest lots of a trusted style (``segment.min_style_lots``).
    min_band_lots : int
        Fewest lots in its top and in its bottom band (``profile.min_band_lots``).
    band_labels : tuple of str
        Band names, bottom first.

    Returns
    -------
    list of str
    """
    notes = []
    for i, n in enumerate(n_lots):
        reasons = []
        if n < min_style_lots:
            reasons.append(f"{n} lots (fewer than {min_style_lots})")
        if band_n is not None:
            top, bottom = int(band_n[i, -1]), int(band_n[i, 0])
            if top < min_band_lots:
                reasons.append(f"{top} lots in the {band_labels[-1]} band "
                               f"(fewer than {min_band_lots})")
            if bottom < min_band_lots:
                reasons.append(f"{bottom} lots in the {band_labels[0]} band "
                               f"(fewer than {min_band_lots})")
        notes.append("; ".join(reasons))
    return notes


def quantile_hints(notes: list[str], n_lots: np.ndarray, band_n: np.ndarray,
                   quantile_n: np.ndarray, min_style_lots: int, min_band_lots: int,
                   band_labels: tuple[str, ...]) -> list[str]:
    """Trust notes with, where global cuts leave a style too few top or bottom lots, what
    per-style quantile bands would give it and the config line that switches to them.

    Parameters
    ----------
    notes : list of str
        :func:`trust_notes` under the global cuts.
    n_lots : ndarray of int
    band_n, quantile_n : ndarray, shape (n_styles, n_bands)
        Lots of each style in each band under the global cuts and under per-style
        quantiles (:func:`style_band_counts` with ``mode = "style_quantile"``).
    min_style_lots, min_band_lots : int
    band_labels : tuple of str

    Returns
    -------
    list of str
    """
    out = []
    for i, note in enumerate(notes):
        short_bands = min(int(band_n[i, 0]), int(band_n[i, -1])) < min_band_lots
        if not note or not short_bands or n_lots[i] < min_style_lots:
            out.append(note)
            continue
        bottom, top = int(quantile_n[i, 0]), int(quantile_n[i, -1])
        counts = (f"per-style quantile bands would give it {bottom} lots in the "
                  f"{band_labels[0]} band and {top} in the {band_labels[-1]} band")
        if min(bottom, top) >= min_band_lots:
            hint = (f"{counts}, enough to profile it: set [bands] mode = \"style_quantile\" "
                    "(every style's bands then follow its own grades)")
        else:
            hint = f"{counts}, still too few ([bands] mode = \"style_quantile\")"
        out.append(f"{note}; {hint}")
    return out


def style_band_counts(grades: np.ndarray, style_index: np.ndarray, nearest_index: np.ndarray,
                      style_ids: list[str], bands: Bands, include_unassigned: bool
                      ) -> np.ndarray | None:
    """Lots of each style in each grade band, as the profiles will see them.

    Parameters
    ----------
    grades : ndarray of float
    style_index, nearest_index : ndarray of int
        Each lot's style (-1 unassigned) and nearest style.
    style_ids : list of str
    bands : Bands
    include_unassigned : bool
        Unassigned lots count under their nearest style (``profile.include_unassigned``).

    Returns
    -------
    ndarray, shape (n_styles, n_bands), or None
        None when no lot has a grade.
    """
    if not np.isfinite(grades).any():
        return None
    # their home styles and bands, the one labelling every stage shares
    ids = np.array(style_ids, dtype=object)
    labels = np.where(style_index >= 0, ids[np.maximum(style_index, 0)], UNASSIGNED)
    home, lot_band = lot_bands(grades, labels, ids[nearest_index], bands, include_unassigned)
    return np.array([band_counts(lot_band[home == sid], len(bands.labels)) for sid in style_ids])


def describe_styles(values: pd.DataFrame, scaled: np.ndarray, specs: tuple[AnalyteSpec, ...],
                    analytes: tuple[str, ...], style_index: np.ndarray, style_ids: list[str],
                    band_n: np.ndarray | None, min_style_lots: int, min_band_lots: int,
                    band_labels: tuple[str, ...], colours: np.ndarray | None = None
                    ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The style table (ids, names, sizes, trust, medians) and per-analyte statistics.

    Parameters
    ----------
    values : DataFrame
        The lots' analytes in canonical units.
    scaled : ndarray
        Their scaled chemistry (columns ``analytes``).
    specs : tuple of AnalyteSpec
        Every analyte of the table (constant ones too).
    analytes : tuple of str
        The analytes the styles were formed on.
    style_index : ndarray of int
        Each lot's style, -1 unassigned.
    style_ids : list of str
    band_n : ndarray, optional
        Lots of each style in each band (:func:`style_band_counts`); None without grades.
    min_style_lots, min_band_lots : int
    band_labels : tuple of str
        See :func:`trust_notes`.
    colours : ndarray of str, optional
        Each lot's colour (normalised, "" unknown) when the config names a
        colour column: the names start with a style's dominant colour.

    Returns
    -------
    styles : DataFrame
        ``style, style_name, n_lots, share, trusted``, the median of each analyte
        in canonical units, then ``trust_note``, (with grades) ``n_bottom``,
        ``n_top``, then ``generated_name`` (the name from the chemistry; it is
        ``style_name`` until a user names the style) and (with colours)
        ``colour_mix``.
    stats : DataFrame
        Long table ``style, analyte, n, q25, median, q75, robust_z``; robust z is
        the style's median in the scaled chemistry (its median's distance from
        the range's median in IQRs of the transformed analyte).
    """
    counts = np.bincount(style_index[style_index >= 0], minlength=len(style_ids))
    z = _median_z(scaled, analytes, style_index, style_ids, counts)
    spec_of = {s.name: s for s in specs}
    mixes = ([colour_mix(colours[style_index == k]) for k in range(len(style_ids))]
             if colours is not None else None)
    names = name_styles(z, {a: (spec_of[a].kind, spec_of[a].label) for a in analytes},
                        {sid: m[1] for sid, m in zip(style_ids, mixes)} if mixes else None)
    notes = trust_notes(counts, band_n, min_style_lots, min_band_lots, band_labels)
    styles = pd.DataFrame({
        "style": style_ids, "style_name": [names[s] for s in style_ids],
        "n_lots": counts.astype(int), "share": np.round(counts / max(len(values), 1), 6),
        "trusted": [not note for note in notes],
    })
    all_names = [s.name for s in specs]
    stats = _style_stats(values, all_names, style_index, style_ids, z)
    medians = stats.pivot(index="style", columns="analyte", values="median").reindex(
        index=style_ids, columns=all_names)
    styles = pd.concat([styles, medians.reset_index(drop=True)], axis=1)
    styles["trust_note"] = notes
    if band_n is not None:
        styles["n_bottom"] = band_n[:, 0].astype(int)
        styles["n_top"] = band_n[:, -1].astype(int)
    styles["generated_name"] = styles["style_name"]
    if mixes is not None:
        styles["colour_mix"] = [m[0] for m in mixes]
    return styles, stats


def _median_z(scaled: np.ndarray, analytes: tuple[str, ...], style_index: np.ndarray,
              style_ids: list[str], counts: np.ndarray) -> pd.DataFrame:
    """Each style's median in the scaled chemistry (0 for an empty style)."""
    return pd.DataFrame(
        [[float(np.median(scaled[style_index == s, j])) if counts[s] else 0.0
          for j in range(len(analytes))] for s in range(len(style_ids))],
        index=style_ids, columns=list(analytes),
    )


def _style_stats(values: pd.DataFrame, names: list[str], style_index: np.ndarray,
                 style_ids: list[str], z: pd.DataFrame) -> pd.DataFrame:
    """Long table of each style's quartiles per analyte, with its robust z."""
    rows = []
    for s, style in enumerate(style_ids):
        mask = style_index == s
        for name in names:
            x = values.loc[mask, name].to_numpy(dtype=float)
            x = x[np.isfinite(x)]
            q = np.quantile(x, [0.25, 0.5, 0.75]) if x.size else [np.nan] * 3
            rows.append({
                "style": style, "analyte": name, "n": int(x.size), "q25": float(q[0]),
                "median": float(q[1]), "q75": float(q[2]),
                "robust_z": float(z.loc[style, name]) if name in z.columns else np.nan,
            })
    return pd.DataFrame(rows)
