"""New lots' analytes against their style: robust z, percentiles, and the driver flags.

Per lot and analyte (``placement_analytes.csv``): the robust z against the
style's median and IQR, the mid-rank percentile among the style's training
lots, and for reference the driver's Youden cut and the top band's target
window. An analyte whose |robust z| exceeds ``place.z_flag`` is
``off_style:<analyte>``.

Driver flags judge a lot on its style's drivers together, never one analyte at
a time: a lot misses a single driver's Youden cut often even in the top band
(with three drivers of delta 0.5, most top lots miss one), and a target window
on every analyte fires on nearly every lot. Instead, per trusted style with
drivers:

* each driver's *position* is the normal score of the lot's mid-rank percentile
  among the style's training lots, Phi^-1(p), with p clipped to [1 %, 99 %] so
  that one extreme value weighs at most 2.3; rank-based, so skewed analytes
  and outliers count like any other;
* the *driver score* is the drivers' positions weighted by their Cliff's delta,
  sum(delta_k q_k) / sum(|delta_k|): 0 at the style's medians, positive where
  the lot sits on the side its top lots favour;
* the same score of the style's own training lots of the top and bottom band
  (the profile's bands) gives the *score cut*: the score below which a
  bottom-band lot is more likely than a top-band one, from a logistic fit of
  band on score with the two bands weighted equally (so a style graded mostly
  top still flags lots whose chemistry is that of its bottom lots);
* a lot scoring below the cut is flagged, naming the one to three drivers that
  pull its score down most (a driver is named when its pull is at least half
  the largest), ``below_cut:<analyte>`` where the top lots have more of it and
  ``above_cut:<analyte>`` where they have less. A lot above the score cut gets
  no driver flag, whatever its single analytes do.

Untrusted styles, styles without drivers and lots that fit no style get no
driver flags. Everything comes from the model (training lots' values, styles,
grades) and the profiles (drivers, their deltas, bands); nothing is refitted.
The target windows stay in ``thresholds.csv`` and ``placement_analytes.csv``
as a description of the top band, not as a flag.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.special import ndtri

from vinstrata.place.limits import Flag, normalise_colour
from vinstrata.profile.drivers import Profiles
from vinstrata.profile.groups import POOLED, style_groups
from vinstrata.read.lots import AnalyteSpec, observed
from vinstrata.segment.model import StyleModel

POSITION_CLIP = 0.01  # percentiles clipped to [1 %, 99 %]: one value weighs at most 2.33
NAME_SHARE = 0.5  # a driver is named when its pull is at least half the largest pull
MAX_NAMED = 3


@dataclass(frozen=True)
class DriverScale:
    """One trusted style's drivers as a single score, and where bottom lots dominate it.

    Attributes
    ----------
    style : str
    analytes : tuple of str
        The style's drivers, by rank.
    weights : ndarray
        Their Cliff's deltas (top band against bottom band).
    references : tuple of ndarray
        Each driver's sorted measured values among the style's training lots.
    medians_top : ndarray
        Each driver's median in the style's top band.
    cut : float
        The score below which a bottom-band lot is more likely than a top-band one
        (NaN when the training scores do not separate the bands).
    top_below, bottom_below : float
        The shares of the style's top-band and bottom-band training lots scoring below
        the cut (in-sample).
    """

    style: str
    analytes: tuple[str, ...]
    weights: np.ndarray
    references: tuple[np.ndarray, ...]
    medians_top: np.ndarray
    cut: float
    top_below: float
    bottom_below: float


@dataclass(frozen=True)
class DriverView:
    """The driver judgement of new lots: score, cut, named drivers and flags per lot."""

    score: np.ndarray  # NaN where the lot's style has no scale
    cut: np.ndarray
    named: list[tuple[str, ...]]  # the drivers a lot's flag names
    flags: list[list[Flag]]


def mid_percentile(reference: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Mid-rank percentile (0-100) of each value of ``v`` among sorted ``reference``."""
    if reference.size == 0:
        return np.full(v.shape, np.nan)
    return (100.0 * (np.searchsorted(reference, v, "left") + np.searchsorted(reference, v, "right"))
            / (2 * reference.size))


