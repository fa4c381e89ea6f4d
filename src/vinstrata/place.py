"""Placing new lots against the styles of a fitted model.

:func:`place_lots` takes new lots through the same front door as training
(ingest, units, derived analytes, validation; rejected rows keep their place)
and, per used lot:

* its clustering-space position: the membership-weighted mean of its nearest
  training lots' positions, the way UMAP starts new points
  (:func:`vinstrata.embed.interpolate`); the same for its place on the 2-D map;
* its style and membership strength from HDBSCAN's approximate prediction
  against the stored model (rebuilt deterministically), or ``unassigned``
  with its nearest style (soft membership);
* its outlier score, the same as the segmentation's (:mod:`vinstrata.typicality`,
  judged in the scaled chemistry); ``atypical`` when the score exceeds the
  training lots' ``place.atypical_percentile`` (95th) percentile, or when the
  lot fits no style (score above ``segment.outlier_cutoff``: unassigned);
* its 5 nearest historical lots in the clustering space;
* per analyte, its robust z against its style's median and IQR and its
  percentile inside the style;
* flags: an analyte off its style (|robust z| above ``place.z_flag``), on the
  losing side of one of its style's driver cuts, outside its style's target
  window, and the screening flags of :mod:`vinstrata.limits`;
* an indicative band: the share of its nearest historical lots of the same
  style in each grade band, an indication from neighbours, not a forecast.

A file whose analytes do not match the model is refused with one line naming
the missing and the unexpected columns; so is one whose values sit a factor
of 20 or more away from the model's on most lots (another unit).
"""

from __future__ import annotations

import textwrap
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from vinstrata import embed
from vinstrata.analytes import normalise_name, split_unit
from vinstrata.bands import lot_bands
from vinstrata.config import Config
from vinstrata.errors import InputError
from vinstrata.ingest import RawTable
from vinstrata.limits import CAUTION, Flag, normalise_colour, screen
from vinstrata.lots import USED, LotTable, observed
from vinstrata.model import UNASSIGNED, StyleModel
from vinstrata.profile import Profiles
from vinstrata.progress import Reporter
from vinstrata.segment import rebuild_clusterer, scale_chemistry, style_shapes
from vinstrata.units import normalise_unit
from vinstrata.validate import header_index, numeric_columns

PLACEMENT_COLUMNS = ("lot_id", "status", "style", "style_name", "membership", "atypical",
                     "outlier_score", "nearest_lots", "indicative_band", "share_top", "flags")
INDICATION = "indication from the nearest historical lots of the style, not a forecast"
UNIT_FACTOR = 20.0  # a median this many times off the model's suggests another unit


@dataclass(frozen=True)
class Placements:
    """Everything placing produces, as plain DataFrames.

    Attributes
    ----------
    lots : DataFrame
        ``placements.csv``: one row per input row (contract columns, then the
        passthrough columns, then ``trusted``).
    details : DataFrame
        Per used lot: map position, nearest style, band shares, flags in words.
    analytes : DataFrame
        Per used lot and analyte: value, style median, robust z, percentile,
        cut, target window and flag.
    neighbours : DataFrame
        Per used lot its nearest historical lots: rank, lot, style, grade, distance.
    """

    lots: pd.DataFrame
    details: pd.DataFrame
    analytes: pd.DataFrame
    neighbours: pd.DataFrame


# --------------------------------------------------------------------------- matching the model


def check_columns(raw: RawTable, model: StyleModel, config: Config) -> None:
    """Refuse a file whose analyte columns differ from the model's, in one line."""
    headers = list(raw.cells.columns)
    keys = set(header_index(headers))
    wanted = [s for s in model.specs if not s.derived]
    missing = [s.name for s in wanted if normalise_name(s.name) not in keys
               and normalise_name(split_unit(s.column)[0]) not in keys]
    if not missing:
        return
    known = {normalise_name(s.name) for s in model.specs} | {
        normalise_name(split_unit(s.column)[0]) for s in model.specs}
    cols = config.columns
    others = {normalise_name(n) for n in (cols.lot_id, cols.grade, *cols.passthrough,
                                          config.limits.colour_column) if n}
    taken = {h for h in headers if normalise_name(split_unit(h)[0]) in known | others
             or normalise_name(h) in known}
    unexpected = numeric_columns(raw, taken, config.ingest.decimal)
    extra = f"; unexpected: {', '.join(unexpected)}" if unexpected else ""
    raise InputError(f"{raw.source.name}: analytes do not match the model: missing "
                     f"{', '.join(missing)}{extra}")


