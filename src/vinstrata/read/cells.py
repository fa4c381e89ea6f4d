"""Turning lab cells written as text into numbers, with a state per cell.

Labs write numbers in many ways. The rules, applied the same way to every
file format:

* decimal point or decimal comma (``"0,45"``); with a decimal comma a dot
  between groups of three digits is a thousands separator (``"1.250,5"``);
* missing: an empty cell or one of ``NA``, ``N/A``, ``nan``, ``null``, ``-``,
  ``--``, ``?``, ``.``, ``missing`` (any case);
* censored below a limit: ``"<0.1"``, ``"< 0.1"``, ``"<=0.1"``, ``"≤0.1"``:
  the policy ``half_limit`` (default) stores half the limit, ``limit`` the
  limit itself; ``ND``, ``n.d.``, ``BDL``, ``<LOD``, ``<LOQ``, ``trace`` (no
  number written) take half (or all) of the lowest limit written in the same
  column, or, when the column has none, of its smallest positive measured
  value. Censoring is common in lab reports for malic and lactic acid after
  malolactic fermentation or for free SO2;
* censored above a limit: ``">400"`` stores the limit;
* anything else that is not a finite number is ``non_numeric``.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

OK, MISSING, CENSORED_BELOW, CENSORED_ABOVE, NON_NUMERIC = (
    "ok", "missing", "censored_below", "censored_above", "non_numeric",
)

MISSING_TOKENS = frozenset(
    {"", "na", "n/a", "nan", "null", "none", "-", "--", "—", "?", ".", "missing", "#n/a", "n.a."}
)
CENSORED_TOKENS = frozenset(
    {"nd", "n.d.", "n.d", "not detected", "bdl", "<lod", "<loq", "< lod", "< loq", "lod", "loq",
     "trace", "tr", "traces"}
)
_BELOW = re.compile(r"^(<=|<|≤|&lt;)\s*(?P<num>.+)$")
_ABOVE = re.compile(r"^(>=|>|≥|&gt;)\s*(?P<num>.+)$")
_COMMA_DECIMAL = re.compile(r"^[+-]?\d*,\d+$")
_DOT_DECIMAL = re.compile(r"^[+-]?\d*\.\d+$")
_THOUSANDS_DOT = re.compile(r"^[+-]?\d{1,3}(\.\d{3})+(,\d+)?$")


def detect_decimal(columns: list[pd.Series]) -> str:
    """Return "," when decimal commas outnumber decimal points in the cells."""
    commas = dots = 0
    for col in columns:
        text = col.astype(str).str.strip().str.lstrip("<>≤≥= ")
        commas += int(text.str.match(_COMMA_DECIMAL).sum())
        dots += int(text.str.match(_DOT_DECIMAL).sum())
    return "," if commas > dots else "."


def _to_float(text: pd.Series, decimal: str) -> pd.Series:
    if decimal == ",":
        thousands = text.str.match(_THOUSANDS_DOT)
        text = text.where(~thousands, text.str.replace(".", "", regex=False))
        text = text.str.replace(",", ".", regex=False)
    text = text.str.replace(r"\s+", "", regex=True)
    numbers = pd.to_numeric(text, errors="coerce")
    return numbers.where(np.isfinite(numbers))


def parse_cells(cells: pd.Series, decimal: str = ".", censored: str = "half_limit"
                ) -> tuple[np.ndarray, np.ndarray]:
    """Parse one column of text cells.

    Parameters
    ----------
    cells : Series of str
    decimal : {".", ","}
    censored : {"half_limit", "limit"}
        What a value written below a limit becomes.

    Returns
    -------
    values : ndarray of float
        NaN where missing or non-numeric.
    states : ndarray of str
        One of ``ok``, ``missing``, ``censored_below``, ``censored_above``,
        ``non_numeric`` per cell.
    """
    text = cells.astype(str).str.strip().reset_index(drop=True)
    # fast path: most cells are plain numbers
    plain = text.str.replace(",", ".", regex=False) if decimal == "," else text
    out = pd.to_numeric(plain, errors="coerce").to_numpy(dtype=float, na_value=np.nan).copy()
    states = np.full(len(text), OK, dtype=object)
    hard = ~np.isfinite(out)
    if decimal == ",":
        hard |= text.str.contains(".", regex=False).to_numpy()  # "1.250,5" or a stray point
    if not hard.any():
        return out, states
    idx = np.flatnonzero(hard)
    sub = text.iloc[idx]
    lower = sub.str.lower()
    values = _to_float(sub, decimal).to_numpy(dtype=float, na_value=np.nan).copy()
    sub_states = np.full(idx.size, OK, dtype=object)
    missing = lower.isin(MISSING_TOKENS).to_numpy()
    sub_states[missing] = MISSING
    below_num = _to_float(sub.str.extract(_BELOW)["num"].fillna(""), decimal).to_numpy(
        dtype=float, na_value=np.nan)
    above_num = _to_float(sub.str.extract(_ABOVE)["num"].fillna(""), decimal).to_numpy(
        dtype=float, na_value=np.nan)
    token = lower.isin(CENSORED_TOKENS).to_numpy()
    is_below = np.isfinite(below_num) & (below_num >= 0) & ~token
    is_above = np.isfinite(above_num)
    share = 0.5 if censored == "half_limit" else 1.0
    values[is_below] = below_num[is_below] * share
    sub_states[is_below] = CENSORED_BELOW
    values[is_above] = above_num[is_above]
    sub_states[is_above] = CENSORED_ABOVE
    if token.any():
        limits = below_num[is_below]
        measured = np.concatenate([out[~hard], values[sub_states == OK]])
        measured = measured[np.isfinite(measured) & (measured > 0)]
        if limits.size:
            base = float(limits.min())
        elif measured.size:
            base = float(measured.min())
        else:
            base = 0.0
        values[token] = base * share
        sub_states[token] = CENSORED_BELOW
    bad = (sub_states == OK) & ~np.isfinite(values)
    sub_states[bad] = NON_NUMERIC
    values[missing | bad] = np.nan
    out[idx] = values
    states[idx] = sub_states
    return out, states
