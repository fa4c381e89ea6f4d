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
        The style's bands and their bootstrap multiplicities.
    settings : ProfileSettings
        Bootstrap size, CI level, target quantiles, minimum band size.
    intervals : bool
        Bootstrap the cut intervals (left NaN otherwise).

    Returns
    -------
    list of dict
        One row per analyte, the columns of :data:`THRESHOLD_COLUMNS`.
    """
    out = []
    for row in drivers.itertuples():
        values = observed[row.analyte]
        xt, xb = values[resamples.top_rows], values[resamples.bottom_rows]
        item = {"style": group.style, "analyte": row.analyte, "direction": "", "cut": np.nan,
                "cut_ci_low": np.nan, "cut_ci_high": np.nan, "youden_j": np.nan, "auc": np.nan,
                **_target_window(xt, settings), "top_beyond_cut": np.nan,
                "bottom_beyond_cut": np.nan}
        if row.is_driver:
            # the smoothing noise is keyed by style and analyte: a cut's interval does not
            # move when another analyte or style is added or left out
            noise = stats.keyed_rng(settings.seed, "cut", group.style, row.analyte)
            item.update(_cut(xt, xb, row.cliffs_delta, resamples, settings, intervals, noise))
        out.append(item)
    return out


def _target_window(xt: np.ndarray, settings: ProfileSettings) -> dict[str, float]:
    """The top band's central range (``profile.target_quantiles``), when the band is big enough."""
    top = xt[np.isfinite(xt)]
    lo_q, hi_q = settings.target_quantiles
    enough_top = top.size >= settings.min_band_lots
    return {"target_low": stats.quantile_or_nan(top, lo_q) if enough_top else np.nan,
            "target_high": stats.quantile_or_nan(top, hi_q) if enough_top else np.nan}


def _cut(xt: np.ndarray, xb: np.ndarray, delta: float, resamples: Resamples,
         settings: ProfileSettings, intervals: bool, noise: np.random.Generator
         ) -> dict[str, float | str]:
    """A driver's Youden cut, its direction, J, AUC and (with ``intervals``) its CI.

    The CI comes from the shrunk smoothed bootstrap of the two bands
    (:func:`~vinstrata.profile.stats.smoothed_youden_cuts`, the style's resamples
    with the values smoothed by ``noise``): the plain bootstrap of an argmax
    such as the Youden cut covers too rarely in small bands.
    """
    higher = delta > 0
    sorted_ = stats.Sorted.of(xt, xb)
    ones_t = np.ones((xt.size, 1), dtype=np.float32)
    ones_b = np.ones((xb.size, 1), dtype=np.float32)
    cut, j = stats.youden_from_counts(sorted_.counts(ones_t, "top"),
                                      sorted_.counts(ones_b, "bottom"), sorted_.values, higher)
    ci_low = ci_high = np.nan
    if intervals:
        cuts = stats.smoothed_youden_cuts(xt, xb, resamples.top, resamples.bottom, higher, noise)
        ci_low, ci_high = stats.cut_interval(xt, xb, float(cut[0]), cuts, settings.ci_level)
    auc = (delta + 1) / 2
    top, bottom = xt[np.isfinite(xt)], xb[np.isfinite(xb)]
    beyond = (lambda x: x >= cut[0]) if higher else (lambda x: x <= cut[0])
    return {
        "direction": "higher_better" if higher else "lower_better",
        "cut": float(cut[0]), "youden_j": float(j[0]),
        "cut_ci_low": ci_low, "cut_ci_high": ci_high,
        "auc": float(auc if higher else 1 - auc),
        "top_beyond_cut": float(np.mean(beyond(top))),
        "bottom_beyond_cut": float(np.mean(beyond(bottom))),
    }