def check_units(table: LotTable, model: StyleModel) -> None:
    """Refuse analytes in another canonical unit, or values a factor of 20 off the model's."""
    theirs = {s.name: s for s in table.specs}
    used = table.used
    for spec in model.specs:
        new = theirs.get(spec.name)
        if new is None:
            raise InputError(f"{table.source.name}: analyte '{spec.name}' of the model is missing")
        if normalise_unit(new.unit) != normalise_unit(spec.unit):
            raise InputError(
                f"{table.source.name}: analyte '{spec.name}' is in '{new.unit}' here but in "
                f"'{spec.unit}' in the model, and no conversion is known; give its unit "
                f"in [units]")
        x = table.values.loc[used, spec.name].to_numpy(dtype=float)
        x = x[np.isfinite(x) & (x > 0)]
        ref = model.values[spec.name].to_numpy(dtype=float)
        ref = ref[np.isfinite(ref) & (ref > 0)]
        if x.size < 5 or ref.size < 5:
            continue
        ratio = float(np.median(x) / np.median(ref))
        lo, hi = np.quantile(ref, [0.001, 0.999])
        outside = float(((x < lo) | (x > hi)).mean())
        if (ratio > UNIT_FACTOR or ratio < 1 / UNIT_FACTOR) and outside >= 0.8:
            raise InputError(
                f"{table.source.name}: analyte '{spec.name}' looks like another unit: its median "
                f"{np.median(x):.4g} is {ratio:.3g} times the model's {np.median(ref):.4g} "
                f"{spec.unit}; give its unit in [units]")


# --------------------------------------------------------------------------- placing