def _positions(scale: DriverScale, columns: list[np.ndarray]) -> np.ndarray:
    """Each lot's normal-score position on each driver (lots x drivers; 0 where unknown)."""
    out = np.zeros((len(columns[0]) if columns else 0, len(scale.analytes)))
    for k, (ref, v) in enumerate(zip(scale.references, columns)):
        p = mid_percentile(ref, v) / 100.0
        q = ndtri(np.clip(p, POSITION_CLIP, 1 - POSITION_CLIP))
        out[:, k] = np.where(np.isfinite(v) & np.isfinite(q), q, 0.0)
    return out


def pulls(scale: DriverScale, columns: list[np.ndarray]) -> np.ndarray:
    """Each driver's share of each lot's score (lots x drivers); the score is their sum."""
    return _positions(scale, columns) * scale.weights / np.abs(scale.weights).sum()


def balanced_cut(top: np.ndarray, bottom: np.ndarray) -> float:
    """The score where a logistic fit, bands weighted equally, gives P(bottom) = 1/2.

    Parameters
    ----------
    top, bottom : ndarray
        The scores of the top-band and bottom-band lots.

    Returns
    -------
    float
        The cut; NaN when either band is empty or higher scores do not go with
        the top band.
    """
    top, bottom = top[np.isfinite(top)], bottom[np.isfinite(bottom)]
    if top.size == 0 or bottom.size == 0:
        return np.nan
    s = np.concatenate([top, bottom])
    centre, spread = float(np.mean(s)), float(np.std(s))
    if spread <= 0:
        return np.nan
    x = (s - centre) / spread
    y = np.concatenate([np.zeros(top.size), np.ones(bottom.size)])
    w = np.concatenate([np.full(top.size, 0.5 / top.size), np.full(bottom.size, 0.5 / bottom.size)])
    design = np.column_stack([np.ones_like(x), x])
    beta = np.zeros(2)
    # a light ridge keeps Newton's steps finite when the bands separate completely
    ridge = np.diag([0.0, 1e-4])
    for _ in range(50):
        p = 1.0 / (1.0 + np.exp(-design @ beta))
        grad = design.T @ (w * (p - y)) + ridge @ beta
        hess = (design * (w * p * (1 - p))[:, None]).T @ design + ridge
        step = np.linalg.solve(hess, grad)
        beta -= step
        if np.abs(step).max() < 1e-10:
            break
    if beta[1] >= 0:  # P(bottom) must fall as the score rises
        return np.nan
    return centre + spread * float(-beta[0] / beta[1])


