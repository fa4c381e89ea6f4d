"""Conditional effects: which drivers carry the grade, and which only ride along.

Inside a style analytes move together (density with alcohol and sugar, pH with
titratable acidity and potassium, ...), so a marginal driver may owe its effect
to another analyte. For every analyte of every trusted style this module gives
the *conditional effect*: the rank-based partial correlation of the analyte
with the grade given the style's other analytes, with a seeded bootstrap CI.

Method
------
Each analyte and the grade are turned into normal scores of their ranks within
the style (van der Waerden scores; a value missing or imputed at ingest gets the
score 0, the median, so it neither adds nor removes an association). The
partial correlation of the grade (index 0) with analyte ``j`` given all other
analytes is read from the precision matrix ``P`` of their correlation matrix,
``r_0j.rest = -P_0j / sqrt(P_00 P_jj)``. Near-identities (density is almost a
function of alcohol and sugar) make the correlation matrix nearly singular, so
it is shrunk towards the identity by ``RIDGE`` before it is inverted: a
conditional effect of two near-twins is then shared between them rather than
blown up with opposite signs. The CI is the percentile interval over bootstrap
resamples of the style's lots (ranks kept from the full style, the resample
reweighting the lots), drawn from an RNG keyed by seed and style, so the other
columns of the profile draw exactly as before.

Roles of the drivers (analytes that are not drivers get none):

* ``direct``: the conditional CI excludes 0 on the side of the driver's delta;
* ``indirect``: the conditional effect vanishes and a direct driver of the style
  moves with it (the one with the largest within-style rank correlation,
  ``moves_with``);
* ``unclear``: the conditional effect vanishes and no direct driver explains it,
  or the driver is almost a function of the style's other analytes (R^2 at
  least ``COLLINEAR``), so that its own share cannot be told from its twin's;
  ``moves_with`` names the driver it is most correlated with (two near-twins
  that the data cannot separate name each other).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats as sps

from vinstrata.profile import stats
from vinstrata.profile.groups import POOLED, Group

PARTIAL_COLUMNS = ("partial_rho", "partial_ci_low", "partial_ci_high", "role", "moves_with")
RIDGE = 0.01  # shrinkage of the correlation matrix towards the identity before inverting
COLLINEAR = 0.995  # R^2 on the others above which a driver is "unclear" (a near-identity)
MOVES_WITH_MIN = 0.3  # |rank correlation| below which a driver does not explain another


def normal_scores(x: np.ndarray) -> np.ndarray:
    """Van der Waerden normal scores of the finite values of ``x`` (ties averaged); 0 elsewhere.

    Parameters
    ----------
    x : ndarray

    Returns
    -------
    ndarray
        Same shape as ``x``.
    """
    out = np.zeros(len(x))
    ok = np.isfinite(x)
    if ok.sum() >= 2:
        ranks = sps.rankdata(x[ok])
        out[ok] = sps.norm.ppf(ranks / (ok.sum() + 1))
    return out


def partial_from_corr(corr: np.ndarray, ridge: float | None = None) -> np.ndarray:
    """Partial correlations of variable 0 with each other variable given all the rest.

    Parameters
    ----------
    corr : ndarray
        Correlation matrices, shape (..., k, k), variable 0 first.
    ridge : float, optional
        Shrinkage towards the identity: ``(1 - ridge) R + ridge I`` is inverted
        (:data:`RIDGE` when None).

    Returns
    -------
    ndarray
        Shape (..., k - 1): ``-P_0j / sqrt(P_00 P_jj)`` for j = 1..k-1.
    """
    ridge = RIDGE if ridge is None else ridge
    k = corr.shape[-1]
    shrunk = (1.0 - ridge) * corr + ridge * np.eye(k)
    prec = np.linalg.inv(shrunk)
    diag = np.diagonal(prec, axis1=-2, axis2=-1)
    return -prec[..., 0, 1:] / np.sqrt(diag[..., :1] * diag[..., 1:])


def _products(z: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The columns of ``z`` and their pairwise products (upper triangle), as the rows of
    one contiguous matrix (written row by row: no larger intermediate), with the
    triangle's row and column indices."""
    i, j = np.triu_indices(z.shape[1])
    columns = np.ascontiguousarray(z.T)
    k = columns.shape[0]
    out = np.empty((k + i.size, columns.shape[1]))
    out[:k] = columns
    for m, (a, b) in enumerate(zip(i, j)):
        np.multiply(columns[a], columns[b], out=out[k + m])
    return out, i, j