def place_lots(table: LotTable, model: StyleModel, profiles: Profiles | None = None,
               config: Config | None = None, reporter: Reporter | None = None) -> Placements:
    """Place the used lots of ``table`` against ``model``.

    Parameters
    ----------
    table : LotTable
        New lots, validated with ``require_grade=False``.
    model : StyleModel
    profiles : Profiles, optional
        The model's profiles, for driver-cut and target-window flags; without
        them only off-style and screening flags are given.
    config : Config, optional
        Place and limits settings; the model's config when None.
    reporter : Reporter, optional

    Returns
    -------
    Placements
    """
    config = config or model.config
    rep = reporter or Reporter()
    check_units(table, model)
    used = table.used
    idx = np.flatnonzero(used)
    n = idx.size
    values = table.values.loc[used].reset_index(drop=True)
    flags = table.flags.loc[used].reset_index(drop=True)
    names = model.style_names()
    style_ids = model.style_ids
    base = _empty_lots(table, model)
    if n == 0:
        rep.warn(f"{table.source.name}: no usable new lots")
        return Placements(base, pd.DataFrame(), pd.DataFrame(), pd.DataFrame())

    scaled = scale_chemistry(values[list(model.analytes)], flags, model.scaler, config,
                             reference=model.scaled)
    k = min(int(model.params["neighbours"]), len(model.lots))
    neighbours = embed.nearest(model.scaled, k, query=scaled)
    if model.params["space"] == "umap":
        space = embed.interpolate(neighbours, model.space)
    else:
        space = scaled.astype(np.float32)
    map_xy = embed.interpolate(neighbours, model.map2d)

    # style and strength as HDBSCAN predicts them; a lot without a style gets its
    # nearest one and its soft membership to it, as in the segmentation
    style_index, strength, clusterer = _predict(model, space)
    nearest_index = style_index.copy()
    loose = np.flatnonzero(style_index < 0)
    if loose.size:
        soft = _soft(model, clusterer, space[loose])
        nearest_index[loose] = np.argmax(soft, axis=1)
        strength[loose] = soft[np.arange(loose.size), nearest_index[loose]]
    shapes = style_shapes(model)
    scores = np.empty(n)
    for s, sid in enumerate(style_ids):
        mask = nearest_index == s
        if mask.any():
            scores[mask] = shapes[sid].score(scaled[mask])
    fits_none = scores > float(model.outliers["cutoff"])
    turned = np.flatnonzero(fits_none & (style_index >= 0))
    if turned.size:  # styled by HDBSCAN but unlike its style's chemistry: unassigned too
        soft = _soft(model, clusterer, space[turned])
        strength[turned] = soft[np.arange(turned.size), nearest_index[turned]]
    style_index = np.where(fits_none, -1, style_index)
    # the atypical line is the training lots' own percentile, under this run's config
    line = float(np.percentile(model.lots["outlier_score"], config.place.atypical_percentile))
    atypical = (scores > line) | (style_index < 0)
    style = np.array([style_ids[s] if s >= 0 else UNASSIGNED for s in style_index], dtype=object)
    home = np.array([style_ids[s] for s in nearest_index], dtype=object)

    near = _nearest_lots(model, space, config.place.neighbours)
    shares, counts = _band_shares(model, space, home, config)
    per_analyte, analyte_flags = _analyte_view(values, model, profiles, home, config)
    colours = _colours(table, config, used)
    screening = screen(values, table.specs, colours, config.limits, config.derived.so2_pka)

    lot_ids = table.ids.loc[used, "lot_id"].astype(str).to_numpy()
    labels = config.bands.labels
    lot_flags = []
    for i in range(n):
        mine = analyte_flags[i]
        if fits_none[i]:
            # cuts and windows of a style the lot does not belong to say nothing
            mine = [f for f in mine if f.token.startswith("off_style")]
            head = [Flag("fits_no_style", f"fits no style (outlier score {scores[i]:.1f}; "
                                          f"nearest {home[i]})", f"no style {scores[i]:.1f}")]
        elif atypical[i]:
            head = [Flag("atypical", f"atypical of {home[i]} (outlier score {scores[i]:.1f})",
                         f"atypical {scores[i]:.1f}")]
        else:
            head = []
        lot_flags.append(head + mine + screening[i])
    flag_tokens = [";".join(f.token for f in fl) for fl in lot_flags]
    flag_words = ["; ".join(f.words for f in fl) for fl in lot_flags]
    flag_short = [short_flags(fl) for fl in lot_flags]
    has_bands = np.isfinite(shares).all(axis=1)
    indicative = np.where(has_bands, np.array(labels, dtype=object)[np.argmax(
        np.nan_to_num(shares, nan=-1.0), axis=1)], "")
    trusted = dict(zip(model.styles["style"], model.styles["trusted"]))

    out = base
    out.loc[used, "style"] = style
    out.loc[used, "style_name"] = [names.get(s, "") for s in style]
    out.loc[used, "membership"] = np.round(strength, 6)
    out.loc[used, "atypical"] = atypical
    out.loc[used, "outlier_score"] = np.round(scores, 6)
    out.loc[used, "nearest_lots"] = _join_near(near, n)
    out.loc[used, "indicative_band"] = indicative
    out.loc[used, "share_top"] = np.round(shares[:, -1], 6)
    out.loc[used, "flags"] = flag_tokens
    out.loc[used, "trusted"] = [bool(trusted[h]) for h in home]

    details = pd.DataFrame({
        "lot_id": lot_ids, "style": style, "nearest_style": home,
        "map_x": map_xy[:, 0].astype(float), "map_y": map_xy[:, 1].astype(float),
        "band_neighbours": counts,
        **{f"share_{label}": np.round(shares[:, j], 6) for j, label in enumerate(labels)},
        "flags_text": flag_words, "flags_short": flag_short,
    })
    per_analyte.insert(0, "lot_id", np.repeat(lot_ids, len(model.specs)))  # sorted by lot
    near["lot_id"] = lot_ids[near["lot_id"].to_numpy(dtype=int)]
    return Placements(lots=out, details=details, analytes=per_analyte, neighbours=near)


