"""Within-style quality drivers: what separates top-graded from bottom-graded lots.

:func:`profile_styles` works on a fitted :class:`~vinstrata.segment.model.StyleModel`.
Per style, and for the pooled range (style ``all``), per analyte:

* n, median and quartiles of each grade band (``band_stats``);
* Cliff's delta of the top band against the bottom band with a seeded BCa
  bootstrap CI (``profile.bootstrap`` resamples, default 2000;
  :func:`~vinstrata.profile.stats.delta_interval`); Hedges' g with its CI; the
  two-sided Brunner-Munzel p-value, a test of P(top > bottom) = 1/2, the
  quantity delta measures (the Mann-Whitney p-value, a test of equal
  distributions, is kept in the last column ``mann_whitney_p``); the
  Benjamini-Hochberg q over every style x analyte test of the run (the pooled
  rows form a family of their own: their differences are mostly between styles,
  and counting them with the within-style tests would loosen the correction of
  the latter); Spearman's rho of the analyte with the grade over all the
  style's lots;
* an analyte is a *driver* of a style when q < ``profile.fdr`` and the delta CI
  excludes 0; drivers are ranked by |delta|;
* for every analyte of a trusted style, its conditional effect: the rank partial
  correlation with the grade given the style's other analytes, with a bootstrap
  CI, and each driver's role, ``direct``, ``indirect`` (riding on the driver in
  ``moves_with``) or ``unclear`` (:mod:`vinstrata.profile.partial`);
* a band with fewer than ``profile.min_band_lots`` lots (default 10) gets no
  effect size: the row's note says ``insufficient``, its numbers stay empty;
* for each driver, the Youden cut between top and bottom band, its direction,
  J, AUC and a shrunk smoothed-bootstrap CI of the cut; for every analyte the top band's
  central range (``profile.target_quantiles``, 10 %-90 %) as target window;
* contrasts between styles (:func:`contrasts`): reversals, style-specific
  drivers and pooled results that mislead, each with the bootstrap CI of the
  gap in delta it rests on.

Values imputed at ingest are left out of every statistic here: profiles use
the measured (or censored) values only.
"""

from __future__ import annotations

import dataclasses
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
import pandas as pd

from vinstrata.config import Config
from vinstrata.profile import stats
from vinstrata.profile.bands import quantile_share_notes
from vinstrata.profile.contrasts import BootDeltas, contrasts
from vinstrata.profile.groups import POOLED, Group, Resamples, draw_resamples, style_groups
from vinstrata.profile.partial import PARTIAL_COLUMNS, add_conditional, conditional_effects
from vinstrata.profile.thresholds import (
    EXTRA_THRESHOLD_COLUMNS,
    THRESHOLD_COLUMNS,
    cut_words,
    group_thresholds,
)
from vinstrata.progress import Reporter
from vinstrata.read.lots import UNASSIGNED, AnalyteSpec
from vinstrata.read.lots import observed as lot_values
from vinstrata.segment.model import StyleModel
from vinstrata.settings import ProfileSettings

WORKERS = 2  # threads for the parts of the profile that draw from streams of their own

DRIVER_COLUMNS = ("style", "analyte", "n_top", "n_bottom", "median_top", "median_bottom",
                  "cliffs_delta", "ci_low", "ci_high", "hedges_g", "p_value", "q_value",
                  "spearman_rho", "is_driver", "rank", "trusted", "note")


EXTRA_DRIVER_COLUMNS = ("hedges_g_ci_low", "hedges_g_ci_high", "magnitude", "iqr_top",
                        "iqr_bottom", "n_lots", "mann_whitney_p", *PARTIAL_COLUMNS)


@dataclass(frozen=True)
class Profiles:
    """Everything the profile stage produces (plain DataFrames), and what it was made with."""

    drivers: pd.DataFrame
    thresholds: pd.DataFrame
    contrasts: pd.DataFrame
    band_counts: pd.DataFrame
    band_stats: pd.DataFrame
    settings: ProfileSettings


def _profile_group(group: Group, observed: dict[str, np.ndarray], grades: np.ndarray,
                   settings: ProfileSettings, rng: np.random.Generator
                   ) -> tuple[list[dict], Resamples, dict[str, np.ndarray]]:
    """Driver rows of one group, the resamples kept for its thresholds and its bootstrap
    deltas per analyte (those with enough lots)."""
    resamples = draw_resamples(group, len(settings.bands.labels), settings.bootstrap, rng)
    out = _point_rows(group, observed, grades, resamples, settings)
    return out, resamples, _add_intervals(out, observed, resamples, settings)


