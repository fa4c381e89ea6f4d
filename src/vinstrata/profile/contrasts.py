"""Where drivers differ between styles, and where the pooled range misleads.

A contrast claims a difference, so each row carries the evidence of one
(``delta_gap, gap_ci_low, gap_ci_high``) and is written only when the gap's
interval excludes 0:

* ``reversal`` and ``style_specific``: the gap is the difference in Cliff's
  delta between the two styles the sentence sets against each other (for a
  reversal the strongest style of each direction; for a style-specific driver
  its strongest style against the style without a clear effect whose delta is
  closest to 0, negligible styles first). Its interval is the percentile
  interval of delta_a* - delta_b* over the bootstrap resamples of the two
  styles, drawn independently per style (Efron & Tibshirani 1993, ch. 13): the
  same resamples as the styles' own delta intervals (:class:`BootDeltas`);
* ``pooled_misleading``: the gap is the pooled delta minus the stratified
  delta, the within-style deltas averaged with weights n_style (the lots with
  a value in each profiled style). The stratified delta's resamples are the
  same average of the styles' resamples; the pooled delta's come from the
  pooled range's own resamples. Those are drawn independently of the styles'
  although the lots are the same, so the interval is wider than it need be
  (conservative).

Where a style's driver is only a passenger (role ``indirect``: no effect of its
own once the driver it moves with is known) or cannot be told from its twin
(``unclear``), a reversal or style-specific sentence says so, and says when the
contrast is carried by passengers only.

A style without a clear effect is called *negligible* when its whole delta
interval lies inside +-0.147, the bound under which Romano et al. (2006) call
|delta| negligible, and *too few lots to tell* otherwise.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd

from vinstrata.profile import stats
from vinstrata.profile.groups import POOLED, Group, Resamples

CONTRAST_COLUMNS = ("analyte", "kind", "styles", "sentence", "delta_gap", "gap_ci_low",
                    "gap_ci_high")

NEGLIGIBLE = 0.147  # Romano et al. (2006): |delta| below 0.147 is negligible

Boot = Callable[[str, str], "np.ndarray | None"]


class BootDeltas:
    """Bootstrap Cliff's deltas of a style and analyte, from the drivers' own resamples.

    Recomputed on demand from the resamples each group drew for its delta
    interval, so they equal the deltas behind ``ci_low, ci_high`` resample by
    resample.

    Parameters
    ----------
    groups : list of Group
    resamples : list of Resamples
        One per group, in the same order.
    observed : dict
        Analyte -> values of every lot (NaN where imputed or missing).
    bootstrap : int
        Resamples per band.
    known : dict, optional
        (style, analyte) -> the deltas already drawn for the drivers table (the same
        numbers, kept rather than drawn again).
    """

    def __init__(self, groups: list[Group], resamples: list[Resamples],
                 observed: dict[str, np.ndarray], bootstrap: int,
                 known: dict[tuple[str, str], np.ndarray] | None = None) -> None:
        self._kept = {g.style: r for g, r in zip(groups, resamples)}
        self._observed = observed
        self._b = bootstrap
        self._cache: dict[tuple[str, str], np.ndarray | None] = dict(known or {})

    def __call__(self, style: str, analyte: str) -> np.ndarray | None:
        key = (style, analyte)
        if key not in self._cache:
            self._cache[key] = self._deltas(style, analyte)
        return self._cache[key]

    def _deltas(self, style: str, analyte: str) -> np.ndarray | None:
        kept = self._kept.get(style)
        if kept is None or not kept.complete:
            return None
        values = self._observed[analyte]
        plan = stats.DeltaPlan.of(values[kept.top_rows], values[kept.bottom_rows])
        out = np.empty(self._b)
        for part, top, bottom in kept.blocks():
            out[part] = plan.deltas(stats.lots_by_resamples(top),
                                    stats.lots_by_resamples(bottom))
        return out


def _say_side(higher: bool, label: str) -> str:
    return f"{'higher' if higher else 'lower'} {label}"


def _names(styles: list[str]) -> str:
    if len(styles) <= 2:
        return " and ".join(styles)
    return ", ".join(styles[:-1]) + " and " + styles[-1]


def is_negligible(ci_low: float, ci_high: float) -> bool:
    """Whether a delta interval lies inside the negligible band (+-0.147)."""
    return bool(ci_low >= -NEGLIGIBLE and ci_high <= NEGLIGIBLE)


def _interval(draws: np.ndarray, level: float) -> tuple[float, float]:
    draws = draws[np.isfinite(draws)]
    if draws.size == 0:
        return np.nan, np.nan
    tail = (1 - level) / 2
    low, high = np.quantile(draws, [tail, 1 - tail])
    return float(low), float(high)


def _gap(a: float, b: float, draws_a: np.ndarray | None, draws_b: np.ndarray | None,
         level: float) -> tuple[float, float, float]:
    """delta_a - delta_b with the percentile interval of the resampled differences."""
    if draws_a is None or draws_b is None:
        return a - b, np.nan, np.nan
    low, high = _interval(draws_a - draws_b, level)
    return a - b, low, high


def _excludes_zero(low: float, high: float) -> bool:
    return bool(np.isfinite(low) and np.isfinite(high) and (low > 0 or high < 0))


def contrasts(drivers: pd.DataFrame, labels: dict[str, str], boot: Boot | None = None,
              ci_level: float = 0.95) -> pd.DataFrame:
    """Where drivers differ between trusted styles, and where the pooled range misleads.

    Kinds (per analyte):

    * ``reversal``: a driver in opposite directions in two or more trusted styles;
    * ``style_specific``: a driver (one direction) in some trusted styles and no
      clear effect in other trusted styles with enough lots;
    * ``pooled_misleading``: the pooled delta differs from the stratified
      within-style delta while trusted styles show drivers the pooled range
      hides or reverses, or the pooled range shows a driver that no trusted
      style shows (a difference between styles dressed as a quality driver).

    Parameters
    ----------
    drivers : DataFrame
        The drivers table, pooled rows (style ``all``) included where profiled.
    labels : dict
        Analyte -> label for the sentences.
    boot : callable, optional
        ``boot(style, analyte)`` -> the bootstrap deltas of that row (or None);
        without it no gap has an interval and no row is written.
    ci_level : float
        Level of the gap intervals.

    Returns
    -------
    DataFrame
        The columns of :data:`CONTRAST_COLUMNS`; only rows whose gap interval
        excludes 0.
    """
    rows: list[dict] = []
    styles = drivers[(drivers["style"] != POOLED) & drivers["cliffs_delta"].notna()]
    within = styles[styles["trusted"].astype(bool)]
    pooled = drivers[drivers["style"] == POOLED].set_index("analyte")
    for analyte in dict.fromkeys(drivers["analyte"]):
        p = pooled.loc[analyte] if analyte in pooled.index else None
        context = _Context(analyte, labels.get(analyte, analyte), boot, ci_level, labels)
        rows += context.rows(within[within["analyte"] == analyte],
                             styles[styles["analyte"] == analyte], p)
    frame = pd.DataFrame(rows, columns=list(CONTRAST_COLUMNS))
    for column in CONTRAST_COLUMNS[4:]:
        frame[column] = frame[column].astype(float).round(6)
    return frame


class _Context:
    """The contrasts of one analyte."""

    def __init__(self, analyte: str, label: str, boot: Boot | None, level: float,
                 labels: dict[str, str] | None = None) -> None:
        self.analyte, self.label, self.boot, self.level = analyte, label, boot, level
        self.labels = labels or {}

    def passenger_words(self, driving: pd.DataFrame) -> str:
        """``; in S4 lactic acid has no effect of its own once malic acid is known`` for the
        styles where the analyte is a driver only as a passenger (role ``indirect``), or
        where the data cannot tell it from its twin (``unclear``)."""
        if "role" not in driving.columns or driving.empty:
            return ""
        role = driving["role"].fillna("").astype(str)
        moves = driving.get("moves_with", pd.Series("", index=driving.index))
        moves = moves.fillna("").astype(str)
        parts = []
        for style, r, m in zip(driving["style"], role, moves):
            other = self.labels.get(m, m)
            if r == "indirect":
                parts.append(f"in {style} {self.label} moves with {other}: no effect of its "
                             f"own once {other} is known")
            elif r == "unclear" and other:
                parts.append(f"in {style} the data cannot tell {self.label} from {other}")
            elif r == "unclear":
                parts.append(f"in {style} {self.label} keeps no clear effect of its own once "
                             "the other analytes are known")
        if not parts:
            return ""
        if bool((role == "indirect").all()):
            head = "carried only by passengers: "
        elif not bool((role == "direct").any()):
            head = "no style shows it as a direct driver: "
        else:
            head = ""
        return "; " + head + "; ".join(parts)

    def draws(self, style: str) -> np.ndarray | None:
        return self.boot(style, self.analyte) if self.boot is not None else None

    def rows(self, mine: pd.DataFrame, every: pd.DataFrame, p: pd.Series | None) -> list[dict]:
        """The contrast rows, from the trusted styles' rows, every style's and the pooled row."""
        label = self.label
        driver = mine["is_driver"].astype(bool)
        # styles listed in report order; the pair set against each other is the strongest
        up = mine[driver & (mine["cliffs_delta"] > 0)]
        down = mine[driver & (mine["cliffs_delta"] < 0)]
        flat = mine[~driver]
        p_driver = bool(p is not None and p["is_driver"])
        p_up = bool(p_driver and p["cliffs_delta"] > 0)
        out = []
        pooled_words = self._pooled_words(p, p_driver, p_up)
        flat_words = _flat_words(flat)
        if len(up) and len(down):
            a, b = up.loc[up["cliffs_delta"].idxmax()], down.loc[down["cliffs_delta"].idxmin()]
            gap = _gap(a["cliffs_delta"], b["cliffs_delta"], self.draws(a["style"]),
                       self.draws(b["style"]), self.level)
            out.append(self._row("reversal", list(up["style"]) + list(down["style"]), gap,
                                 f"In {_names(list(up['style']))} higher {label} goes with "
                                 f"higher grades; in {_names(list(down['style']))} the opposite "
                                 f"({_pair(a, b, gap, self.level)}){flat_words}"
                                 f"{self.passenger_words(pd.concat([up, down]))}; "
                                 f"{pooled_words}."))
        elif (len(up) or len(down)) and len(flat):
            side = up if len(up) else down
            a, b = side.loc[side["cliffs_delta"].abs().idxmax()], _quietest(flat)
            gap = _gap(a["cliffs_delta"], b["cliffs_delta"], self.draws(a["style"]),
                       self.draws(b["style"]), self.level)
            out.append(self._row("style_specific", list(side["style"]) + list(flat["style"]),
                                 gap,
                                 f"In {_names(list(side['style']))} "
                                 f"{_say_side(bool(len(up)), label)} goes with higher "
                                 f"grades ({_pair(a, b, gap, self.level)}){flat_words}"
                                 f"{self.passenger_words(side)}; {pooled_words}."))
        if p is None or not np.isfinite(p["cliffs_delta"]):
            return [r for r in out if _excludes_zero(r["gap_ci_low"], r["gap_ci_high"])]
        gap = self._pooled_gap(p, every)
        if len(up) or len(down):
            signs = {bool(len(up))} if not (len(up) and len(down)) else {True, False}
            if not p_driver or signs != {p_up}:
                out.append(self._pooled_hides(list(up["style"]), list(down["style"]), p,
                                              p_driver, p_up, gap))
        elif p_driver and len(mine):
            out.append(self._row(
                "pooled_misleading", [*flat["style"], POOLED], gap,
                f"Pooled over all styles {_say_side(p_up, label)} looks like a driver of "
                f"higher grades, but inside no trusted style does {label} move with the grade"
                f"{flat_words}: the pooled effect comes from differences between styles "
                f"({_stratified_words(p, gap, self.level)})."))
        return [r for r in out if _excludes_zero(r["gap_ci_low"], r["gap_ci_high"])]

    def _row(self, kind: str, styles: list[str], gap: tuple[float, float, float],
             sentence: str) -> dict:
        return {"analyte": self.analyte, "kind": kind, "styles": ";".join(styles),
                "sentence": sentence, "delta_gap": gap[0], "gap_ci_low": gap[1],
                "gap_ci_high": gap[2]}

    def _pooled_words(self, p: pd.Series | None, p_driver: bool, p_up: bool) -> str:
        if p_driver:
            return f"pooled, {_say_side(p_up, self.label)} looks better"
        if p is None or not np.isfinite(p["cliffs_delta"]):
            return "pooled, not profiled"
        return f"pooled, {_no_effect(p)}"

    def _pooled_gap(self, p: pd.Series, every: pd.DataFrame) -> tuple[float, float, float]:
        """The pooled delta minus the n-weighted mean of the styles' deltas, with its CI."""
        weights = every["n_lots"].to_numpy(dtype=float)
        deltas = every["cliffs_delta"].to_numpy(dtype=float)
        if weights.sum() <= 0:
            return np.nan, np.nan, np.nan
        stratified = float(np.sum(weights * deltas) / weights.sum())
        draws = [self.draws(s) for s in every["style"]]
        pooled_draws = self.draws(POOLED)
        if pooled_draws is None or any(d is None for d in draws):
            return p["cliffs_delta"] - stratified, np.nan, np.nan
        mixed = np.sum([w * d for w, d in zip(weights, draws)], axis=0) / weights.sum()
        return _gap(float(p["cliffs_delta"]), stratified, pooled_draws, mixed, self.level)

    def _pooled_hides(self, up: list[str], down: list[str], p: pd.Series, p_driver: bool,
                      p_up: bool, gap: tuple[float, float, float]) -> dict:
        """The row saying the pooled range hides or reverses the styles' drivers."""
        label = self.label
        side_text = "; ".join(
            [f"inside {_names(up)} higher {label} goes with higher grades"] * bool(up)
            + [f"inside {_names(down)} lower {label} does"] * bool(down))
        head = (f"Pooled over all styles {_no_effect(p)}" if not p_driver else
                f"Pooled over all styles {_say_side(p_up, label)} looks better")
        return self._row("pooled_misleading", [*up, *down, POOLED], gap,
                         f"{head}, while {side_text} "
                         f"({_stratified_words(p, gap, self.level)}).")