def _join_near(near: pd.DataFrame, n: int) -> list[str]:
    """The neighbour ids of each lot, ';'-separated (``near`` is lot-major, rank-minor)."""
    if n == 0:
        return []
    ids = near["neighbour_lot"].astype(str).to_numpy().reshape(n, -1)
    return [";".join(row) for row in ids]


def _empty_lots(table: LotTable, model: StyleModel) -> pd.DataFrame:
    out = pd.DataFrame({"lot_id": table.ids["lot_id"].astype(str),
                        "status": table.ids["status"]})
    for column in PLACEMENT_COLUMNS[2:]:
        out[column] = pd.Series([None] * table.n_rows, dtype=object)
    for column in table.extra.columns:
        out[column] = table.extra[column].to_numpy()
    out["trusted"] = pd.Series([None] * table.n_rows, dtype=object)
    return out


def _predict(model: StyleModel, space: np.ndarray) -> tuple[np.ndarray, np.ndarray, object]:
    """Style index (-1 for HDBSCAN noise) and membership strength per lot, and the clusterer."""
    n = len(space)
    if model.params.get("one_style"):
        return np.zeros(n, dtype=int), np.ones(n), None
    import hdbscan

    clusterer = rebuild_clusterer(model)
    position = {sid: s for s, sid in enumerate(model.style_ids)}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        clusters, strength = hdbscan.approximate_predict(clusterer, space)
    cluster_styles = model.params["cluster_styles"]
    style_index = np.array([position.get(cluster_styles[c], -1) if c >= 0 else -1
                            for c in clusters], dtype=int)
    return style_index, np.asarray(strength, dtype=float).copy(), clusterer


def _soft(model: StyleModel, clusterer: object, points: np.ndarray) -> np.ndarray:
    """Soft membership of lots to every style (rows sum to 1), as segmentation gives it."""
    n_styles = len(model.style_ids)
    if clusterer is None or not len(points):
        return np.full((len(points), n_styles), 1.0 / n_styles)
    import hdbscan

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        vectors = np.asarray(hdbscan.membership_vector(clusterer, points), dtype=float)
    vectors = vectors.reshape(len(points), -1)
    position = {sid: s for s, sid in enumerate(model.style_ids)}
    soft = np.zeros((len(points), n_styles))
    for c, sid in enumerate(model.params["cluster_styles"]):
        if sid in position:
            soft[:, position[sid]] += vectors[:, c]
    return soft / np.maximum(soft.sum(axis=1, keepdims=True), 1e-12)


def _nearest_lots(model: StyleModel, space: np.ndarray, k: int) -> pd.DataFrame:
    found = embed.nearest(model.space, k, query=space)
    lots = model.lots
    n, kk = found.indices.shape
    flat = found.indices.ravel()
    return pd.DataFrame({
        "lot_id": np.repeat(np.arange(n), kk), "rank": np.tile(np.arange(1, kk + 1), n),
        "neighbour_lot": lots["lot_id"].to_numpy()[flat],
        "style": lots["style"].to_numpy()[flat], "grade": lots["grade"].to_numpy()[flat],
        "distance": np.round(found.distances.ravel(), 6),
    })