def _point_rows(group: Group, observed: dict[str, np.ndarray], grades: np.ndarray,
                resamples: Resamples, settings: ProfileSettings) -> list[dict]:
    """Driver rows of one group with every statistic but the delta interval."""
    out = []
    for analyte, values in observed.items():
        row = _plain_row(group, analyte, values, grades, resamples)
        n_top, n_bottom = row["n_top"], row["n_bottom"]
        if n_top < settings.min_band_lots or n_bottom < settings.min_band_lots:
            labels = settings.bands.labels
            row["note"] = _join(
                f"insufficient: {n_top} lots in the {labels[-1]} band and "
                f"{n_bottom} in the {labels[0]} band (minimum "
                f"{settings.min_band_lots} each)", group.note)
            out.append(row)
            continue
        row.update(_effect_sizes(values[resamples.top_rows], values[resamples.bottom_rows],
                                 settings))
        if not group.trusted:
            row["note"] = _join("untrusted style", row["note"])
        out.append(row)
    return out


def _add_intervals(rows: list[dict], observed: dict[str, np.ndarray], resamples: Resamples,
                   settings: ProfileSettings, only: set[str] | None = None
                   ) -> dict[str, np.ndarray]:
    """Fill the BCa delta interval into the rows that have a delta (of the analytes in
    ``only``, when given); return their bootstrap deltas."""
    wanted = [r for r in rows if np.isfinite(r["cliffs_delta"])
              and (only is None or r["analyte"] in only)]
    bands = {r["analyte"]: (observed[r["analyte"]][resamples.top_rows],
                            observed[r["analyte"]][resamples.bottom_rows]) for r in wanted}
    boots = boot_deltas(resamples, bands)
    for row in wanted:
        xt, xb = bands[row["analyte"]]
        row["ci_low"], row["ci_high"] = stats.delta_interval(
            xt[np.isfinite(xt)], xb[np.isfinite(xb)], boots[row["analyte"]], settings.ci_level)
    return boots


def boot_deltas(resamples: Resamples, bands: dict[str, tuple[np.ndarray, np.ndarray]]
                ) -> dict[str, np.ndarray]:
    """Cliff's delta of every resample for each analyte's (top, bottom) band values.

    One pass over the group's resamples, a block at a time, shared by all analytes:
    memory is a block's multiplicities plus each analyte's count plan, never lots x
    resamples.
    """
    out = {a: np.empty(resamples.bootstrap) for a in bands}
    if not bands:
        return out
    plans = {a: stats.DeltaPlan.of(xt, xb) for a, (xt, xb) in bands.items()}
    for part, top, bottom in resamples.blocks():
        w_top, w_bottom = stats.lots_by_resamples(top), stats.lots_by_resamples(bottom)
        del top, bottom
        for analyte, plan in plans.items():
            out[analyte][part] = plan.deltas(w_top, w_bottom)
    return out


def _plain_row(group: Group, analyte: str, values: np.ndarray, grades: np.ndarray,
               resamples: Resamples) -> dict:
    """A driver row with the band sizes and medians, its effect sizes still empty."""
    xt, xb = values[resamples.top_rows], values[resamples.bottom_rows]
    ok_t, ok_b = np.isfinite(xt), np.isfinite(xb)
    all_vals = values[group.rows]
    return {
        "style": group.style, "analyte": analyte,
        "n_top": int(ok_t.sum()), "n_bottom": int(ok_b.sum()),
        "median_top": stats.quantile_or_nan(xt[ok_t], 0.5),
        "median_bottom": stats.quantile_or_nan(xb[ok_b], 0.5),
        "cliffs_delta": np.nan, "ci_low": np.nan, "ci_high": np.nan, "hedges_g": np.nan,
        "p_value": np.nan, "q_value": np.nan,
        "spearman_rho": stats.spearman_rho(all_vals, grades[group.rows]),
        "is_driver": False, "rank": np.nan, "trusted": group.trusted, "note": group.note,
        "hedges_g_ci_low": np.nan, "hedges_g_ci_high": np.nan, "magnitude": "",
        "iqr_top": stats.iqr_or_nan(xt[ok_t]), "iqr_bottom": stats.iqr_or_nan(xb[ok_b]),
        "n_lots": int(np.isfinite(all_vals).sum()), "mann_whitney_p": np.nan,
    }