def _weighted_corr(z: np.ndarray, weights: np.ndarray,
                   products: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None
                   ) -> np.ndarray:
    """Correlation matrices of the columns of ``z`` under each row of ``weights``.

    One matrix product of the columns and their pairwise products (``products``, from
    :func:`_products`) with the weights gives every weighted mean and second moment,
    without a resamples x lots x analytes intermediate.
    """
    k = z.shape[1]
    rows, i, j = products if products is not None else _products(z)
    w = weights / weights.sum(axis=1, keepdims=True)
    moments = (rows @ w.T).T
    mean = moments[:, :k]
    second = np.empty((w.shape[0], k, k))
    second[:, i, j] = moments[:, k:]
    second[:, j, i] = moments[:, k:]
    cov = second - mean[:, :, None] * mean[:, None, :]
    sd = np.sqrt(np.clip(np.diagonal(cov, axis1=1, axis2=2), 1e-300, None))
    return cov / (sd[:, :, None] * sd[:, None, :])


def partial_effects(values: np.ndarray, grades: np.ndarray, bootstrap: int, ci_level: float,
                    rng: np.random.Generator) -> pd.DataFrame:
    """Rank partial correlation of the grade with each analyte given the others, with CIs.

    Parameters
    ----------
    values : ndarray
        Shape (n lots, p analytes); NaN where missing or imputed.
    grades : ndarray
        The lots' grades (finite).
    bootstrap : int
        Resamples of the lots for the percentile CI.
    ci_level : float
    rng : Generator

    Returns
    -------
    DataFrame
        ``partial_rho``, ``partial_ci_low``, ``partial_ci_high``, one row per analyte
        (NaN for a constant analyte or fewer than 10 lots).
    """
    n, p = values.shape
    z = np.column_stack([normal_scores(grades)] + [normal_scores(values[:, j]) for j in range(p)])
    keep = np.ones(p + 1, dtype=bool)
    keep[1:] = z[:, 1:].std(axis=0) > 0  # a constant analyte has no partial correlation
    zk = z[:, keep]
    est = np.full(p, np.nan)
    low, high = np.full(p, np.nan), np.full(p, np.nan)
    if n >= 10 and keep[1:].any():
        full = partial_from_corr(np.corrcoef(zk, rowvar=False)[None])[0]
        boots = np.empty((bootstrap, full.size))
        products = _products(zk)
        # numpy's multinomial gives the same stream drawn whole or a block of rows at a time
        for part in stats.blocks(bootstrap, n):
            weights = rng.multinomial(n, np.full(n, 1.0 / n),
                                      size=part.stop - part.start).astype(float)
            boots[part] = partial_from_corr(_weighted_corr(zk, weights, products))
        alpha = (1.0 - ci_level) / 2.0
        lo, hi = np.nanquantile(boots, [alpha, 1.0 - alpha], axis=0)
        idx = np.flatnonzero(keep[1:])
        est[idx], low[idx], high[idx] = full, lo, hi
    return pd.DataFrame({"partial_rho": est, "partial_ci_low": low, "partial_ci_high": high})


def rank_correlations(values: np.ndarray) -> np.ndarray:
    """Within-style Spearman correlations between analytes (normal scores; missing at 0)."""
    z = np.column_stack([normal_scores(values[:, j]) for j in range(values.shape[1])])
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.corrcoef(z, rowvar=False)


def determination(corr: np.ndarray) -> np.ndarray:
    """Each analyte's R^2 on the others, ``1 - 1 / P_jj`` (pseudo-inverse: an exact
    identity gives 1, not an error)."""
    prec = np.linalg.pinv(np.nan_to_num(corr, nan=0.0))
    with np.errstate(divide="ignore"):
        return np.clip(1.0 - 1.0 / np.diagonal(prec), 0.0, 1.0)