def _band_shares(model: StyleModel, space: np.ndarray, home: np.ndarray, config: Config
                 ) -> tuple[np.ndarray, np.ndarray]:
    """Share of each grade band among the nearest historical lots of the same style."""
    lots = model.lots
    n_bands = len(config.bands.labels)
    shares = np.full((len(space), n_bands), np.nan)
    counts = np.zeros(len(space), dtype=int)
    grades = lots["grade"].to_numpy(dtype=float)
    if not np.isfinite(grades).any():
        return shares, counts
    styles, bands = lot_bands(grades, lots["style"].to_numpy(dtype=object),
                              lots["nearest_style"].to_numpy(dtype=object), config.bands,
                              config.profile.include_unassigned)
    for sid in np.unique(home):
        pool = np.flatnonzero((styles == sid) & (bands >= 0))
        mine = np.flatnonzero(home == sid)
        if pool.size == 0:
            continue
        k = min(config.place.band_neighbours, pool.size)
        found = embed.nearest(model.space[pool], k, query=space[mine])
        picked = bands[pool[found.indices]]
        for j in range(n_bands):
            shares[mine, j] = (picked == j).mean(axis=1)
        counts[mine] = k
    return shares, counts


def _analyte_view(values: pd.DataFrame, model: StyleModel, profiles: Profiles | None,
                  home: np.ndarray, config: Config) -> tuple[pd.DataFrame, list[list]]:
    """Per lot and analyte: robust z, percentile, cut and window; and the analyte flags."""
    stats_ = model.style_stats.set_index(["style", "analyte"])
    thresholds = (profiles.thresholds.set_index(["style", "analyte"])
                  if profiles is not None else None)
    train_style = model.lots["style"].to_numpy(dtype=object)
    trusted = dict(zip(model.styles["style"], model.styles["trusted"]))
    zmax = config.place.z_flag
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
            st = stats_.loc[(sid, spec.name)]
            iqr = float(st["q75"] - st["q25"])
            iqr = iqr if iqr > 0 else (range_iqr if range_iqr > 0 else 1.0)
            ref = np.sort(train[train_style == sid])
            ref = ref[np.isfinite(ref)]
            v = x[mine]
            known = np.isfinite(v)
            z = (v - st["median"]) / iqr
            pct = (100.0 * (np.searchsorted(ref, v, "left") + np.searchsorted(ref, v, "right"))
                   / (2 * ref.size)) if ref.size else np.full(v.size, np.nan)
            pct = np.where(known, pct, np.nan)
            off = known & (np.abs(z) > zmax)
            direction, cut, low, high = "", np.nan, np.nan, np.nan
            if thresholds is not None and (sid, spec.name) in thresholds.index:
                t = thresholds.loc[(sid, spec.name)]
                direction = t["direction"] if isinstance(t["direction"], str) else ""
                cut, low, high = t["cut"], t["target_low"], t["target_high"]
            judged = known & bool(trusted.get(sid, False))
            if direction == "higher_better":
                losing = judged & (v < cut)
            elif direction == "lower_better":
                losing = judged & (v > cut)
            else:
                losing = np.zeros(v.size, dtype=bool)
            outside = judged & np.isfinite(low) & ((v < low) | (v > high))
            side = "below" if direction == "higher_better" else "above"
            for i in np.flatnonzero(off):
                flags[mine[i]].append(Flag(f"off_style:{spec.name}",
                                           f"{spec.label} {v[i]:.4g} {spec.unit} far from {sid} "
                                           f"(robust z {z[i]:+.1f})",
                                           f"{spec.label} z{z[i]:+.1f}"))
            for i in np.flatnonzero(losing):
                flags[mine[i]].append(Flag(f"{side}_cut:{spec.name}",
                                           f"{spec.label} {v[i]:.4g} {side} the {sid} cut "
                                           f"{cut:.4g} {spec.unit}", spec.label))
            for i in np.flatnonzero(outside):
                flags[mine[i]].append(Flag(f"outside_target:{spec.name}",
                                           f"{spec.label} {v[i]:.4g} outside the {sid} target "
                                           f"{low:.4g}-{high:.4g} {spec.unit}", spec.label))
            flag = np.where(off, "off_style", np.where(
                losing, "losing_side", np.where(outside, "outside_target", "")))
            parts.append(pd.DataFrame({
                "_i": mine, "_o": j, "analyte": spec.name, "value": v, "unit": spec.unit,
                "style": sid, "style_median": st["median"], "robust_z": np.round(z, 6),
                "percentile": np.round(pct, 4), "direction": direction, "cut": cut,
                "target_low": low, "target_high": high, "flag": flag,
            }))
    frame = pd.concat(parts, ignore_index=True).sort_values(["_i", "_o"], kind="stable")
    return frame.drop(columns=["_i", "_o"]).reset_index(drop=True), flags


