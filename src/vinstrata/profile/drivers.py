"""Within-style quality drivers: what separates top-graded from bottom-graded lots.

:func:`profile_styles` works on a fitted :class:`~vinstrata.segment.model.StyleModel`.
Per style, and for the pooled range (style ``all``), per analyte:

* n, median and quartiles of each grade band (``band_stats``);
* Cliff's delta of the top band against the bottom band with a seeded
  percentile-bootstrap CI (``profile.bootstrap`` resamples, default 2000);
  Hedges' g with its CI; the two-sided Mann-Whitney p-value; the
  Benjamini-Hochberg q over every style x analyte test of the run (the pooled
  rows form a family of their own: their differences are mostly between styles,
  and counting them with the within-style tests would loosen the correction of
  the latter); Spearman's rho of the analyte with the grade over all the
  style's lots;
* an analyte is a *driver* of a style when q < ``profile.fdr`` and the delta CI
  excludes 0; drivers are ranked by |delta|;
* a band with fewer than ``profile.min_band_lots`` lots (default 10) gets no
  effect size: the row's note says ``insufficient``, its numbers stay empty;
* for each driver, the Youden cut between top and bottom band, its direction,
  J, AUC and a bootstrap CI of the cut; for every analyte the top band's
  central range (``profile.target_quantiles``, 10 %-90 %) as target window;
* contrasts between styles (:func:`contrasts`): reversals, style-specific
  drivers and pooled results that mislead.

Values imputed at ingest are left out of every statistic here: profiles use
the measured (or censored) values only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from vinstrata.config import Config
from vinstrata.profile import stats
from vinstrata.profile.contrasts import contrasts
from vinstrata.profile.groups import POOLED, Group, style_groups
from vinstrata.profile.thresholds import THRESHOLD_COLUMNS, group_thresholds
from vinstrata.progress import Reporter
from vinstrata.read.lots import AnalyteSpec
from vinstrata.read.lots import observed as lot_values
from vinstrata.segment.model import StyleModel

DRIVER_COLUMNS = ("style", "analyte", "n_top", "n_bottom", "median_top", "median_bottom",
                  "cliffs_delta", "ci_low", "ci_high", "hedges_g", "p_value", "q_value",
                  "spearman_rho", "is_driver", "rank", "trusted", "note")


EXTRA_DRIVER_COLUMNS = ("hedges_g_ci_low", "hedges_g_ci_high", "magnitude", "iqr_top",
                        "iqr_bottom", "n_lots")


@dataclass(frozen=True)
class Profiles:
    """Everything the profile stage produces (all plain DataFrames)."""

    drivers: pd.DataFrame
    thresholds: pd.DataFrame
    contrasts: pd.DataFrame
    band_counts: pd.DataFrame
    band_stats: pd.DataFrame


def _profile_group(group: Group, observed: dict[str, np.ndarray], grades: np.ndarray,
                   config: Config, rng: np.random.Generator) -> tuple[list[dict], dict]:
    """Driver rows of one group, and the resampling weights kept for thresholds."""
    prof = config.profile
    top_band, bottom_band = len(config.bands.labels) - 1, 0
    top_rows = group.rows[group.bands == top_band]
    bottom_rows = group.rows[group.bands == bottom_band]
    b = prof.bootstrap
    weights = {
        "top": stats.resample_weights(rng, len(top_rows), b) if len(top_rows) else None,
        "bottom": stats.resample_weights(rng, len(bottom_rows), b) if len(bottom_rows) else None,
        "top_rows": top_rows, "bottom_rows": bottom_rows,
    }
    alpha = (1 - prof.ci_level) / 2
    out = []
    for analyte, values in observed.items():
        xt, xb = values[top_rows], values[bottom_rows]
        ok_t, ok_b = np.isfinite(xt), np.isfinite(xb)
        n_top, n_bottom = int(ok_t.sum()), int(ok_b.sum())
        all_vals = values[group.rows]
        row = {
            "style": group.style, "analyte": analyte, "n_top": n_top, "n_bottom": n_bottom,
            "median_top": stats.quantile_or_nan(xt[ok_t], 0.5),
            "median_bottom": stats.quantile_or_nan(xb[ok_b], 0.5),
            "cliffs_delta": np.nan, "ci_low": np.nan, "ci_high": np.nan, "hedges_g": np.nan,
            "p_value": np.nan, "q_value": np.nan,
            "spearman_rho": stats.spearman_rho(all_vals, grades[group.rows]),
            "is_driver": False, "rank": np.nan, "trusted": group.trusted, "note": group.note,
            "hedges_g_ci_low": np.nan, "hedges_g_ci_high": np.nan, "magnitude": "",
            "iqr_top": stats.iqr_or_nan(xt[ok_t]), "iqr_bottom": stats.iqr_or_nan(xb[ok_b]),
            "n_lots": int(np.isfinite(all_vals).sum()),
        }
        if n_top < prof.min_band_lots or n_bottom < prof.min_band_lots:
            row["note"] = _join(
                f"insufficient: {n_top} lots in the {config.bands.labels[-1]} band and "
                f"{n_bottom} in the {config.bands.labels[0]} band (minimum "
                f"{prof.min_band_lots} each)", group.note)
            out.append(row)
            continue
        top, bottom = xt[ok_t], xb[ok_b]
        sorted_ = stats.Sorted.of(xt, xb)
        deltas = np.empty(b)
        for block in stats.blocks(b, len(sorted_.values)):
            deltas[block] = stats.delta_from_counts(
                sorted_.counts(weights["top"][:, block], "top"),
                sorted_.counts(weights["bottom"][:, block], "bottom"))
        g = stats.hedges_g(top, bottom, prof.ci_level)
        delta = stats.cliffs_delta(top, bottom)
        finite = deltas[np.isfinite(deltas)]
        row.update({
            "cliffs_delta": delta,
            "ci_low": float(np.quantile(finite, alpha)),
            "ci_high": float(np.quantile(finite, 1 - alpha)),
            "hedges_g": g.g, "hedges_g_ci_low": g.ci_low, "hedges_g_ci_high": g.ci_high,
            "p_value": stats.mann_whitney_p(top, bottom), "magnitude": stats.magnitude(delta),
        })
        if not group.trusted:
            row["note"] = _join("untrusted style", row["note"])
        out.append(row)
    return out, weights


def _join(*parts: str) -> str:
    return "; ".join(p for p in parts if p)


def profile_styles(model: StyleModel, config: Config | None = None,
                   reporter: Reporter | None = None, pooled: bool = True,
                   cut_intervals: bool = True) -> Profiles:
    """Profile every style of ``model`` against its grade bands.

    Parameters
    ----------
    model : StyleModel
    config : Config, optional
        Profile and band settings; the model's own config when None.
    reporter : Reporter, optional
    pooled, cut_intervals : bool
        See :func:`profile_table`.

    Returns
    -------
    Profiles
    """
    return profile_table(model.values, model.flags, model.lots, model.styles, model.specs,
                         config or model.config, reporter, pooled, cut_intervals)


def profile_table(values: pd.DataFrame, flags: pd.DataFrame, lots: pd.DataFrame,
                  styles: pd.DataFrame, specs: tuple[AnalyteSpec, ...], config: Config,
                  reporter: Reporter | None = None, pooled: bool = True,
                  cut_intervals: bool = True) -> Profiles:
    """Profile lots that already carry a style, from plain frames.

    Parameters
    ----------
    values, flags : DataFrame
        Canonical values and cell states, one column per analyte, one row per lot.
    lots : DataFrame
        ``grade``, ``style`` (a style id or "unassigned") and ``nearest_style``.
    styles : DataFrame
        ``style`` (ids, in report order) and ``trusted``.
    specs : tuple of AnalyteSpec
        The analytes to profile (labels for the sentences).
    config : Config
    reporter : Reporter, optional
    pooled : bool
        Profile the pooled range too (style ``all``). Leaving it out changes no
        style row: the pooled rows are drawn last and corrected as their own family.
    cut_intervals : bool
        Bootstrap the intervals of the cuts (placing new lots needs only the cuts).

    Returns
    -------
    Profiles
    """
    rep = reporter or Reporter()
    groups = style_groups(lots, styles, config)
    if not pooled:
        groups = [g for g in groups if g.style != POOLED]
    grades = lots["grade"].to_numpy(dtype=float)
    analytes = [s.name for s in specs]
    observed = {a: lot_values(values, flags, a) for a in analytes}
    rng = np.random.default_rng(config.seed)
    rows, kept = [], []
    for i, group in enumerate(groups):
        group_rows, weights = _profile_group(group, observed, grades, config, rng)
        rows += group_rows
        kept.append(weights)
        rep.bar(i + 1, len(groups), "  bootstrap")
    drivers = pd.DataFrame(rows)
    # one Benjamini-Hochberg family for every style x analyte test, another for the pooled
    # rows: pooled differences are mostly between styles and would loosen the correction
    pooled_rows = (drivers["style"] == POOLED).to_numpy()
    q = np.full(len(drivers), np.nan)
    for family in (~pooled_rows, pooled_rows):
        q[family] = stats.bh_adjust(drivers.loc[family, "p_value"].to_numpy())
    drivers["q_value"] = q
    ci_excludes = (drivers["ci_low"] > 0) | (drivers["ci_high"] < 0)
    drivers["is_driver"] = ((drivers["q_value"] < config.profile.fdr) & ci_excludes).fillna(False)
    drivers["is_driver"] = drivers["is_driver"].astype(bool)
    drivers["rank"] = np.nan
    for _, part in drivers[drivers["is_driver"]].groupby("style", sort=False):
        order = part["cliffs_delta"].abs().sort_values(ascending=False, kind="stable").index
        drivers.loc[order, "rank"] = np.arange(1, len(order) + 1)
    drivers = drivers[list(DRIVER_COLUMNS) + list(EXTRA_DRIVER_COLUMNS)]

    threshold_rows = []
    for group, weights in zip(groups, kept):
        if group.style == POOLED:
            continue
        mine = drivers[drivers["style"] == group.style]
        threshold_rows += group_thresholds(group, mine, observed, weights, config, cut_intervals)
    thresholds = pd.DataFrame(threshold_rows, columns=list(THRESHOLD_COLUMNS))
    trusted = dict(zip(styles["style"], styles["trusted"]))
    thresholds["trusted"] = thresholds["style"].map(trusted).astype(bool)

    labels = {s.name: s.label for s in specs}
    return Profiles(
        drivers=drivers, thresholds=thresholds, contrasts=contrasts(drivers, labels),
        band_counts=_band_counts(groups, config), band_stats=_band_stats(groups, observed, config),
    )


def _band_counts(groups: list[Group], config: Config) -> pd.DataFrame:
    labels = config.bands.labels
    rows = []
    for group in groups:
        counts = {label: int((group.bands == i).sum()) for i, label in enumerate(labels)}
        rows.append({"style": group.style, "n_lots": len(group.rows),
                     "n_graded": int((group.bands >= 0).sum()), **counts,
                     "trusted": group.trusted})
    return pd.DataFrame(rows)


def _band_stats(groups: list[Group], observed: dict[str, np.ndarray], config: Config
                ) -> pd.DataFrame:
    rows = []
    for group in groups:
        for analyte, values in observed.items():
            for i, label in enumerate(config.bands.labels):
                x = values[group.rows[group.bands == i]]
                x = x[np.isfinite(x)]
                q = np.quantile(x, [0.25, 0.5, 0.75]) if x.size else [np.nan] * 3
                rows.append({"style": group.style, "analyte": analyte, "band": label,
                             "n": int(x.size), "q25": q[0], "median": q[1], "q75": q[2]})
    return pd.DataFrame(rows)


def driver_summary(profiles: Profiles, model: StyleModel, top: int = 3) -> list[str]:
    """Plain sentences: per trusted style its top drivers with direction and cut."""
    names = model.style_names()
    labels = {s.name: (s.label, s.unit) for s in model.specs}
    out = []
    thr = profiles.thresholds.set_index(["style", "analyte"])
    for sid in model.style_ids:
        part = profiles.drivers[(profiles.drivers["style"] == sid) & profiles.drivers["is_driver"]]
        if not bool(model.styles.set_index("style").loc[sid, "trusted"]):
            continue
        part = part.sort_values("rank").head(top)
        if part.empty:
            out.append(f"{sid} ({names[sid]}): no analyte separates top from bottom lots.")
            continue
        bits = []
        for row in part.itertuples():
            label, unit = labels[row.analyte]
            t = thr.loc[(sid, row.analyte)]
            side = "at least" if t["direction"] == "higher_better" else "at most"
            bits.append(f"{'higher' if row.cliffs_delta > 0 else 'lower'} {label} "
                        f"(top lots {side} {t['cut']:.4g} {unit}; delta {row.cliffs_delta:+.2f})")
        out.append(f"{sid} ({names[sid]}): " + "; ".join(bits) + ".")
    return out
