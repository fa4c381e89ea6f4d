"""The contract tables of the segment stage: lot_styles.csv and styles.csv."""

from __future__ import annotations

import numpy as np
import pandas as pd

from vinstrata.read.lots import USED
from vinstrata.segment.model import StyleModel
from vinstrata.segment.names import apply_user_names

LOT_STYLE_COLUMNS = ("lot_id", "status", "style", "style_name", "membership", "outlier_score",
                     "nearest_style", "map_x", "map_y")


STYLE_COLUMNS = ("style", "style_name", "n_lots", "share", "trusted")


def lot_styles(model: StyleModel) -> pd.DataFrame:
    """``lot_styles.csv``: one row per input row, rejected rows with empty style fields.

    Columns ``lot_id, status, style, style_name, membership, outlier_score,
    nearest_style, map_x, map_y``, then the passthrough columns, then ``trusted``.
    """
    rows = model.rows.reset_index(drop=True)
    out = pd.DataFrame({"lot_id": rows["lot_id"].astype(str), "status": rows["status"]})
    for column in LOT_STYLE_COLUMNS[2:]:
        out[column] = pd.Series([None] * len(rows), dtype=object)
    used = (rows["status"] == USED).to_numpy()
    names = model.style_names()
    trusted = dict(zip(model.styles["style"], model.styles["trusted"]))
    lots = model.lots
    out.loc[used, "style"] = lots["style"].to_numpy()
    out.loc[used, "style_name"] = [names.get(s, "") for s in lots["style"]]
    for column in ("membership", "outlier_score", "map_x", "map_y"):
        values = pd.Series([np.nan] * len(rows), dtype=float)
        values[used] = np.round(lots[column].to_numpy(dtype=float), 6)
        out[column] = values
    out.loc[used, "nearest_style"] = lots["nearest_style"].to_numpy()
    extra = model.extra.reset_index(drop=True)
    for column in extra.columns:
        out[column] = extra[column].to_numpy()
    out["trusted"] = pd.Series([None] * len(rows), dtype=object)
    out.loc[used, "trusted"] = [bool(trusted[s]) if s in trusted else None
                                for s in lots["style"]]
    return out


def style_table(model: StyleModel) -> pd.DataFrame:
    """``styles.csv``: ``style, style_name, n_lots, share, trusted``, then the median of
    each analyte (canonical units), then ``trust_note``, the band counts, ``generated_name``
    and (with a colour column) ``colour_mix``.

    ``style_name`` is the name a user gave the style (``vinstrata name``) where there is
    one, else the generated name; a model saved before names could be given gains its
    ``generated_name`` column here.
    """
    return apply_user_names(model.styles, model.user_names)