def driver_scales(model: StyleModel, profiles: Profiles) -> dict[str, DriverScale]:
    """The driver score of every trusted style with drivers, its cut from its training lots.

    Parameters
    ----------
    model : StyleModel
    profiles : Profiles
        Drivers (deltas, top-band medians) and the bands they were computed with.

    Returns
    -------
    dict
        Style id -> DriverScale.
    """
    settings = profiles.settings
    drivers = profiles.drivers
    trusted = dict(zip(model.styles["style"], model.styles["trusted"].astype(bool)))
    groups = {g.style: g for g in style_groups(model.lots, model.styles, settings.bands,
                                               settings.include_unassigned)
              if g.style != POOLED}
    train_style = model.lots["style"].to_numpy(dtype=object)
    top_band = len(settings.bands.labels) - 1
    out = {}
    for sid in model.style_ids:
        mine = drivers[(drivers["style"] == sid) & drivers["is_driver"].astype(bool)]
        if "role" in mine:  # a passenger has no effect of its own: a lot is not judged on it
            mine = mine[mine["role"].fillna("").astype(str) != "indirect"]
        if not trusted.get(sid, False) or mine.empty or sid not in groups:
            continue
        mine = mine.sort_values("rank", kind="stable")
        names = tuple(str(a) for a in mine["analyte"])
        values = [observed(model.values, model.flags, a) for a in names]
        refs = tuple(np.sort(v[(train_style == sid) & np.isfinite(v)]) for v in values)
        scale = DriverScale(style=sid, analytes=names,
                            weights=mine["cliffs_delta"].to_numpy(dtype=float),
                            references=refs, medians_top=mine["median_top"].to_numpy(float),
                            cut=np.nan, top_below=np.nan, bottom_below=np.nan)
        group = groups[sid]
        score = pulls(scale, [v[group.rows] for v in values]).sum(axis=1)
        top, bottom = score[group.bands == top_band], score[group.bands == 0]
        cut = balanced_cut(top, bottom)
        out[sid] = DriverScale(**{**scale.__dict__, "cut": cut,
                                  "top_below": float(np.mean(top < cut)) if top.size else np.nan,
                                  "bottom_below": (float(np.mean(bottom < cut)) if bottom.size
                                                   else np.nan)})
    return out


def driver_view(values: pd.DataFrame, model: StyleModel, profiles: Profiles | None,
                home: np.ndarray, judged: np.ndarray | None = None,
                scales: dict[str, DriverScale] | None = None) -> DriverView:
    """Each new lot's driver score against its style's cut, and its driver flags.

    Parameters
    ----------
    values : DataFrame
        The new lots' analytes in canonical units.
    model : StyleModel
    profiles : Profiles, optional
        Without them no lot is judged on drivers.
    home : ndarray of str
        Each lot's style (its nearest style when it has none).
    judged : ndarray of bool, optional
        The lots to judge (the others get a score but no flag); all when None.
    scales : dict, optional
        :func:`driver_scales` of the model and profiles, when already built.

    Returns
    -------
    DriverView
    """
    n = len(values)
    score, cut = np.full(n, np.nan), np.full(n, np.nan)
    named: list[tuple[str, ...]] = [() for _ in range(n)]
    flags: list[list[Flag]] = [[] for _ in range(n)]
    if profiles is None:
        return DriverView(score, cut, named, flags)
    judged = np.ones(n, dtype=bool) if judged is None else np.asarray(judged, dtype=bool)
    specs = {s.name: s for s in model.specs}
    scales = scales if scales is not None else driver_scales(model, profiles)
    for sid, scale in scales.items():
        mine = np.flatnonzero(home == sid)
        if mine.size == 0:
            continue
        columns = [values[a].to_numpy(dtype=float)[mine] for a in scale.analytes]
        pull = pulls(scale, columns)
        score[mine] = pull.sum(axis=1)
        cut[mine] = scale.cut
        if not np.isfinite(scale.cut):
            continue
        for k in np.flatnonzero((score[mine] < scale.cut) & judged[mine]):
            i = mine[k]
            chosen = _named(pull[k])
            named[i] = tuple(scale.analytes[j] for j in chosen)
            flags[i] = [_flag(scale, specs[scale.analytes[j]], columns[j][k], j, score[i],
                              first=m == 0) for m, j in enumerate(chosen)]
    return DriverView(score, cut, named, flags)


def _named(pull: np.ndarray) -> list[int]:
    """The drivers pulling a lot's score down most: up to three, each at least half the most."""
    order = np.argsort(pull, kind="stable")
    worst = pull[order[0]]
    if worst >= 0:  # below the cut with no driver pulling down: nothing to name
        return []
    return [int(j) for j in order[:MAX_NAMED] if pull[j] <= NAME_SHARE * worst]


