"""Styles that keep their ids and names from one fit to the next: matching to a previous model.

A refit of next vintage's lots (``vinstrata segment LOTS --previous OLD/model``)
numbers its styles afresh, largest first. :func:`match_styles` matches them to
the previous model's styles instead:

1. both fits' lots are put in the **previous model's** scaled chemistry (its
   fitted transform and robust scaling, :mod:`vinstrata.segment.transform`),
   so that the two sets of styles are measured with one ruler;
2. each style's centre is the coordinate-wise median of its lots there, and its
   spread the median distance of its lots to that centre (a robust radius);
3. the cost of matching previous style *i* to new style *j* is the distance
   between their centres in units of their mean spread,
   ``|c_i - c_j| / ((s_i + s_j) / 2)``; the pairs come from one optimal
   assignment over all styles (Hungarian method,
   :func:`scipy.optimize.linear_sum_assignment`), and a pair is kept only when
   its cost is at most :data:`MATCH_LIMIT` (0.5): the two centres lie closer to
   each other than half the distance of a typical lot of either style to its
   own centre. On two vintages of the demo range (seeds 7 and 8) the styles
   drawn from the same recipe lie 0.07-0.17 apart and the nearest other pair
   1.1, so the limit leaves room for a style drifting between vintages without
   taking a neighbouring style for it.

A matched style takes the previous id and the name its user gave it; a new
style gets the next free id after the largest the previous model knew of; a
previous style without a match has vanished. The match is recorded in the
model (``previous`` in ``model.json``) and written as ``previous.csv``.

:func:`compare_models` gathers what the briefing page "since the previous
model" shows: sizes then and now, the shift of each style's analyte medians
with bootstrap intervals, drivers that appeared or vanished.
"""

from __future__ import annotations

import dataclasses
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from vinstrata.errors import InputError
from vinstrata.read.lots import UNASSIGNED, observed
from vinstrata.segment.model import StyleModel
from vinstrata.segment.names import apply_user_names
from vinstrata.segment.transform import scale_chemistry

if TYPE_CHECKING:
    from vinstrata.profile.drivers import Profiles

MATCH_LIMIT = 0.5  # most centre distance, in units of the two styles' mean spread, of a match
SHIFT_BOOTSTRAP = 1000  # resamples of each median shift's interval
SHIFT_LEVEL = 0.95  # level of those intervals
KEPT, NEW, VANISHED = "kept", "new", "vanished"
PREVIOUS_COLUMNS = ("previous_style", "previous_name", "style", "style_name", "status",
                    "distance", "n_previous", "n_lots")

_ID = re.compile(r"^S(\d+)$")


def style_centres(scaled: np.ndarray, style_index: np.ndarray, n_styles: int
                  ) -> tuple[np.ndarray, np.ndarray]:
    """Each style's centre (coordinate-wise median) and spread (median distance to it).

    Parameters
    ----------
    scaled : ndarray, shape (n_lots, n_analytes)
    style_index : ndarray of int
        Each lot's style, -1 for unassigned (left out).
    n_styles : int

    Returns
    -------
    centres : ndarray, shape (n_styles, n_analytes)
    spreads : ndarray, shape (n_styles,)
        NaN for a style without lots.
    """
    centres = np.full((n_styles, scaled.shape[1]), np.nan)
    spreads = np.full(n_styles, np.nan)
    for s in range(n_styles):
        rows = scaled[style_index == s]
        if len(rows):
            centres[s] = np.median(rows, axis=0)
            spreads[s] = float(np.median(np.linalg.norm(rows - centres[s], axis=1)))
    return centres, spreads


def match_cost(old_centres: np.ndarray, old_spreads: np.ndarray, new_centres: np.ndarray,
               new_spreads: np.ndarray) -> np.ndarray:
    """Centre distances in units of the two styles' mean spread (previous x new styles)."""
    gaps = np.linalg.norm(old_centres[:, None, :] - new_centres[None, :, :], axis=2)
    scale = (old_spreads[:, None] + new_spreads[None, :]) / 2
    cost = gaps / np.maximum(scale, 1e-12)
    return np.where(np.isfinite(cost), cost, np.inf)


def _id_number(style: str) -> int:
    match = _ID.match(style)
    return int(match.group(1)) if match else 0