def _no_effect(row: pd.Series) -> str:
    """What a row without a clear effect shows: negligible, or too few lots to tell."""
    words = ("the effect is negligible" if is_negligible(row["ci_low"], row["ci_high"])
             else "there are too few lots to tell")
    return f"{words} (delta {row['cliffs_delta']:+.2f})"


def _flat_words(flat: pd.DataFrame) -> str:
    """``; in S4 the effect is negligible; in S6 there are too few lots to tell``."""
    if flat.empty:
        return ""
    small = [is_negligible(lo, hi) for lo, hi in zip(flat["ci_low"], flat["ci_high"])]
    negligible = [s for s, n in zip(flat["style"], small) if n]
    unclear = [s for s, n in zip(flat["style"], small) if not n]
    parts = ([f"in {_names(negligible)} the effect is negligible"] * bool(negligible)
             + [f"in {_names(unclear)} there are too few lots to tell"] * bool(unclear))
    return "; " + "; ".join(parts)


def _quietest(flat: pd.DataFrame) -> pd.Series:
    """The style without a clear effect to set against a driver: negligible first, then the
    delta closest to 0."""
    order = flat.assign(
        _neg=[not is_negligible(lo, hi) for lo, hi in zip(flat["ci_low"], flat["ci_high"])],
        _abs=flat["cliffs_delta"].abs()).sort_values(["_neg", "_abs"], kind="stable")
    return order.iloc[0]


def _pair(a: pd.Series, b: pd.Series, gap: tuple[float, float, float], level: float) -> str:
    return (f"delta {a['cliffs_delta']:+.2f} in {a['style']}, {b['cliffs_delta']:+.2f} in "
            f"{b['style']}: gap {gap[0]:+.2f}, {100 * level:g} % CI {gap[1]:+.2f} to "
            f"{gap[2]:+.2f}")


def _stratified_words(p: pd.Series, gap: tuple[float, float, float], level: float) -> str:
    return (f"pooled delta {p['cliffs_delta']:+.2f}, size-weighted within-style delta "
            f"{p['cliffs_delta'] - gap[0]:+.2f}: gap {gap[0]:+.2f}, {100 * level:g} % CI "
            f"{gap[1]:+.2f} to {gap[2]:+.2f}")
