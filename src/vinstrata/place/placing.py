"""Placing new lots against the styles of a fitted model.

:func:`place_lots` takes new lots through the same front door as training
(ingest, units, derived analytes, validation; rejected rows keep their place)
and, per used lot:

* its clustering-space position: the membership-weighted mean of its nearest
  training lots' positions, the way UMAP starts new points
  (:func:`vinstrata.segment.embed.interpolate`); the same for its place on the 2-D map;
* its style and membership strength from HDBSCAN's approximate prediction
  against the stored model (rebuilt deterministically), or ``unassigned``
  with its nearest style (soft membership);
* its outlier score, the same as the segmentation's (:mod:`vinstrata.segment.typicality`,
  judged in the scaled chemistry); ``atypical`` when the score exceeds the
  training lots' ``place.atypical_percentile`` (95th) percentile, or when the
  lot fits no style (score above ``segment.outlier_cutoff``: unassigned);
* its 5 nearest historical lots in the clustering space;
* per analyte, its robust z against its style's median and IQR and its
  percentile inside the style;
* flags: an analyte off its style (|robust z| above ``place.z_flag``), on the
  losing side of one of its style's driver cuts, outside its style's target
  window, and the screening flags of :mod:`vinstrata.place.limits`;
* an indicative band: the share of its nearest historical lots of the same
  style in each grade band, an indication from neighbours, not a forecast.

A file whose analytes do not match the model is refused with one line naming
the missing and the unexpected columns; so is one whose values sit a factor
of 20 or more away from the model's on most lots (another unit).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from vinstrata.config import Config
from vinstrata.place.flags import analyte_view, lot_colours, short_flags
from vinstrata.place.limits import Flag, screen
from vinstrata.place.match import check_units
from vinstrata.place.neighbours import band_shares, join_near, nearest_lots
from vinstrata.profile.drivers import Profiles
from vinstrata.progress import Reporter
from vinstrata.read.lots import UNASSIGNED, LotTable
from vinstrata.segment import embed
from vinstrata.segment.assign import rebuild_clusterer, style_shapes
from vinstrata.segment.model import StyleModel
from vinstrata.segment.transform import scale_chemistry

PLACEMENT_COLUMNS = ("lot_id", "status", "style", "style_name", "membership", "atypical",
                     "outlier_score", "nearest_lots", "indicative_band", "share_top", "flags")


INDICATION = "indication from the nearest historical lots of the style, not a forecast"


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
    style_index, strength, clusterer = predict_styles(model, space)
    nearest_index = style_index.copy()
    loose = np.flatnonzero(style_index < 0)
    if loose.size:
        soft = soft_memberships(model, clusterer, space[loose])
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
        soft = soft_memberships(model, clusterer, space[turned])
        strength[turned] = soft[np.arange(turned.size), nearest_index[turned]]
    style_index = np.where(fits_none, -1, style_index)
    # the atypical line is the training lots' own percentile, under this run's config
    line = float(np.percentile(model.lots["outlier_score"], config.place.atypical_percentile))
    atypical = (scores > line) | (style_index < 0)
    style = np.array([style_ids[s] if s >= 0 else UNASSIGNED for s in style_index], dtype=object)
    home = np.array([style_ids[s] for s in nearest_index], dtype=object)

    near = nearest_lots(model, space, config.place.neighbours)
    shares, counts = band_shares(model, space, home, config)
    per_analyte, analyte_flags = analyte_view(values, model, profiles, home, config)
    colours = lot_colours(table, config, used)
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
    out.loc[used, "nearest_lots"] = join_near(near, n)
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


def _empty_lots(table: LotTable, model: StyleModel) -> pd.DataFrame:
    out = pd.DataFrame({"lot_id": table.ids["lot_id"].astype(str),
                        "status": table.ids["status"]})
    for column in PLACEMENT_COLUMNS[2:]:
        out[column] = pd.Series([None] * table.n_rows, dtype=object)
    for column in table.extra.columns:
        out[column] = table.extra[column].to_numpy()
    out["trusted"] = pd.Series([None] * table.n_rows, dtype=object)
    return out


def predict_styles(model: StyleModel, space: np.ndarray) -> tuple[np.ndarray, np.ndarray, object]:
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


def soft_memberships(model: StyleModel, clusterer: object, points: np.ndarray) -> np.ndarray:
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