def _in_previous_space(new: StyleModel, old: StyleModel) -> np.ndarray:
    """The new fit's lots in the previous model's scaled chemistry."""
    names = {s.name for s in new.specs}
    missing = [a for a in old.analytes if a not in names]
    if missing:
        raise InputError(f"--previous: the previous model's analytes {', '.join(missing)} are "
                         "not among these lots'; match styles of fits on the same analytes")
    columns = list(old.analytes)
    return scale_chemistry(new.values[columns], new.flags[columns], old.scaler, old.config,
                           reference=old.scaled)


def match_styles(new: StyleModel, old: StyleModel, limit: float = MATCH_LIMIT
                 ) -> tuple[dict[str, str], pd.DataFrame]:
    """Match the styles of a new fit to those of a previous model.

    Parameters
    ----------
    new : StyleModel
        The new fit (its styles still numbered S1 ... largest first).
    old : StyleModel
        The previous model.
    limit : float
        Most cost of a kept match (see the module docstring).

    Returns
    -------
    ids : dict
        New fit's style id -> the id it takes.
    table : DataFrame
        One row per previous and per new style: ``previous_style, previous_name, style,
        status, distance, n_previous, n_lots`` (status ``kept``, ``new`` or
        ``vanished``), previous styles first in their order, then the new ones.

    Raises
    ------
    InputError
        The previous model's analytes are not all in the new lots.
    """
    from scipy.optimize import linear_sum_assignment

    scaled_new = _in_previous_space(new, old)
    old_ids, new_ids = old.style_ids, new.style_ids
    old_c, old_s = style_centres(old.scaled, old.lots["style_index"].to_numpy(dtype=int),
                                 len(old_ids))
    new_c, new_s = style_centres(scaled_new, new.lots["style_index"].to_numpy(dtype=int),
                                 len(new_ids))
    cost = match_cost(old_c, old_s, new_c, new_s)
    rows, cols = linear_sum_assignment(np.where(np.isfinite(cost), cost, 1e12))
    pairs = {int(j): (int(i), float(cost[i, j])) for i, j in zip(rows, cols)
             if cost[i, j] <= limit}
    largest = max([_id_number(s) for s in old_ids]
                  + [int(old.previous.get("largest_id", 0))] + [0])
    ids: dict[str, str] = {}
    for j, sid in enumerate(new_ids):  # new styles in size order take the next free ids
        if j in pairs:
            ids[sid] = old_ids[pairs[j][0]]
        else:
            largest += 1
            ids[sid] = f"S{largest}"
    old_n = dict(zip(old.styles["style"], old.styles["n_lots"].astype(int)))
    new_n = dict(zip(new.styles["style"], new.styles["n_lots"].astype(int)))
    old_names = old.style_names()
    matched = {i: (j, c) for j, (i, c) in pairs.items()}
    records = []
    for i, oid in enumerate(old_ids):
        j, distance = matched.get(i, (None, np.nan))
        records.append({
            "previous_style": oid, "previous_name": old_names.get(oid, ""),
            "style": ids[new_ids[j]] if j is not None else "",
            "status": KEPT if j is not None else VANISHED, "distance": round(distance, 6),
            "n_previous": old_n.get(oid, 0),
            "n_lots": new_n[new_ids[j]] if j is not None else 0,
        })
    for j, sid in enumerate(new_ids):
        if j not in pairs:
            records.append({"previous_style": "", "previous_name": "", "style": ids[sid],
                            "status": NEW, "distance": np.nan, "n_previous": 0,
                            "n_lots": new_n[sid]})
    return ids, pd.DataFrame(records, columns=[c for c in PREVIOUS_COLUMNS if c != "style_name"])


def rename_styles(model: StyleModel, ids: dict[str, str]) -> StyleModel:
    """The model with its style ids replaced (``ids``: current id -> new id), everywhere."""

    def swap(values: pd.Series) -> pd.Series:
        return values.map(lambda s: ids.get(s, s))

    styles = model.styles.copy()
    styles["style"] = swap(styles["style"])
    lots = model.lots.copy()
    lots["style"] = lots["style"].map(lambda s: s if s == UNASSIGNED else ids.get(s, s))
    lots["nearest_style"] = swap(lots["nearest_style"])
    stats = model.style_stats.copy()
    stats["style"] = swap(stats["style"])
    outliers = dict(model.outliers)
    outliers["shapes"] = {ids.get(s, s): shape for s, shape in model.outliers["shapes"].items()}
    params = dataclasses.replace(model.params, cluster_styles=tuple(
        ids.get(s, s) if s else s for s in model.params.cluster_styles))
    return dataclasses.replace(model, styles=styles, lots=lots, style_stats=stats,
                               outliers=outliers, params=params)


