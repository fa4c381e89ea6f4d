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
import pyarrow as pa
import pyarrow.compute as pc

OK, MISSING, CENSORED_BELOW, CENSORED_ABOVE, NON_NUMERIC = (
    "ok", "missing", "censored_below", "censored_above", "non_numeric",
)
# the states by their code (:func:`parse_codes`): small integers compare and count fast
STATES = (OK, MISSING, CENSORED_BELOW, CENSORED_ABOVE, NON_NUMERIC)
C_OK, C_MISSING, C_BELOW, C_ABOVE, C_NON_NUMERIC = range(5)
_STATE_OBJECTS = np.array(STATES, dtype=object)

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
# a plain decimal number, which Arrow's cast and pandas' to_numeric read to the same float
# (both round correctly); other cells go through to_numeric as they always did
_PLAIN = r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$"
_INTEGER = r"^[+-]?\d+$"


def is_typed(cells: pd.Series) -> bool:
    """Whether a column holds numbers already (a typed Parquet column), not text."""
    return pd.api.types.is_float_dtype(cells.dtype)


def typed_dots(values: np.ndarray) -> int:
    """How many numbers would be written with a decimal point, as :func:`cell_text` writes them.

    Whole numbers below 1e15 are written without one, and Python's shortest
    form uses an exponent below 1e-4 and from 1e16 on (no decimal point then
    either), so the decimal-mark vote of a typed column equals that of its text.
    """
    finite = np.isfinite(values)
    size = np.abs(np.where(finite, values, 0.0))
    whole = finite & (values == np.round(values)) & (size < 1e15)
    return int((finite & ~whole & (size >= 1e-4) & (size < 1e16)).sum())


def decimal_counts(columns: list[pd.Series]) -> tuple[int, int]:
    """Cells written with a decimal comma and with a decimal point, over ``columns``."""
    commas = dots = 0
    for col in columns:
        if is_typed(col):
            dots += typed_dots(col.to_numpy(dtype=float))
            continue
        text = col.astype(str).str.strip().str.lstrip("<>≤≥= ")
        commas += int(text.str.match(_COMMA_DECIMAL).sum())
        dots += int(text.str.match(_DOT_DECIMAL).sum())
    return commas, dots


def detect_decimal(columns: list[pd.Series]) -> str:
    """Return "," when decimal commas outnumber decimal points in the cells."""
    if not any(not is_typed(c) and c.astype(str).str.contains(",", regex=False).any()
               for c in columns):
        return "."  # no comma at all: no decimal comma either
    commas, dots = decimal_counts(columns)
    return "," if commas > dots else "."


def _numbers(text: pd.Series) -> np.ndarray:
    """``pd.to_numeric(text, errors="coerce")`` as floats, plain numbers cast by Arrow.

    A column of numbers and empty cells is cast whole; otherwise the cells that
    are plain decimal numbers are cast and the rest go through ``to_numeric``.
    Cells that either reads as no finite number are parsed again by the caller.
    """
    n = len(text)
    if n == 0:
        return np.zeros(0)
    arr = pa.array(text, type=pa.string(), from_pandas=True)
    try:
        out = np.array(pc.cast(pc.if_else(pc.equal(arr, ""), pa.scalar(None, pa.string()), arr),
                               pa.float64()).to_numpy(zero_copy_only=False))  # writable
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        plain = pc.fill_null(pc.match_substring_regex(arr, _PLAIN), False).to_numpy(
            zero_copy_only=False)
        out = np.full(n, np.nan)
        if plain.any():
            out[plain] = pc.cast(arr.filter(pa.array(plain)), pa.float64()).to_numpy(
                zero_copy_only=False)
        rest = ~plain
        if rest.any():
            out[rest] = pd.to_numeric(text[rest], errors="coerce").to_numpy(
                dtype=float, na_value=np.nan)
    if (np.signbit(out) & (out == 0)).any() and pc.all(
            pc.match_substring_regex(arr, _INTEGER)).as_py():
        out += 0.0  # to_numeric reads a column of whole numbers as integers: "-0" is 0
    return out


