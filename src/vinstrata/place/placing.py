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
* flags: an analyte off its style (|robust z| above ``place.z_flag``); its
  style's drivers taken together (the driver score of :mod:`vinstrata.place.flags`)
  where bottom-band lots of the style dominate, naming the one to three drivers
  that pull it down most; and the screening flags of :mod:`vinstrata.place.limits`;
* an indicative band: the share of its nearest historical lots of the same
  style in each grade band, an indication from neighbours, not a forecast.

A file whose analytes do not match the model is refused with one line naming
the missing and the unexpected columns; so is one whose values sit a factor
of 20 or more away from the model's on most lots (another unit).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from vinstrata.config import Config
from vinstrata.place.context import PlacingContext, placing_context
from vinstrata.place.flags import DriverView, analyte_view, driver_view, lot_colours, short_flags
from vinstrata.place.limits import Flag, screen
from vinstrata.place.match import check_units
from vinstrata.place.neighbours import band_shares, join_near, nearest_lots
from vinstrata.profile.drivers import Profiles
from vinstrata.progress import Reporter
from vinstrata.read.lots import UNASSIGNED, LotTable
from vinstrata.segment.assign import Assignment
from vinstrata.segment.model import StyleModel
from vinstrata.segment.reference import FitReference, model_reference
from vinstrata.segment.transform import scale_chemistry
from vinstrata.segment.typicality import atypical_line
from vinstrata.settings import PlaceSettings

PLACEMENT_COLUMNS = ("lot_id", "status", "style", "style_name", "membership", "atypical",
                     "outlier_score", "nearest_lots", "indicative_band", "share_top", "flags")


INDICATION = "indication from the nearest historical lots of the style, not a forecast"


@dataclass(frozen=True)
class Placements:
    """Everything placing produces, as plain DataFrames, and what it was made with.

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
    settings : PlaceSettings
        The place settings, bands, market, seed and model hash of the run.
    """

    lots: pd.DataFrame
    details: pd.DataFrame
    analytes: pd.DataFrame
    neighbours: pd.DataFrame
    settings: PlaceSettings


@dataclass(frozen=True)
class Placed:
    """Where the used new lots went: position, style, typicality."""

    space: np.ndarray
    map_xy: np.ndarray
    assignment: Assignment
    atypical: np.ndarray
    style: np.ndarray  # each lot's style id, or "unassigned"
    home: np.ndarray  # its style, or its nearest style when it has none


def place_lots(table: LotTable, model: StyleModel, profiles: Profiles | None = None,
               config: Config | None = None, reporter: Reporter | None = None,
               context: PlacingContext | None = None) -> Placements:
    """Place the used lots of ``table`` against ``model``.

    Parameters
    ----------
    table : LotTable
        New lots, validated with ``require_grade=False``.
    model : StyleModel
    profiles : Profiles, optional
        The model's profiles, for the driver flags; without them only
        off-style and screening flags are given.
    config : Config, optional
        Place and limits settings; the model's config when None.
    reporter : Reporter, optional
    context : PlacingContext, optional
        The model made ready for placing (:func:`vinstrata.place.context.placing_context`),
        built once and reused across batches; built here from ``model``, ``profiles``
        and ``config`` when None.

    Returns
    -------
    Placements
    """
    check_units(table, model)
    context = context or placing_context(model, profiles, config)
    if not table.used.any():
        (reporter or Reporter()).warn(f"{table.source.name}: no usable new lots")
    return place_batch(table, context)