def match_previous(new: StyleModel, old: StyleModel, limit: float = MATCH_LIMIT
                   ) -> StyleModel:
    """The new fit with its styles matched to the previous model's (see the module docstring).

    Matched styles take the previous ids and the names users gave them; the
    match is kept in :attr:`StyleModel.previous` (plain data: the previous
    model's fingerprint, its lot file, the limit, the largest id known and the
    match table).

    Parameters
    ----------
    new, old : StyleModel
    limit : float

    Returns
    -------
    StyleModel
    """
    ids, table = match_styles(new, old, limit)
    renamed = rename_styles(new, ids)
    kept = table[table["status"] == KEPT]
    names = {row.style: old.user_names[row.previous_style] for row in kept.itertuples()
             if row.previous_style in old.user_names}
    largest = max([_id_number(s) for s in ids.values()]
                  + [_id_number(s) for s in old.style_ids]
                  + [int(old.previous.get("largest_id", 0))])
    record = {
        "fingerprint": old.fingerprint, "source": old.source.name,
        "sha256": old.source.sha256, "limit": float(limit), "largest_id": int(largest),
        "matches": [{k: (None if isinstance(v, float) and v != v else v)
                     for k, v in row.items()} for row in table.to_dict("records")],
    }
    return dataclasses.replace(renamed, user_names=names,
                               styles=apply_user_names(renamed.styles, names), previous=record)


def previous_table(model: StyleModel) -> pd.DataFrame | None:
    """``previous.csv``: the match to the previous model, with today's style names.

    Columns ``previous_style, previous_name, style, style_name, status, distance,
    n_previous, n_lots``; None for a model not matched to a previous one.
    """
    matches = model.previous.get("matches")
    if not matches:
        return None
    table = pd.DataFrame(matches)
    names = model.style_names()
    table["style_name"] = [names.get(s, "") for s in table["style"]]
    table["distance"] = pd.to_numeric(table["distance"], errors="coerce").astype(float)
    return table[list(PREVIOUS_COLUMNS)]


def check_previous(model: StyleModel, old: StyleModel) -> None:
    """Refuse to compare ``model`` with a model its styles were not matched to."""
    record = model.previous
    if not record:
        raise InputError("--previous: this model was not segmented with --previous, so its "
                         "style ids say nothing about the previous model's; segment with "
                         "--previous first")
    if record.get("fingerprint") and old.fingerprint and record["fingerprint"] != old.fingerprint:
        raise InputError(f"--previous: this model's styles were matched to another model "
                         f"(of {record.get('source', '?')}, fingerprint "
                         f"{str(record['fingerprint'])[:12]}), not to this one "
                         f"({old.fingerprint[:12]})")


# --------------------------------------------------------------------------- comparing


@dataclass(frozen=True)
class Comparison:
    """What changed since the previous model, for the briefing page.

    Attributes
    ----------
    styles : DataFrame
        The match (:func:`previous_table`).
    shifts : DataFrame
        Per kept style and analyte: ``style, analyte, median_previous, median, shift,
        ci_low, ci_high, iqr_previous, n_previous, n_lots``.
    drivers : DataFrame
        ``style, analyte, change`` (``appeared`` or ``vanished``) for kept styles;
        empty when either model has no grades.
    level : float
        Level of the intervals.
    """

    styles: pd.DataFrame
    shifts: pd.DataFrame
    drivers: pd.DataFrame
    level: float = SHIFT_LEVEL


def _style_values(model: StyleModel, style: str, analyte: str) -> np.ndarray:
    rows = (model.lots["style"] == style).to_numpy()
    x = observed(model.values, model.flags, analyte)[rows]
    return x[np.isfinite(x)]


