"""Youden cuts of the drivers with bootstrap CIs, and the top band's target windows."""

from __future__ import annotations

import numpy as np
import pandas as pd

from vinstrata.config import Config
from vinstrata.profile import stats
from vinstrata.profile.groups import Group

THRESHOLD_COLUMNS = ("style", "analyte", "direction", "cut", "cut_ci_low", "cut_ci_high",
                     "youden_j", "auc", "target_low", "target_high")


def group_thresholds(group: Group, drivers: pd.DataFrame, observed: dict[str, np.ndarray],
                weights: dict, config: Config, intervals: bool = True) -> list[dict]:
    prof = config.profile
    alpha = (1 - prof.ci_level) / 2
    lo_q, hi_q = prof.target_quantiles
    top_rows, bottom_rows = weights["top_rows"], weights["bottom_rows"]
    out = []
    for row in drivers.itertuples():
        values = observed[row.analyte]
        xt, xb = values[top_rows], values[bottom_rows]
        top = xt[np.isfinite(xt)]
        enough_top = top.size >= prof.min_band_lots
        item = {
            "style": group.style, "analyte": row.analyte, "direction": "", "cut": np.nan,
            "cut_ci_low": np.nan, "cut_ci_high": np.nan, "youden_j": np.nan, "auc": np.nan,
            "target_low": stats.quantile_or_nan(top, lo_q) if enough_top else np.nan,
            "target_high": stats.quantile_or_nan(top, hi_q) if enough_top else np.nan,
        }
        if row.is_driver:
            higher = row.cliffs_delta > 0
            sorted_ = stats.Sorted.of(xt, xb)
            ones_t = np.ones((xt.size, 1), dtype=np.float32)
            ones_b = np.ones((xb.size, 1), dtype=np.float32)
            cut, j = stats.youden_from_counts(sorted_.counts(ones_t, "top"),
                                              sorted_.counts(ones_b, "bottom"),
                                              sorted_.values, higher)
            cuts = np.full(prof.bootstrap, np.nan)
            for block in stats.blocks(prof.bootstrap, len(sorted_.values)) if intervals else []:
                cuts[block] = stats.youden_from_counts(
                    sorted_.counts(weights["top"][:, block], "top"),
                    sorted_.counts(weights["bottom"][:, block], "bottom"),
                    sorted_.values, higher)[0]
            auc = (row.cliffs_delta + 1) / 2
            item.update({
                "direction": "higher_better" if higher else "lower_better",
                "cut": float(cut[0]), "youden_j": float(j[0]),
                "cut_ci_low": float(np.quantile(cuts, alpha)) if intervals else np.nan,
                "cut_ci_high": float(np.quantile(cuts, 1 - alpha)) if intervals else np.nan,
                "auc": float(auc if higher else 1 - auc),
            })
        out.append(item)
    return out