def place_batch(table: LotTable, context: PlacingContext) -> Placements:
    """Place the used lots of one batch of new lots; no file-level check, no warning.

    The lots of a batch are placed one by one (nothing of one lot depends on
    another), so the batches of a file give, put together, the placements of
    the whole file. The file-level checks (units, duplicate lot ids across
    batches, the rejection warnings) are the caller's
    (:func:`place_lots`, :mod:`vinstrata.place.stream`).

    Parameters
    ----------
    table : LotTable
        New lots, validated with ``require_grade=False``.
    context : PlacingContext

    Returns
    -------
    Placements
    """
    model, profiles, config, settings = (context.model, context.profiles, context.config,
                                         context.settings)
    used = table.used
    base = _empty_lots(table)
    if not used.any():
        return Placements(base, pd.DataFrame(), pd.DataFrame(), pd.DataFrame(), settings)
    values = table.values.loc[used].reset_index(drop=True)
    flags = table.flags.loc[used].reset_index(drop=True)
    placed = locate_lots(values, flags, model, config, settings.atypical_percentile,
                         reference=context.reference, line=context.line)
    near = nearest_lots(model, placed.space, settings.neighbours, index=context.space_index)
    shares, counts = band_shares(model, placed.space, placed.home, settings.bands,
                                 settings.include_unassigned, settings.band_neighbours,
                                 pools=context.band_pools)
    drivers = driver_view(values, model, profiles, placed.home,
                          judged=~placed.assignment.fits_none, scales=context.scales)
    per_analyte, analyte_flags = analyte_view(values, model, profiles, placed.home,
                                              settings.z_flag, named=drivers.named)
    analyte_flags = [off + mine for off, mine in zip(analyte_flags, drivers.flags)]
    colours = lot_colours(table.extra.loc[used], config.limits.colour_column,
                          config.limits.default_colour)
    screening = screen(values, table.specs, colours, config.limits, config.derived.so2_pka)
    lot_flags = _lot_flags(placed, analyte_flags, screening)
    lot_ids = table.ids.loc[used, "lot_id"].astype(str).to_numpy()
    return Placements(
        lots=_fill_lots(base, used, placed, near, shares, lot_flags, model, settings),
        details=_details(lot_ids, placed, counts, shares, lot_flags, settings.bands.labels,
                         drivers),
        analytes=_with_lot_ids(per_analyte, lot_ids, len(model.specs)),
        neighbours=near.assign(lot_id=lot_ids[near["lot_id"].to_numpy(dtype=int)]),
        settings=settings,
    )


def locate_lots(values: pd.DataFrame, flags: pd.DataFrame, model: StyleModel, config: Config,
                atypical_percentile: float, reference: FitReference | None = None,
                line: float | None = None) -> Placed:
    """The lots' clustering-space and map positions, their styles and typicality.

    Parameters
    ----------
    values, flags : DataFrame
        The used lots' canonical values and cell states.
    model : StyleModel
    config : Config
        For the censoring rule and the imputation neighbours.
    atypical_percentile : float
        The training lots' percentile of the outlier score that marks a lot atypical.
    reference : FitReference, optional
        The model's fitted lots, tree and predictor when already built
        (:func:`vinstrata.segment.reference.model_reference`); built here otherwise.
    line : float, optional
        The atypical line when already computed (it depends on ``atypical_percentile`` only).

    Returns
    -------
    Placed
    """
    reference = reference or model_reference(model)
    scaled = scale_chemistry(values[list(model.analytes)], flags, model.scaler, config,
                             reference=reference.scaled)
    located = reference.locate(scaled)
    assignment = located.assignment
    # the atypical line is the training lots' own percentile, under this run's settings
    if line is None:
        line = atypical_line(model.lots["outlier_score"].to_numpy(dtype=float),
                             atypical_percentile)
    atypical = (assignment.outlier_score > line) | (assignment.style_index < 0)
    ids = model.style_ids
    style = np.array([ids[s] if s >= 0 else UNASSIGNED for s in assignment.style_index],
                     dtype=object)
    home = np.array([ids[s] for s in assignment.nearest_index], dtype=object)
    return Placed(space=located.space, map_xy=located.map_xy, assignment=assignment,
                  atypical=atypical, style=style, home=home)