def _colours(table: LotTable, config: Config, used: np.ndarray) -> np.ndarray:
    n = int(used.sum())
    column = config.limits.colour_column
    if column and column in table.extra.columns:
        colours = [normalise_colour(v) for v in table.extra.loc[used, column]]
        fallback = config.limits.default_colour
        return np.array([c or fallback for c in colours], dtype=object)
    return np.full(n, config.limits.default_colour, dtype=object)


def short_flags(flags: list[Flag]) -> str:
    """A lot's flags in a few words for tables: typicality, off analytes, limits, counts."""
    parts = []
    kinds = {f.token.split(":")[0] for f in flags}
    for f in flags:
        if f.token in ("fits_no_style", "atypical"):
            parts.append(f.short)
    off = [f.short for f in flags if f.token.startswith("off_style")]
    if off:
        parts.append("off: " + ", ".join(off[:3]) + (" ..." if len(off) > 3 else ""))
    limits = [f.short for f in flags if f.token in ("va_above_limit", "total_so2_above_limit",
                                                    "molecular_so2_low")]
    parts += limits
    cuts = [f.short for f in flags if f.token.startswith(("below_cut", "above_cut"))]
    if cuts:
        parts.append("misses cut: " + ", ".join(cuts[:3]) + (" ..." if len(cuts) > 3 else ""))
    windows = sum(f.token.startswith("outside_target") for f in flags)
    if windows:
        parts.append(f"{windows} outside target")
    if not parts and "sulfite_statement" in kinds:
        return "-"
    return " | ".join(parts) or "-"


def describe(placements: Placements, width: int = 100, limit: int = 60) -> str:
    """The placements as a terminal table readable at ``width`` columns."""
    lots = placements.lots
    used = lots[lots["status"] == USED]
    details = placements.details.set_index("lot_id") if len(placements.details) else None
    head_row = f"{'lot':<13} {'style':<10} {'memb':>4} {'atyp':<4} {'band':<10} flags"
    lines = [head_row, "-" * width]
    for row in used.head(limit).itertuples():
        words = details.loc[row.lot_id, "flags_short"] if details is not None else "-"
        style = row.style if row.style != UNASSIGNED else "no style"
        band = (f"{row.indicative_band[:6]} {row.share_top:.0%}" if row.indicative_band
                else "-")
        mark = "YES" if row.atypical else ""
        head = f"{str(row.lot_id)[:13]:<13} {style:<10} {row.membership:>4.2f} {mark:<4} " \
               f"{band[:10]:<10} "
        room = width - len(head)
        chunks, line = [], ""
        for word in str(words).split(" "):
            if line and len(line) + 1 + len(word) > room:
                chunks.append(line)
                line = word
            else:
                line = f"{line} {word}".strip()
        chunks.append(line)
        lines.append(head + chunks[0])
        lines += [" " * len(head) + c for c in chunks[1:]]
    if len(used) > limit:
        lines.append(f"... {len(used) - limit} more lots in placements.csv")
    rejected = lots[lots["status"] != USED]
    lines.append("-" * width)
    n_label = int(used["flags"].str.contains("sulfite_statement", regex=False).sum())
    lines.append(f"{len(used)} lots placed, {int(used['atypical'].astype(bool).sum())} atypical, "
                 f"{len(rejected)} rejected; {n_label} need a sulfite statement on the label.")
    for row in rejected.head(10).itertuples():
        lines.append(f"  rejected: {row.lot_id or '(no id)'}: {row.status}")
    notes = [f"band: the band most of its neighbours got, and the share of them in the top "
             f"band ({INDICATION}).", CAUTION]
    for note in notes:
        lines += textwrap.wrap(note, width)
    return "\n".join(lines)