def _effect_sizes(xt: np.ndarray, xb: np.ndarray, settings: ProfileSettings) -> dict:
    """Cliff's delta, Hedges' g with its CI, the Brunner-Munzel and Mann-Whitney p-values
    (the delta's BCa interval is filled by :func:`_add_intervals`)."""
    top, bottom = xt[np.isfinite(xt)], xb[np.isfinite(xb)]
    g = stats.hedges_g(top, bottom, settings.ci_level)
    delta = stats.cliffs_delta(top, bottom)
    return {
        "cliffs_delta": delta,
        "hedges_g": g.g, "hedges_g_ci_low": g.ci_low, "hedges_g_ci_high": g.ci_high,
        "p_value": stats.brunner_munzel_p(top, bottom), "magnitude": stats.magnitude(delta),
        "mann_whitney_p": stats.mann_whitney_p(top, bottom),
    }


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
        With the settings of ``config`` and the model's input hash.
    """
    return profile_table(model.values, model.flags, model.lots, model.styles, model.specs,
                         config or model.config, reporter, pooled, cut_intervals,
                         model_sha256=model.source.sha256)


def profile_table(values: pd.DataFrame, flags: pd.DataFrame, lots: pd.DataFrame,
                  styles: pd.DataFrame, specs: tuple[AnalyteSpec, ...], config: Config,
                  reporter: Reporter | None = None, pooled: bool = True,
                  cut_intervals: bool = True, model_sha256: str = "") -> Profiles:
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
    model_sha256 : str
        The input hash of the model the lots come from, kept in the settings.

    Returns
    -------
    Profiles
    """
    settings = ProfileSettings.from_config(config, model_sha256)
    groups = style_groups(lots, styles, settings.bands, settings.include_unassigned)
    if not pooled:
        groups = [g for g in groups if g.style != POOLED]
    observed = {s.name: lot_values(values, flags, s.name) for s in specs}
    rep = reporter or Reporter()
    styled = [g for g in groups if g.style != POOLED]
    for note in quantile_share_notes([g.style for g in styled], [g.bands for g in styled],
                                     settings.bands):
        rep.warn(note)
    grades = lots["grade"].to_numpy(dtype=float)
    drivers, kept, boots = _drivers(groups, observed, grades, settings, rep)
    # the check and each style's cut intervals draw from streams of their own, so they run
    # two at a time (on two cores: numpy releases the GIL in its long loops); the cuts read
    # only the drivers' verdicts and deltas, which the check leaves as they are
    with ThreadPoolExecutor(max_workers=WORKERS) as pool:
        checked = (pool.submit(_unassigned_check, drivers, groups, observed, grades, lots,
                               styles, settings)
                   if pooled else None)  # the full profile (placing needs only the drivers)
        thresholds = _thresholds(groups, kept, drivers, observed, styles, settings,
                                 cut_intervals, pool)
        if checked is not None:
            drivers = checked.result()
    labels = {s.name: s.label for s in specs}
    return Profiles(
        drivers=drivers, thresholds=thresholds,
        # the gaps between styles resample the same draws as the styles' own intervals
        contrasts=contrasts(drivers, labels, BootDeltas(groups, kept, observed,
                                                        settings.bootstrap, boots),
                            settings.ci_level),
        band_counts=_band_counts(groups, settings.bands.labels),
        band_stats=_band_stats(groups, observed, settings.bands.labels), settings=settings,
    )


def _drivers(groups: list[Group], observed: dict[str, np.ndarray], grades: np.ndarray,
             settings: ProfileSettings, rep: Reporter
             ) -> tuple[pd.DataFrame, list[Resamples], dict[tuple[str, str], np.ndarray]]:
    """The drivers table of every group (ranked), each group's resamples and the bootstrap
    deltas of every (style, analyte) row with a delta."""
    # conditional effects, from a stream of their own per style (keyed), so every other
    # column draws as it would without them; they need nothing the drivers decide, so they
    # are drawn on a second core meanwhile (numpy releases the GIL while it draws)
    with ThreadPoolExecutor(max_workers=1) as pool:
        effects = pool.submit(conditional_effects, groups, observed, grades,
                              settings.bootstrap, settings.ci_level, settings.seed)
        rng = np.random.default_rng(settings.seed)
        rows, kept, boots = [], [], {}
        for i, group in enumerate(groups):
            group_rows, resamples, deltas = _profile_group(group, observed, grades, settings,
                                                           rng)
            rows += group_rows
            kept.append(resamples)
            boots.update({(group.style, a): d for a, d in deltas.items()})
            rep.bar(i + 1, len(groups), "  bootstrap")
        drivers = _mark_drivers(pd.DataFrame(rows), settings.fdr)
        drivers = add_conditional(drivers, groups, observed, grades, settings.bootstrap,
                                  settings.ci_level, settings.seed, effects.result())
    return drivers[list(DRIVER_COLUMNS) + list(EXTRA_DRIVER_COLUMNS)], kept, boots