def _typed_cells(cells: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Values and state codes of a typed column: NaN is missing, an infinity is no number."""
    values = cells.to_numpy(dtype=float, copy=True)
    codes = np.zeros(len(values), dtype=np.int8)
    codes[np.isnan(values)] = C_MISSING
    infinite = np.isinf(values)
    codes[infinite] = C_NON_NUMERIC
    values[infinite] = np.nan
    return values, codes


def censor_stats(cells: pd.Series, decimal: str = ".") -> tuple[bool, float, float]:
    """What a censored token of this column is based on: tokens present, lowest limit, smallest
    positive measured value (``inf`` when there is none).

    Batches of one table combine their stats (any, min, min), so that a token
    takes the same value as when the table is parsed whole (:func:`token_base`).
    """
    if is_typed(cells):
        values = cells.to_numpy(dtype=float)
        positive = values[np.isfinite(values) & (values > 0)]
        return False, np.inf, float(positive.min()) if positive.size else np.inf
    values, codes, limits = _parse_text(cells, decimal, "limit", None)
    token = limits["token"]
    measured = values[(codes == C_OK) & np.isfinite(values) & (values > 0)]
    written = limits["below"]
    return (bool(token.any()), float(written.min()) if written.size else np.inf,
            float(measured.min()) if measured.size else np.inf)


def has_tokens(cells: pd.Series) -> bool:
    """Whether the column holds a censored token without a number (``ND``, ``trace``)."""
    if is_typed(cells) or not len(cells):
        return False
    return bool(cells.astype(str).str.strip().str.lower().isin(CENSORED_TOKENS).any())


def token_base(limit: float, measured: float) -> float:
    """The value a token stands for (before the policy's share): the lowest written limit,
    else the smallest positive measured value, else 0."""
    if np.isfinite(limit):
        return float(limit)
    return float(measured) if np.isfinite(measured) else 0.0


def _to_float(text: pd.Series, decimal: str) -> pd.Series:
    if decimal == ",":
        thousands = text.str.match(_THOUSANDS_DOT)
        text = text.where(~thousands, text.str.replace(".", "", regex=False))
        text = text.str.replace(",", ".", regex=False)
    text = text.str.replace(r"\s+", "", regex=True)
    numbers = pd.to_numeric(text, errors="coerce")
    return numbers.where(np.isfinite(numbers))


def parse_cells(cells: pd.Series, decimal: str = ".", censored: str = "half_limit",
                base: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Parse one column of text cells (or of typed numbers).

    Parameters
    ----------
    cells : Series of str, or of float
        A float column holds numbers already (a typed Parquet column): NaN is
        missing, an infinity is ``non_numeric``, and the decimal mark does not
        apply (a stored number has none).
    decimal : {".", ","}
    censored : {"half_limit", "limit"}
        What a value written below a limit becomes.
    base : float, optional
        What a censored token without a number (``ND``) stands for before the
        policy's share; None takes it from the column itself (its lowest written
        limit, else its smallest positive measured value). Batches of a table
        pass the table's own (:func:`censor_stats`, :func:`token_base`).

    Returns
    -------
    values : ndarray of float
        NaN where missing or non-numeric.
    states : ndarray of str
        One of ``ok``, ``missing``, ``censored_below``, ``censored_above``,
        ``non_numeric`` per cell.
    """
    values, codes = parse_codes(cells, decimal, censored, base)
    return values, _STATE_OBJECTS[codes]


def parse_codes(cells: pd.Series, decimal: str = ".", censored: str = "half_limit",
                base: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """:func:`parse_cells` with each state as its code (an index into :data:`STATES`)."""
    if is_typed(cells):
        return _typed_cells(cells)
    values, codes, _ = _parse_text(cells, decimal, censored, base)
    return values, codes


def state_text(codes: np.ndarray) -> pd.Series:
    """State codes as a text column (what a ``LotTable.flags`` column holds)."""
    import pyarrow as pa

    arr = pa.DictionaryArray.from_arrays(pa.array(codes, type=pa.int8()), pa.array(STATES))
    return pd.Series(pd.array(arr.cast(pa.string()), dtype=str))


def _parse_text(cells: pd.Series, decimal: str, censored: str, base: float | None
                ) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]:
    """Values and states of text cells, with the censored limits written and the token mask."""
    text = cells.astype(str).str.strip().reset_index(drop=True)
    # fast path: most cells are plain numbers
    plain = text.str.replace(",", ".", regex=False) if decimal == "," else text
    out = _numbers(plain)
    states = np.zeros(len(text), dtype=np.int8)
    hard = ~np.isfinite(out)
    if decimal == ",":
        hard |= text.str.contains(".", regex=False).to_numpy(dtype=bool)  # "1.250,5"
    limits = {"below": np.zeros(0), "token": np.zeros(0, dtype=bool)}
    if not hard.any():
        return out, states, limits
    idx = np.flatnonzero(hard)
    missing = text.iloc[idx].str.lower().isin(MISSING_TOKENS).to_numpy(dtype=bool)
    states[idx[missing]] = C_MISSING  # nothing else to read in those
    out[idx[missing]] = np.nan
    idx = idx[~missing]
    if not idx.size:
        return out, states, limits
    sub = text.iloc[idx]
    lower = sub.str.lower()
    values = _to_float(sub, decimal).to_numpy(dtype=float, na_value=np.nan).copy()
    sub_states = np.zeros(idx.size, dtype=np.int8)
    below_num = _to_float(sub.str.extract(_BELOW)["num"].fillna(""), decimal).to_numpy(
        dtype=float, na_value=np.nan)
    above_num = _to_float(sub.str.extract(_ABOVE)["num"].fillna(""), decimal).to_numpy(
        dtype=float, na_value=np.nan)
    token = lower.isin(CENSORED_TOKENS).to_numpy(dtype=bool)
    is_below = np.isfinite(below_num) & (below_num >= 0) & ~token
    is_above = np.isfinite(above_num)
    share = 0.5 if censored == "half_limit" else 1.0
    values[is_below] = below_num[is_below] * share
    sub_states[is_below] = C_BELOW
    values[is_above] = above_num[is_above]
    sub_states[is_above] = C_ABOVE
    limits = {"below": below_num[is_below], "token": token}
    if token.any():
        if base is None:
            measured = np.concatenate([out[~hard], values[sub_states == C_OK]])
            measured = measured[np.isfinite(measured) & (measured > 0)]
            written = limits["below"]
            base = token_base(float(written.min()) if written.size else np.inf,
                              float(measured.min()) if measured.size else np.inf)
        values[token] = base * share
        sub_states[token] = C_BELOW
    bad = (sub_states == C_OK) & ~np.isfinite(values)
    sub_states[bad] = C_NON_NUMERIC
    values[bad] = np.nan
    out[idx] = values
    states[idx] = sub_states
    return out, states, limits
