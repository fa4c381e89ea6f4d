"""The style table: sizes, medians, names and the trust verdict of each style."""

from __future__ import annotations

import numpy as np
import pandas as pd

from vinstrata.config import Config
from vinstrata.profile.bands import band_counts, lot_bands
from vinstrata.read.lots import UNASSIGNED, LotTable
from vinstrata.segment.names import name_styles


def trust_notes(n_lots: np.ndarray, band_n: np.ndarray | None, config: Config) -> list[str]:
    """Why each style is untrusted ("" when trusted)."""
    floor = config.segment.min_style_lots
    min_band = config.profile.min_band_lots
    labels = config.bands.labels
    notes = []
    for i, n in enumerate(n_lots):
        reasons = []
        if n < floor:
            reasons.append(f"{n} lots (fewer than {floor})")
        if band_n is not None:
            top, bottom = int(band_n[i, -1]), int(band_n[i, 0])
            if top < min_band:
                reasons.append(f"{top} lots in the {labels[-1]} band (fewer than {min_band})")
            if bottom < min_band:
                reasons.append(f"{bottom} lots in the {labels[0]} band (fewer than {min_band})")
        notes.append("; ".join(reasons))
    return notes


def describe_styles(values: pd.DataFrame, scaled: np.ndarray, analytes: tuple[str, ...],
                    style_index: np.ndarray, nearest_index: np.ndarray, style_ids: list[str],
                    table: LotTable, config: Config, grades: np.ndarray
                    ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The style table (ids, names, sizes, trust, medians) and per-analyte statistics.

    Returns
    -------
    styles : DataFrame
        ``style, style_name, n_lots, share, trusted``, the median of each analyte
        in canonical units, then ``trust_note`` and (with grades) ``n_bottom``,
        ``n_top``.
    stats : DataFrame
        Long table ``style, analyte, n, q25, median, q75, robust_z``; robust z is
        the style's median in the scaled chemistry (its median's distance from
        the range's median in IQRs of the transformed analyte).
    """
    n = len(values)
    n_styles = len(style_ids)
    counts = np.bincount(style_index[style_index >= 0], minlength=n_styles)
    z = pd.DataFrame(
        [[float(np.median(scaled[style_index == s, j])) if counts[s] else 0.0
          for j in range(len(analytes))] for s in range(n_styles)],
        index=style_ids, columns=list(analytes),
    )
    spec_of = {s.name: s for s in table.specs}
    names = name_styles(z, {a: (spec_of[a].kind, spec_of[a].label) for a in analytes})
    band_n = None
    if table.has_grade and np.isfinite(grades).any():
        # band counts as the profiles will see them (their home styles and bands)
        ids = np.array(style_ids, dtype=object)
        labels = np.where(style_index >= 0, ids[np.maximum(style_index, 0)], UNASSIGNED)
        home, bands = lot_bands(grades, labels, ids[nearest_index], config.bands,
                                config.profile.include_unassigned)
        band_n = np.array([band_counts(bands[home == sid], len(config.bands.labels))
                           for sid in style_ids])
    notes = trust_notes(counts, band_n, config)
    styles = pd.DataFrame({
        "style": style_ids, "style_name": [names[s] for s in style_ids],
        "n_lots": counts.astype(int), "share": np.round(counts / max(n, 1), 6),
        "trusted": [not note for note in notes],
    })
    stat_rows = []
    all_names = [s.name for s in table.specs]
    for s, style in enumerate(style_ids):
        mask = style_index == s
        for name in all_names:
            x = values.loc[mask, name].to_numpy(dtype=float)
            x = x[np.isfinite(x)]
            q = np.quantile(x, [0.25, 0.5, 0.75]) if x.size else [np.nan] * 3
            stat_rows.append({
                "style": style, "analyte": name, "n": int(x.size), "q25": float(q[0]),
                "median": float(q[1]), "q75": float(q[2]),
                "robust_z": float(z.loc[style, name]) if name in z.columns else np.nan,
            })
    stats = pd.DataFrame(stat_rows)
    medians = stats.pivot(index="style", columns="analyte", values="median").reindex(
        index=style_ids, columns=all_names)
    styles = pd.concat([styles, medians.reset_index(drop=True)], axis=1)
    styles["trust_note"] = notes
    if band_n is not None:
        styles["n_bottom"] = band_n[:, 0].astype(int)
        styles["n_top"] = band_n[:, -1].astype(int)
    return styles, stats