def _flag(scale: DriverScale, spec: AnalyteSpec, value: float, j: int, score: float,
          first: bool) -> Flag:
    """The flag naming one driver of a lot scored below its style's cut."""
    higher = scale.weights[j] > 0
    side = "below" if higher else "above"
    p = float(mid_percentile(scale.references[j], np.array([value]))[0])
    words = (f"{spec.label} {_amount(value, spec)} {'low' if higher else 'high'} for "
             f"{scale.style} (percentile {p:.0f}; its top lots' median "
             f"{_amount(scale.medians_top[j], spec)})")
    if first:
        words = (f"{scale.style} driver score {score:+.2f} is below {scale.cut:+.2f}, where "
                 f"{scale.style}'s bottom-band lots outnumber its top-band ones: {words}")
    return Flag(f"{side}_cut:{spec.name}", words,
                f"{'low' if higher else 'high'} {spec.label}")


def _amount(value: float, spec: AnalyteSpec) -> str:
    """A value with its unit ("3.2" for pH, whose unit is its name)."""
    return f"{value:.4g}" if spec.unit in ("", spec.label) else f"{value:.4g} {spec.unit}"


def analyte_view(values: pd.DataFrame, model: StyleModel, profiles: Profiles | None,
                 home: np.ndarray, z_flag: float,
                 named: list[tuple[str, ...]] | None = None
                 ) -> tuple[pd.DataFrame, list[list[Flag]]]:
    """Per lot and analyte: robust z, percentile, cut and window; and the off-style flags.

    Parameters
    ----------
    values : DataFrame
        The new lots' analytes in canonical units.
    model : StyleModel
    profiles : Profiles, optional
        For the driver cuts and target windows shown beside each analyte.
    home : ndarray of str
        Each lot's style (its nearest style when it has none).
    z_flag : float
        |robust z| above which an analyte is off its style (``place.z_flag``).
    named : list of tuple of str, optional
        The drivers each lot's driver flag names (:func:`driver_view`), marked
        ``losing_side`` in the ``flag`` column.

    Returns
    -------
    frame : DataFrame
        One row per lot and analyte, lots in order.
    flags : list of list of Flag
        Each lot's off-style flags.
    """
    style_stats = model.style_stats.set_index(["style", "analyte"])
    thresholds = (profiles.thresholds.set_index(["style", "analyte"])
                  if profiles is not None else None)
    train_style = model.lots["style"].to_numpy(dtype=object)
    named = named if named is not None else [() for _ in range(len(values))]
    flags: list[list[Flag]] = [[] for _ in range(len(values))]
    parts = []
    for j, spec in enumerate(model.specs):
        x = values[spec.name].to_numpy(dtype=float)
        train = observed(model.values, model.flags, spec.name)
        range_iqr = float(np.nanquantile(train, 0.75) - np.nanquantile(train, 0.25))
        for sid in model.style_ids:
            mine = np.flatnonzero(home == sid)
            if mine.size == 0:
                continue
            st = style_stats.loc[(sid, spec.name)]
            cut = (thresholds.loc[(sid, spec.name)] if thresholds is not None
                   and (sid, spec.name) in thresholds.index else None)
            judged = _judge(x[mine], st, range_iqr, train[train_style == sid], cut, z_flag)
            losing = np.array([spec.name in named[i] for i in mine], dtype=bool)
            _add_flags(flags, mine, judged, spec, sid)
            parts.append(_rows(mine, j, judged, losing, spec, sid, float(st["median"])))
    frame = pd.concat(parts, ignore_index=True).sort_values(["_i", "_o"], kind="stable")
    return frame.drop(columns=["_i", "_o"]).reset_index(drop=True), flags


@dataclass(frozen=True)
class _Judged:
    """One analyte of the new lots of one style, against that style."""

    value: np.ndarray
    z: np.ndarray
    percentile: np.ndarray
    off: np.ndarray  # |robust z| above the flag line
    direction: str
    cut: float
    low: float
    high: float