def _lot_flags(placed: Placed, analyte_flags: list[list[Flag]],
               screening: list[list[Flag]]) -> list[list[Flag]]:
    """Each lot's flags: typicality first, then its analytes, then the screening."""
    scores, home = placed.assignment.outlier_score, placed.home
    out = []
    for i, mine in enumerate(analyte_flags):
        if placed.assignment.fits_none[i]:
            # the drivers of a style the lot does not belong to say nothing
            mine = [f for f in mine if f.token.startswith("off_style")]
            head = [Flag("fits_no_style", f"fits no style (outlier score {scores[i]:.1f}; "
                                          f"nearest {home[i]})", f"no style {scores[i]:.1f}")]
        elif placed.atypical[i]:
            head = [Flag("atypical", f"atypical of {home[i]} (outlier score {scores[i]:.1f})",
                         f"atypical {scores[i]:.1f}")]
        else:
            head = []
        out.append(head + mine + screening[i])
    return out


def _indicative(shares: np.ndarray, labels: tuple[str, ...]) -> np.ndarray:
    """The band most of a lot's neighbours got ("" without graded neighbours)."""
    has_bands = np.isfinite(shares).all(axis=1)
    return np.where(has_bands, np.array(labels, dtype=object)[np.argmax(
        np.nan_to_num(shares, nan=-1.0), axis=1)], "")


def _fill_lots(out: pd.DataFrame, used: np.ndarray, placed: Placed, near: pd.DataFrame,
               shares: np.ndarray, lot_flags: list[list[Flag]], model: StyleModel,
               settings: PlaceSettings) -> pd.DataFrame:
    """``placements.csv``: the used rows of ``out`` filled in."""
    a, style = placed.assignment, placed.style
    names = model.style_names()
    trusted = dict(zip(model.styles["style"], model.styles["trusted"]))
    out.loc[used, "style"] = style
    out.loc[used, "style_name"] = [names.get(s, "") for s in style]
    out.loc[used, "membership"] = np.round(a.membership, 6)
    out.loc[used, "atypical"] = placed.atypical
    out.loc[used, "outlier_score"] = np.round(a.outlier_score, 6)
    out.loc[used, "nearest_lots"] = join_near(near, len(style))
    out.loc[used, "indicative_band"] = _indicative(shares, settings.bands.labels)
    out.loc[used, "share_top"] = np.round(shares[:, -1], 6)
    out.loc[used, "flags"] = [";".join(f.token for f in fl) for fl in lot_flags]
    out.loc[used, "trusted"] = [bool(trusted[h]) for h in placed.home]
    return out


def _details(lot_ids: np.ndarray, placed: Placed, counts: np.ndarray, shares: np.ndarray,
             lot_flags: list[list[Flag]], labels: tuple[str, ...], drivers: DriverView
             ) -> pd.DataFrame:
    """``placement_details.csv``: map position, nearest style, band shares, flags in words,
    and the lot's driver score with its style's score cut (empty without drivers)."""
    return pd.DataFrame({
        "lot_id": lot_ids, "style": placed.style, "nearest_style": placed.home,
        "map_x": placed.map_xy[:, 0].astype(float), "map_y": placed.map_xy[:, 1].astype(float),
        "band_neighbours": counts,
        **{f"share_{label}": np.round(shares[:, j], 6) for j, label in enumerate(labels)},
        "flags_text": ["; ".join(f.words for f in fl) for fl in lot_flags],
        "flags_short": [short_flags(fl) for fl in lot_flags],
        "driver_score": np.round(drivers.score, 6), "driver_cut": np.round(drivers.cut, 6),
    })


def _with_lot_ids(per_analyte: pd.DataFrame, lot_ids: np.ndarray, n_analytes: int
                  ) -> pd.DataFrame:
    per_analyte.insert(0, "lot_id", np.repeat(lot_ids, n_analytes))  # sorted by lot
    return per_analyte


def _empty_lots(table: LotTable) -> pd.DataFrame:
    out = pd.DataFrame({"lot_id": table.ids["lot_id"].astype(str),
                        "status": table.ids["status"]})
    for column in PLACEMENT_COLUMNS[2:]:
        out[column] = pd.Series([None] * table.n_rows, dtype=object)
    for column in table.extra.columns:
        out[column] = table.extra[column].to_numpy()
    out["trusted"] = pd.Series([None] * table.n_rows, dtype=object)
    return out