def assign_roles(part: pd.DataFrame, corr: np.ndarray, analytes: list[str]) -> pd.DataFrame:
    """The ``role`` and ``moves_with`` of the drivers of one style.

    Parameters
    ----------
    part : DataFrame
        The style's driver rows (``analyte``, ``is_driver``, ``cliffs_delta`` and the
        partial columns), in the order of ``analytes``.
    corr : ndarray
        Within-style rank correlations between ``analytes``.
    analytes : list of str

    Returns
    -------
    DataFrame
        ``role`` and ``moves_with``, indexed like ``part``.
    """
    pos = {a: i for i, a in enumerate(analytes)}
    role = pd.Series("", index=part.index, dtype=object)
    moves = pd.Series("", index=part.index, dtype=object)
    drivers = part[part["is_driver"].astype(bool)]
    r2 = determination(corr)
    direct = []
    for k, row in drivers.iterrows():
        sign = np.sign(row["cliffs_delta"])
        if r2[pos[row["analyte"]]] >= COLLINEAR:
            continue  # almost a function of the others: its own share cannot be told apart
        if (sign > 0 and row["partial_ci_low"] > 0) or (sign < 0 and row["partial_ci_high"] < 0):
            role[k] = "direct"
            direct.append(row["analyte"])
    for k, row in drivers.iterrows():
        if role[k]:
            continue
        i = pos[row["analyte"]]

        def strength(other: str, i: int = i) -> float:
            r = corr[i, pos[other]]
            return abs(r) if np.isfinite(r) else 0.0

        best = max(direct, key=strength, default="")
        if best and strength(best) >= MOVES_WITH_MIN and r2[i] < COLLINEAR:
            role[k], moves[k] = "indirect", best
            continue
        others = [a for a in drivers["analyte"] if a != row["analyte"]]
        twin = max(others, key=strength, default="")
        role[k] = "unclear"
        moves[k] = twin if twin and strength(twin) >= MOVES_WITH_MIN else ""
    return pd.DataFrame({"role": role, "moves_with": moves})


def conditional_effects(groups: list[Group], observed: dict[str, np.ndarray],
                        grades: np.ndarray, bootstrap: int, ci_level: float, seed: int
                        ) -> dict[str, pd.DataFrame]:
    """The partial effects (:func:`partial_effects`) of every trusted style with at least
    10 graded lots, indexed by analyte; each style draws from its own keyed stream, so
    this may run beside the rest of the profile (it reads nothing the drivers decide)."""
    analytes = list(observed)
    out = {}
    for group in groups:
        if group.style == POOLED or not group.trusted:
            continue
        rows = group.rows[np.isfinite(grades[group.rows])]
        if len(rows) < 10:
            continue
        x = np.column_stack([observed[a][rows] for a in analytes])
        rng = stats.keyed_rng(seed, "partial", group.style)
        eff = partial_effects(x, grades[rows], bootstrap, ci_level, rng)
        eff.index = analytes
        out[group.style] = eff
    return out


def add_conditional(drivers: pd.DataFrame, groups: list[Group],
                    observed: dict[str, np.ndarray], grades: np.ndarray, bootstrap: int,
                    ci_level: float, seed: int,
                    effects: dict[str, pd.DataFrame] | None = None) -> pd.DataFrame:
    """``drivers`` with the partial columns filled for every trusted style.

    Parameters
    ----------
    drivers : DataFrame
        The marked drivers table (``is_driver`` decided).
    groups : list of Group
    observed : dict
        Analyte -> measured values of every lot (NaN where missing or imputed).
    grades : ndarray
    bootstrap : int
    ci_level : float
    seed : int
        The profile's seed; each style draws from its own keyed stream.
    effects : dict, optional
        :func:`conditional_effects` of the same arguments, when already computed.

    Returns
    -------
    DataFrame
        A copy with :data:`PARTIAL_COLUMNS` (NaN / empty for the pooled range and
        untrusted styles).
    """
    out = drivers.copy()
    for col in PARTIAL_COLUMNS[:3]:
        out[col] = np.nan
    for col in PARTIAL_COLUMNS[3:]:
        out[col] = ""
    analytes = list(observed)
    if effects is None:
        effects = conditional_effects(groups, observed, grades, bootstrap, ci_level, seed)
    for group in groups:
        if group.style not in effects:
            continue
        eff = effects[group.style]
        rows = group.rows[np.isfinite(grades[group.rows])]
        x = np.column_stack([observed[a][rows] for a in analytes])
        mask = (out["style"] == group.style).to_numpy()
        idx = out.index[mask]
        by = out.loc[idx, "analyte"]
        for col in PARTIAL_COLUMNS[:3]:
            out.loc[idx, col] = eff.loc[by, col].to_numpy()
        order = [analytes.index(a) for a in by]
        roles = assign_roles(out.loc[idx], rank_correlations(x)[np.ix_(order, order)], list(by))
        out.loc[idx, "role"] = roles["role"]
        out.loc[idx, "moves_with"] = roles["moves_with"]
    return out