def _judge(v: np.ndarray, st: pd.Series, range_iqr: float, train: np.ndarray,
           cut_row: pd.Series | None, z_flag: float) -> _Judged:
    """One analyte of one style's new lots: robust z, percentile, off-style judgement."""
    iqr = float(st["q75"] - st["q25"])
    iqr = iqr if iqr > 0 else (range_iqr if range_iqr > 0 else 1.0)
    ref = np.sort(train)
    ref = ref[np.isfinite(ref)]
    known = np.isfinite(v)
    z = (v - st["median"]) / iqr
    pct = mid_percentile(ref, v)
    direction, cut, low, high = "", np.nan, np.nan, np.nan
    if cut_row is not None:
        direction = cut_row["direction"] if isinstance(cut_row["direction"], str) else ""
        cut, low, high = cut_row["cut"], cut_row["target_low"], cut_row["target_high"]
    return _Judged(value=v, z=z, percentile=np.where(known, pct, np.nan),
                   off=known & (np.abs(z) > z_flag), direction=direction, cut=cut, low=low,
                   high=high)


def _add_flags(flags: list[list[Flag]], mine: np.ndarray, judged: _Judged, spec: AnalyteSpec,
               sid: str) -> None:
    """Append the off-style flags of one analyte to its lots' flags."""
    v, z = judged.value, judged.z
    for i in np.flatnonzero(judged.off):
        flags[mine[i]].append(Flag(f"off_style:{spec.name}",
                                   f"{spec.label} {_amount(v[i], spec)} far from {sid} "
                                   f"(robust z {z[i]:+.1f})", f"{spec.label} z{z[i]:+.1f}"))


def _rows(mine: np.ndarray, order: int, judged: _Judged, losing: np.ndarray, spec: AnalyteSpec,
          sid: str, median: float) -> pd.DataFrame:
    """The ``placement_analytes.csv`` rows of one analyte and style (sort keys ``_i, _o``)."""
    flag = np.where(judged.off, "off_style", np.where(losing, "losing_side", ""))
    return pd.DataFrame({
        "_i": mine, "_o": order, "analyte": spec.name, "value": judged.value,
        "unit": spec.unit, "style": sid, "style_median": median,
        "robust_z": np.round(judged.z, 6), "percentile": np.round(judged.percentile, 4),
        "direction": judged.direction, "cut": judged.cut, "target_low": judged.low,
        "target_high": judged.high, "flag": flag,
    })


def lot_colours(extra: pd.DataFrame, colour_column: str, default_colour: str) -> np.ndarray:
    """Each lot's colour for the screening: its colour column, else the default colour.

    Parameters
    ----------
    extra : DataFrame
        The lots' passthrough columns.
    colour_column : str
        ``limits.colour_column`` ("" for none).
    default_colour : str
        ``limits.default_colour``, for lots whose colour is blank or unknown.

    Returns
    -------
    ndarray of str
    """
    if colour_column and colour_column in extra.columns:
        colours = [normalise_colour(v) for v in extra[colour_column]]
        return np.array([c or default_colour for c in colours], dtype=object)
    return np.full(len(extra), default_colour, dtype=object)


def short_flags(flags: list[Flag]) -> str:
    """A lot's flags in a few words for tables ("" when none is worth showing).

    Typicality first, then off-style analytes, the screening limits and the
    drivers the lot's driver score names (``low acidity, high volatile acidity``).
    The sulfite statement alone is left out: nearly every lot needs one.
    """
    parts = [f.short for f in flags if f.token in ("fits_no_style", "atypical")]
    off = [f.short for f in flags if f.token.startswith("off_style")]
    if off:
        parts.append("off: " + ", ".join(off[:3]) + (" ..." if len(off) > 3 else ""))
    parts += [f.short for f in flags if f.token in ("va_above_limit", "total_so2_above_limit",
                                                    "molecular_so2_low")]
    drivers = [f.short for f in flags if f.token.startswith(("below_cut", "above_cut"))]
    if drivers:
        parts.append("drivers: " + ", ".join(drivers))
    return " | ".join(parts)
