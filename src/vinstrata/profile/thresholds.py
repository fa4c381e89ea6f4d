"""Youden cuts of the drivers with smoothed-bootstrap CIs, and the top band's target windows."""

from __future__ import annotations

import numpy as np
import pandas as pd

from vinstrata.profile import stats
from vinstrata.profile.groups import Group, Resamples
from vinstrata.settings import ProfileSettings

THRESHOLD_COLUMNS = ("style", "analyte", "direction", "cut", "cut_ci_low", "cut_ci_high",
                     "youden_j", "auc", "target_low", "target_high")

# after ``trusted``: the shares of the top and of the bottom band on the top lots' side of
# the cut (at or above it for higher_better, at or below for lower_better); J is their
# difference. A Youden cut is no bound: these say how many lots of each band it leaves.
EXTRA_THRESHOLD_COLUMNS = ("top_beyond_cut", "bottom_beyond_cut")


def cut_words(t: pd.Series, unit: str) -> str:
    """A driver's Youden cut in words, as what it is: a split, not a bound.

    ``cut 7.4 g/L: 78 % of top and 31 % of bottom lots at or above``
    (from the ``top_beyond_cut`` and ``bottom_beyond_cut`` columns; just the
    cut for a thresholds table written without them).
    """
    text = f"cut {t['cut']:.4g} {unit}".rstrip()
    top, bottom = t.get("top_beyond_cut", np.nan), t.get("bottom_beyond_cut", np.nan)
    if not (np.isfinite(top) and np.isfinite(bottom)):
        return text
    side = "at or above" if t["direction"] == "higher_better" else "at or below"
    return f"{text}: {100 * top:.0f} % of top and {100 * bottom:.0f} % of bottom lots {side}"


def group_thresholds(group: Group, drivers: pd.DataFrame, observed: dict[str, np.ndarray],
                     resamples: Resamples, settings: ProfileSettings,
                     intervals: bool = True) -> list[dict]:
    """Threshold rows of one style: every analyte's target window, each driver's cut.

    Parameters
    ----------
    group : Group
    drivers : DataFrame
        The style's rows of the drivers table.
    observed : dict
        Analyte -> values of every lot (NaN where imputed or missing).
    resamples : Resamples
        The style's bands and where their bootstrap draws begin.
    settings : ProfileSettings
        Bootstrap size, CI level, target quantiles, minimum band size.
    intervals : bool
        Bootstrap the cut intervals (left NaN otherwise).

    Returns
    -------
    list of dict
        One row per analyte, the columns of :data:`THRESHOLD_COLUMNS`.
    """
    out, smoothed = [], []
    for row in drivers.itertuples():
        values = observed[row.analyte]
        xt, xb = values[resamples.top_rows], values[resamples.bottom_rows]
        item = {"style": group.style, "analyte": row.analyte, "direction": "", "cut": np.nan,
                "cut_ci_low": np.nan, "cut_ci_high": np.nan, "youden_j": np.nan, "auc": np.nan,
                **_target_window(xt, settings), "top_beyond_cut": np.nan,
                "bottom_beyond_cut": np.nan}
        if row.is_driver:
            item.update(_cut(xt, xb, row.cliffs_delta))
            if intervals:
                # the smoothing noise is keyed by style and analyte: a cut's interval does not
                # move when another analyte or style is added or left out
                noise = stats.keyed_rng(settings.seed, "cut", group.style, row.analyte)
                smoothed.append((item, xt, xb, noise))
        out.append(item)
    for (item, xt, xb, _), cuts in zip(smoothed, _smoothed_cuts(smoothed, resamples)):
        item["cut_ci_low"], item["cut_ci_high"] = stats.cut_interval(
            xt, xb, item["cut"], cuts, settings.ci_level)
    return out


def _smoothed_cuts(drivers: list[tuple[dict, np.ndarray, np.ndarray, np.random.Generator]],
                   resamples: Resamples) -> list[np.ndarray]:
    """Each driver's shrunk smoothed-bootstrap cuts
    (:func:`~vinstrata.profile.stats.smoothed_youden_cuts`), in one pass over the style's
    resamples, a block at a time, for every driver at once.

    The plain bootstrap of an argmax such as the Youden cut covers too rarely in small
    bands, hence the smoothing.
    """
    out = [np.empty(resamples.bootstrap) for _ in drivers]
    if not drivers:
        return out
    bands = [(stats.Smoothing.of(xt), stats.Smoothing.of(xb)) for _, xt, xb, _ in drivers]
    for part, top, bottom in resamples.blocks():
        # the lots each resample drew, shared by every driver of the style
        top, bottom = stats.expand_counts(top), stats.expand_counts(bottom)
        for cuts, (item, _, _, noise), (top_band, bottom_band) in zip(out, drivers, bands):
            cuts[part] = stats.smoothed_block_cuts(top_band, bottom_band, top, bottom,
                                                   item["direction"] == "higher_better", noise)
    return out


def _target_window(xt: np.ndarray, settings: ProfileSettings) -> dict[str, float]:
    """The top band's central range (``profile.target_quantiles``), when the band is big enough."""
    top = xt[np.isfinite(xt)]
    lo_q, hi_q = settings.target_quantiles
    enough_top = top.size >= settings.min_band_lots
    return {"target_low": stats.quantile_or_nan(top, lo_q) if enough_top else np.nan,
            "target_high": stats.quantile_or_nan(top, hi_q) if enough_top else np.nan}


def _cut(xt: np.ndarray, xb: np.ndarray, delta: float) -> dict[str, float | str]:
    """A driver's Youden cut, its direction, J, AUC and the bands' shares beyond it."""
    higher = delta > 0
    sorted_ = stats.Sorted.of(xt, xb)
    ones_t = np.ones((xt.size, 1), dtype=np.float32)
    ones_b = np.ones((xb.size, 1), dtype=np.float32)
    cut, j = stats.youden_from_counts(sorted_.counts(ones_t, "top"),
                                      sorted_.counts(ones_b, "bottom"), sorted_.values, higher)
    auc = (delta + 1) / 2
    top, bottom = xt[np.isfinite(xt)], xb[np.isfinite(xb)]
    beyond = (lambda x: x >= cut[0]) if higher else (lambda x: x <= cut[0])
    return {
        "direction": "higher_better" if higher else "lower_better",
        "cut": float(cut[0]), "youden_j": float(j[0]),
        "auc": float(auc if higher else 1 - auc),
        "top_beyond_cut": float(np.mean(beyond(top))),
        "bottom_beyond_cut": float(np.mean(beyond(bottom))),
    }