def median_shift(before: np.ndarray, after: np.ndarray, rng: np.random.Generator,
                 resamples: int = SHIFT_BOOTSTRAP, level: float = SHIFT_LEVEL
                 ) -> tuple[float, float, float]:
    """The shift of the median (after - before) and its percentile bootstrap interval.

    Each group is resampled on its own (lots of two vintages are independent).

    Returns
    -------
    shift, low, high : float
        NaN without values on either side.
    """
    if not before.size or not after.size:
        return np.nan, np.nan, np.nan
    shift = float(np.median(after) - np.median(before))
    a = np.median(after[rng.integers(0, after.size, (resamples, after.size))], axis=1)
    b = np.median(before[rng.integers(0, before.size, (resamples, before.size))], axis=1)
    tail = (1 - level) / 2
    low, high = np.quantile(a - b, [tail, 1 - tail])
    return shift, float(low), float(high)


def _driver_sets(profiles: Profiles | None) -> set[tuple[str, str]] | None:
    if profiles is None or profiles.drivers.empty:
        return None
    d = profiles.drivers
    return {(str(s), str(a)) for s, a in d.loc[d["is_driver"].astype(bool), ["style", "analyte"]]
            .itertuples(index=False)}


def compare_models(model: StyleModel, old: StyleModel, profiles: Profiles | None = None,
                   old_profiles: Profiles | None = None, resamples: int = SHIFT_BOOTSTRAP,
                   level: float = SHIFT_LEVEL) -> Comparison:
    """What changed between ``old`` and ``model``, whose styles were matched to it.

    Parameters
    ----------
    model : StyleModel
        Segmented with ``--previous`` (:func:`match_previous`).
    old : StyleModel
        That previous model.
    profiles, old_profiles : Profiles, optional
        Both models' profiles, for the drivers that appeared or vanished.
    resamples : int
        Bootstrap resamples of each median shift (seeded with the model's seed).
    level : float

    Returns
    -------
    Comparison

    Raises
    ------
    InputError
        ``model`` was not matched to ``old`` (:func:`check_previous`).
    """
    check_previous(model, old)
    styles = previous_table(model)
    assert styles is not None  # check_previous saw the record
    kept = styles[styles["status"] == KEPT]
    rng = np.random.default_rng(int(model.config.seed))
    common = [s.name for s in model.specs if s.name in {o.name for o in old.specs}]
    rows = []
    for row in kept.itertuples():
        for analyte in common:
            before = _style_values(old, row.previous_style, analyte)
            after = _style_values(model, row.style, analyte)
            shift, low, high = median_shift(before, after, rng, resamples, level)
            iqr = float(np.subtract(*np.quantile(before, [0.75, 0.25]))) if before.size else np.nan
            rows.append({
                "style": row.style, "analyte": analyte,
                "median_previous": float(np.median(before)) if before.size else np.nan,
                "median": float(np.median(after)) if after.size else np.nan,
                "shift": shift, "ci_low": low, "ci_high": high, "iqr_previous": iqr,
                "n_previous": int(before.size), "n_lots": int(after.size),
            })
    shifts = pd.DataFrame(rows, columns=["style", "analyte", "median_previous", "median",
                                         "shift", "ci_low", "ci_high", "iqr_previous",
                                         "n_previous", "n_lots"])
    now, then = _driver_sets(profiles), _driver_sets(old_profiles)
    changes = []
    if now is not None and then is not None:
        for row in kept.itertuples():
            for analyte in common:
                was = (row.previous_style, analyte) in then
                is_ = (row.style, analyte) in now
                if was != is_:
                    changes.append({"style": row.style, "analyte": analyte,
                                    "change": "appeared" if is_ else "vanished"})
    drivers = pd.DataFrame(changes, columns=["style", "analyte", "change"])
    return Comparison(styles=styles, shifts=shifts, drivers=drivers, level=level)


def match_lines(model: StyleModel) -> list[tuple[str, str]]:
    """The match as (kind, text) pairs for the terminal: kind ``line`` or ``warn``."""
    table = previous_table(model)
    if table is None:
        return []
    out: list[tuple[str, str]] = []
    for row in table.itertuples():
        if row.status == KEPT:
            out.append(("line", f"  {row.style} kept from the previous model ({row.n_previous} "
                                f"-> {row.n_lots} lots; distance {row.distance:.2f})"))
        elif row.status == NEW:
            out.append(("line", f"  {row.style} is new ({row.n_lots} lots; no previous style "
                                f"within {MATCH_LIMIT:g} spreads)"))
        else:
            out.append(("warn", f"previous style {row.previous_style} ({row.previous_name}, "
                                f"{row.n_previous} lots) has no match among the new styles: "
                                "vanished (see previous.csv)"))
    return out