def _unassigned_check(drivers: pd.DataFrame, groups: list[Group],
                      observed: dict[str, np.ndarray], grades: np.ndarray, lots: pd.DataFrame,
                      styles: pd.DataFrame, settings: ProfileSettings) -> pd.DataFrame:
    """Drivers noted where giving the unassigned lots to their nearest style (or, with
    ``profile.include_unassigned``, leaving them out) makes or unmakes them.

    The styles whose lots and bands do not change keep their rows; the others are
    profiled again (their resamples keyed by style, so the check draws the same
    whatever else changes), and the verdicts are taken over one BH family as usual.
    The q-values need no bootstrap, so only the rows with q below the FDR, the only
    ones that can be drivers, get their delta interval.
    """
    style = lots["style"].to_numpy(dtype=object)
    unassigned = style == UNASSIGNED
    if not unassigned.any():
        return drivers
    include = not settings.include_unassigned
    flipped = dataclasses.replace(settings, include_unassigned=include)
    before = {g.style: g for g in groups}
    rows, redone = [], []
    for group in style_groups(lots, styles, flipped.bands, include):
        if group.style == POOLED:
            continue
        old = before[group.style]
        if np.array_equal(old.rows, group.rows) and np.array_equal(old.bands, group.bands):
            rows += drivers[drivers["style"] == group.style].to_dict("records")
        else:
            rng = stats.keyed_rng(settings.seed, "unassigned", group.style)
            resamples = draw_resamples(group, len(flipped.bands.labels), flipped.bootstrap,
                                       rng, advance=False)
            mine = _point_rows(group, observed, grades, resamples, flipped)
            redone.append((mine, resamples))
            rows += mine
    q = _mark_drivers(pd.DataFrame(rows), settings.fdr)["q_value"].to_numpy()
    q_of = {(r["style"], r["analyte"]): v for r, v in zip(rows, q)}
    for mine, resamples in redone:
        only = {r["analyte"] for r in mine if q_of[(r["style"], r["analyte"])] < settings.fdr}
        _add_intervals(mine, observed, resamples, flipped, only)
    other = _mark_drivers(pd.DataFrame(rows), settings.fdr).set_index(["style", "analyte"])
    nearest = lots["nearest_style"].to_numpy(dtype=object)
    n_all = int(unassigned.sum())
    out = drivers.copy()
    for k, row in out.iterrows():
        key = (row["style"], row["analyte"])
        if row["style"] == POOLED or key not in other.index:
            continue
        was, now = bool(row["is_driver"]), bool(other.loc[key, "is_driver"])
        if was == now:
            continue
        mine = int((unassigned & (nearest == row["style"])).sum())
        change = (f"the {n_all} unassigned lots join their nearest styles ({mine} this one)"
                  if include else f"the {mine} unassigned lots it takes in are left out")
        note = (f"driver only when {change}" if now else f"not a driver when {change}")
        out.at[k, "note"] = _join(row["note"], note)
    return out


def _mark_drivers(drivers: pd.DataFrame, fdr: float) -> pd.DataFrame:
    """q-values, the driver verdict and the ranks by |delta|, filled into ``drivers``."""
    # one Benjamini-Hochberg family for every style x analyte test, another for the pooled
    # rows: pooled differences are mostly between styles and would loosen the correction
    pooled_rows = (drivers["style"] == POOLED).to_numpy()
    q = np.full(len(drivers), np.nan)
    for family in (~pooled_rows, pooled_rows):
        q[family] = stats.bh_adjust(drivers.loc[family, "p_value"].to_numpy())
    drivers["q_value"] = q
    ci_excludes = (drivers["ci_low"] > 0) | (drivers["ci_high"] < 0)
    drivers["is_driver"] = ((drivers["q_value"] < fdr) & ci_excludes).fillna(False)
    drivers["is_driver"] = drivers["is_driver"].astype(bool)
    drivers["rank"] = np.nan
    for _, part in drivers[drivers["is_driver"]].groupby("style", sort=False):
        order = part["cliffs_delta"].abs().sort_values(ascending=False, kind="stable").index
        drivers.loc[order, "rank"] = np.arange(1, len(order) + 1)
    return drivers


