"""Per-analyte transform and robust scaling, fitted on the training lots.

:func:`fit_scaler` chooses, per analyte and from the training data only:

1. the transform. ``log`` when every value is >= 0, the sample skewness
   (Fisher-Pearson, bias-corrected) exceeds ``segment.skew_threshold`` (1.0: a
   common rule of thumb for "highly skewed", e.g. Bulmer, Principles of
   Statistics, 1979) and the log lowers the absolute skewness; else ``none``.
   Right-skewed, positive analytes such as residual sugar or SO2 are typical.
   Zeros are allowed: the log is taken of x + offset, the offset being half
   the smallest positive value (0 when all values are positive). Config
   ``segment.transforms`` overrides the choice per analyte;
2. the robust scale: centre = median, scale = interquartile range of the
   transformed values. Guard for an IQR of zero (many identical values):
   2 x MAD (the IQR of a symmetric distribution), then 1.349 x SD (the IQR of
   a normal one). An analyte that is constant in the training lots carries
   no information: it is dropped, with a warning.

The fitted :class:`ChemistryScaler` is stored with the model and applied
unchanged to new lots. Missing cells are imputed in the scaled space from
the nearest training lots (:func:`impute`, scikit-learn's ``KNNImputer`` over
the observed analytes).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from vinstrata.config import Config
from vinstrata.read.cells import CENSORED_BELOW


@dataclass(frozen=True)
class AnalyteTransform:
    """The fitted transform of one analyte: ``(f(x) - center) / scale``."""

    name: str
    method: str  # "log" or "none"
    offset: float
    center: float
    scale: float
    scale_rule: str  # "iqr", "mad", "sd"
    skew_raw: float
    skew_log: float

    def apply(self, values: np.ndarray) -> np.ndarray:
        """Scaled values of raw canonical-unit values (NaN stays NaN)."""
        x = np.asarray(values, dtype=float)
        if self.method == "log":
            x = np.log(np.maximum(x + self.offset, 1e-300))
        return (x - self.center) / self.scale


@dataclass(frozen=True)
class ChemistryScaler:
    """The fitted transform of every kept analyte, in order."""

    transforms: tuple[AnalyteTransform, ...]
    dropped: tuple[str, ...] = ()

    @property
    def analytes(self) -> tuple[str, ...]:
        return tuple(t.name for t in self.transforms)

    def transform(self, values: pd.DataFrame) -> np.ndarray:
        """Scale a frame of canonical values; columns are picked by analyte name.

        Returns
        -------
        ndarray of float, shape (n_lots, n_kept_analytes), NaN where missing.
        """
        if not self.transforms:
            return np.empty((len(values), 0))
        return np.column_stack([t.apply(values[t.name].to_numpy(dtype=float))
                                for t in self.transforms])

    def to_dict(self) -> dict[str, object]:
        return {"transforms": [vars(t) for t in self.transforms], "dropped": list(self.dropped)}

    @classmethod
    def from_dict(cls, data: dict[str, object]) -> ChemistryScaler:
        items = data["transforms"]
        return cls(
            transforms=tuple(AnalyteTransform(**t) for t in items),  # type: ignore[union-attr]
            dropped=tuple(data.get("dropped", ())),  # type: ignore[arg-type]
        )


def _skew(x: np.ndarray) -> float:
    if x.size < 3 or np.ptp(x) == 0:
        return 0.0
    return float(stats.skew(x, bias=False))


def choose_method(x: np.ndarray, threshold: float) -> tuple[str, float, float, float]:
    """Apply the skewness rule to observed values; returns (method, offset, skew, skew_log)."""
    x = x[np.isfinite(x)]
    skew_raw = _skew(x)
    if x.size < 3 or x.min() < 0 or not (x > 0).any():
        return "none", 0.0, skew_raw, float("nan")
    offset = 0.0 if x.min() > 0 else float(x[x > 0].min()) / 2.0
    skew_log = _skew(np.log(x + offset))
    if skew_raw > threshold and abs(skew_log) < abs(skew_raw):
        return "log", offset, skew_raw, skew_log
    return "none", offset, skew_raw, skew_log


def _robust_scale(y: np.ndarray) -> tuple[float, str]:
    q25, q75 = np.quantile(y, [0.25, 0.75])
    if q75 - q25 > 0:
        return float(q75 - q25), "iqr"
    mad = float(np.median(np.abs(y - np.median(y))))
    if mad > 0:
        return 2.0 * mad, "mad"
    sd = float(np.std(y, ddof=1)) if y.size > 1 else 0.0
    if sd > 0:
        return 1.349 * sd, "sd"
    return 0.0, "constant"


def fit_scaler(values: pd.DataFrame, skew_threshold: float = 1.0,
               overrides: dict[str, str] | None = None) -> tuple[ChemistryScaler, list[str]]:
    """Fit the per-analyte transform and robust scaling on training values.

    Parameters
    ----------
    values : DataFrame
        Canonical values of the training lots, one column per analyte, NaN
        where missing.
    skew_threshold : float
    overrides : dict, optional
        Analyte -> "auto", "log" or "none".

    Returns
    -------
    scaler : ChemistryScaler
    warnings : list of str
        One line per dropped (constant) analyte.
    """
    overrides = overrides or {}
    kept, dropped, warnings = [], [], []
    for name in values.columns:
        x = values[name].to_numpy(dtype=float)
        observed = x[np.isfinite(x)]
        if observed.size == 0:
            dropped.append(name)
            warnings.append(f"analyte '{name}' has no values in the training lots: dropped")
            continue
        method, offset, skew_raw, skew_log = choose_method(observed, skew_threshold)
        forced = overrides.get(name, "auto")
        if forced == "none":
            method = "none"
        elif forced == "log":
            if observed.min() < 0:
                warnings.append(f"analyte '{name}': log asked for but values are negative; "
                                "left untransformed")
                method = "none"
            else:
                method = "log"
        y = np.log(observed + offset) if method == "log" else observed
        scale, rule = _robust_scale(y)
        if rule == "constant":
            dropped.append(name)
            warnings.append(
                f"analyte '{name}' is constant in the training lots ({observed[0]:.6g}): dropped"
            )
            continue
        kept.append(AnalyteTransform(
            name=name, method=method, offset=offset, center=float(np.median(y)), scale=scale,
            scale_rule=rule, skew_raw=skew_raw, skew_log=skew_log,
        ))
    return ChemistryScaler(transforms=tuple(kept), dropped=tuple(dropped)), warnings


def impute(scaled: np.ndarray, reference: np.ndarray | None = None, k: int = 5) -> np.ndarray:
    """Fill missing scaled cells from the ``k`` nearest lots of ``reference``.

    Distances use the analytes both lots have (scikit-learn's ``nan_euclidean``);
    each missing cell gets the mean of its neighbours' values. ``reference``
    None imputes the training lots from each other.
    """
    if not np.isnan(scaled).any():
        return scaled.copy()
    if reference is not None and len(reference) and not np.isnan(reference).any():
        return _impute_from_complete(scaled, reference, k)
    from sklearn.impute import KNNImputer

    reference = scaled if reference is None else reference
    imputer = KNNImputer(n_neighbors=k, keep_empty_features=True)
    imputer.fit(reference)
    out = imputer.transform(scaled)
    # a column missing in every reference lot: the centre (0) of the scaled data
    return np.where(np.isnan(out), 0.0, out)


def _impute_from_complete(scaled: np.ndarray, reference: np.ndarray, k: int) -> np.ndarray:
    """:func:`impute` against complete reference lots, one nearest-neighbour search per pattern.

    With no missing cell in the reference, scikit-learn's ``nan_euclidean``
    distance of a lot is the Euclidean distance over the analytes it has, times
    a factor that is the same for every reference lot, so its ``k`` nearest
    donors are those of an exact search over its present analytes: the same
    result as ``KNNImputer`` (up to the order of exactly tied donors), about
    fifty times faster for many lots, because ``KNNImputer`` works through
    every lot of the table, and the lots that share a pattern of missing
    analytes are searched together.
    """
    from vinstrata.segment.embed import NeighbourIndex

    out = np.array(scaled, dtype=float)
    missing = np.isnan(out)
    rows = np.flatnonzero(missing.any(axis=1))
    patterns, which = np.unique(missing[rows], axis=0, return_inverse=True)
    for j, pattern in enumerate(patterns):
        mine = rows[np.asarray(which).ravel() == j]
        if pattern.all():  # nothing to measure a distance on: the reference's means
            out[np.ix_(mine, np.flatnonzero(pattern))] = reference.mean(axis=0)
            continue
        found = NeighbourIndex(reference[:, ~pattern]).query(out[np.ix_(mine, ~pattern)], k)
        donors = reference[:, pattern][found.indices]  # (lots, k, missing analytes)
        out[np.ix_(mine, np.flatnonzero(pattern))] = donors.mean(axis=1)
    return out


def censored_at_limit(values: pd.DataFrame, flags: pd.DataFrame, policy: str) -> pd.DataFrame:
    """Values for distances: a cell censored below a limit is placed at the limit."""
    share = 0.5 if policy == "half_limit" else 1.0
    out = values.copy()
    for name in values.columns:
        if name in flags.columns:
            below = (flags[name] == CENSORED_BELOW).to_numpy()
            if below.any():
                column = out[name].to_numpy(dtype=float).copy()
                column[below] = column[below] / share
                out[name] = column
    return out


def scale_chemistry(values: pd.DataFrame, flags: pd.DataFrame, scaler: ChemistryScaler,
                    config: Config, reference: np.ndarray | None = None) -> np.ndarray:
    """Scaled, imputed chemistry of lots, as segmentation and placing both see it."""
    at_limit = censored_at_limit(values, flags, config.ingest.censored)
    return impute(scaler.transform(at_limit), reference, config.segment.impute_neighbours)