def _thresholds(groups: list[Group], kept: list[Resamples], drivers: pd.DataFrame,
                observed: dict[str, np.ndarray], styles: pd.DataFrame,
                settings: ProfileSettings, cut_intervals: bool,
                pool: ThreadPoolExecutor | None = None) -> pd.DataFrame:
    """The thresholds table of every style (the pooled range has none), the styles run
    on ``pool`` when given."""
    tasks = []
    for group, resamples in zip(groups, kept):
        if group.style == POOLED:
            continue
        args = (group, drivers[drivers["style"] == group.style], observed, resamples, settings,
                cut_intervals)
        tasks.append(pool.submit(group_thresholds, *args) if pool else args)
    rows = [r for t in tasks for r in (t.result() if pool else group_thresholds(*t))]
    thresholds = pd.DataFrame(rows, columns=list(THRESHOLD_COLUMNS + EXTRA_THRESHOLD_COLUMNS))
    trusted = dict(zip(styles["style"], styles["trusted"]))
    thresholds["trusted"] = thresholds["style"].map(trusted).astype(bool)
    return thresholds[[*THRESHOLD_COLUMNS, "trusted", *EXTRA_THRESHOLD_COLUMNS]]


def _band_counts(groups: list[Group], labels: tuple[str, ...]) -> pd.DataFrame:
    rows = []
    for group in groups:
        counts = {label: int((group.bands == i).sum()) for i, label in enumerate(labels)}
        graded = int((group.bands >= 0).sum())
        # the shares the bands reached (per-style quantiles with tied grades can miss theirs)
        shares = {f"share_{label}": round(n / graded, 6) if graded else np.nan
                  for label, n in counts.items()}
        rows.append({"style": group.style, "n_lots": len(group.rows), "n_graded": graded,
                     **counts, "trusted": group.trusted, **shares})
    return pd.DataFrame(rows)


def _band_stats(groups: list[Group], observed: dict[str, np.ndarray], labels: tuple[str, ...]
                ) -> pd.DataFrame:
    rows = []
    for group in groups:
        for analyte, values in observed.items():
            for i, label in enumerate(labels):
                x = values[group.rows[group.bands == i]]
                x = x[np.isfinite(x)]
                q = np.quantile(x, [0.25, 0.5, 0.75]) if x.size else [np.nan] * 3
                rows.append({"style": group.style, "analyte": analyte, "band": label,
                             "n": int(x.size), "q25": q[0], "median": q[1], "q75": q[2]})
    return pd.DataFrame(rows)


ROLE_ORDER = {"direct": 0, "unclear": 1, "": 2, "indirect": 3}


def driver_summary(profiles: Profiles, model: StyleModel, top: int = 3) -> list[str]:
    """Plain sentences: per trusted style its top direct drivers with direction and cut,
    then its passengers (drivers that only move with a direct one), named as such."""
    names = model.style_names()
    labels = {s.name: (s.label, s.unit) for s in model.specs}
    out = []
    thr = profiles.thresholds.set_index(["style", "analyte"])
    for sid in model.style_ids:
        part = profiles.drivers[(profiles.drivers["style"] == sid) & profiles.drivers["is_driver"]]
        if not bool(model.styles.set_index("style").loc[sid, "trusted"]):
            continue
        part = part.assign(
            role=part["role"].fillna("").astype(str) if "role" in part else "",
            moves_with=(part["moves_with"].fillna("").astype(str) if "moves_with" in part
                        else ""))
        part = part.assign(_order=part["role"].map(ROLE_ORDER).fillna(2)).sort_values(
            ["_order", "rank"], kind="stable")
        if part.empty:
            out.append(f"{sid} ({names[sid]}): no analyte separates top from bottom lots.")
            continue
        leading = part[part["role"] != "indirect"].head(top)
        bits = []
        for row in leading.itertuples():
            label, unit = labels[row.analyte]
            t = thr.loc[(sid, row.analyte)]
            # a Youden cut splits the bands, it bounds neither: say how many lots of each it leaves
            twin = (f"; cannot be told from {labels[row.moves_with][0]}"
                    if row.role == "unclear" and row.moves_with in labels else "")
            bits.append(f"{'higher' if row.cliffs_delta > 0 else 'lower'} {label} "
                        f"({cut_words(t, unit)}; delta {row.cliffs_delta:+.2f}{twin})")
        riders = [f"{labels[r.analyte][0]} moves with {labels[r.moves_with][0]}: no effect of "
                  f"its own once {labels[r.moves_with][0]} is known (delta {r.cliffs_delta:+.2f})"
                  for r in part[part["role"] == "indirect"].itertuples()
                  if r.moves_with in labels]
        text = "; ".join(bits) if bits else "no direct driver"
        if riders:
            text += ". Passengers: " + "; ".join(riders)
        out.append(f"{sid} ({names[sid]}): " + text + ".")
    return out
