"""The statistics of the profiles, as small pure functions over arrays.

* Cliff's delta (Cliff 1993, Psychological Bulletin 114(3)): P(X > Y) - P(X < Y)
  over all pairs, X the top band, Y the bottom band; equals 2U / (n1 n2) - 1
  with U the Mann-Whitney statistic of X (ties count half).
* Hedges' g (Hedges 1981; Hedges and Olkin 1985): the standardised mean
  difference with pooled SD, times J = 1 - 3 / (4 (n1 + n2) - 9); its standard
  error sqrt((n1 + n2) / (n1 n2) + g^2 / (2 (n1 + n2))) gives a normal CI.
* Benjamini-Hochberg adjusted p-values (Benjamini and Hochberg 1995, JRSS B 57(1)).
* Youden's J (Youden 1950, Cancer 3(1)): the cut maximising sensitivity +
  specificity - 1; the AUC, U / (n1 n2), in the direction of the effect.
* The bootstrap (Efron and Tibshirani 1993): percentile intervals from
  resampling each band with replacement. Resampling is expressed as
  multiplicities (how often each lot is drawn), drawn once per style and
  reused for every analyte; with the values sorted once, each resample's
  Mann-Whitney U and ROC curve come from cumulative sums, so B resamples cost
  O(B (n1 + n2)) per analyte instead of O(B n1 n2).

Magnitude labels of Cliff's delta follow Romano et al. (2006): |delta| below
0.147 negligible, below 0.33 small, below 0.474 medium, else large.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse
from scipy import stats

CHUNK_CELLS = 4_000_000  # matrix cells per bootstrap block, to bound memory


def cliffs_delta(x: np.ndarray, y: np.ndarray) -> float:
    """Cliff's delta of ``x`` against ``y`` (ties count half)."""
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    n1, n2 = x.size, y.size
    ranks = stats.rankdata(np.concatenate([x, y]))
    u = ranks[:n1].sum() - n1 * (n1 + 1) / 2
    return float(2.0 * u / (n1 * n2) - 1.0)


def magnitude(delta: float) -> str:
    """Romano et al. (2006) label of |Cliff's delta|."""
    d = abs(delta)
    if not np.isfinite(d):
        return ""
    if d < 0.147:
        return "negligible"
    if d < 0.33:
        return "small"
    if d < 0.474:
        return "medium"
    return "large"


@dataclass(frozen=True)
class HedgesG:
    """Hedges' g with its small-sample correction factor and a normal CI."""

    g: float
    correction: float
    se: float
    ci_low: float
    ci_high: float


def hedges_g(x: np.ndarray, y: np.ndarray, level: float = 0.95) -> HedgesG:
    """Hedges' g of ``x`` against ``y``.

    d = (mean x - mean y) / s_pooled with s_pooled^2 = ((n1 - 1) s1^2 + (n2 - 1) s2^2)
    / (n1 + n2 - 2); g = J d with J = 1 - 3 / (4 (n1 + n2) - 9).
    """
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    n1, n2 = x.size, y.size
    pooled = ((n1 - 1) * x.var(ddof=1) + (n2 - 1) * y.var(ddof=1)) / (n1 + n2 - 2)
    correction = 1.0 - 3.0 / (4.0 * (n1 + n2) - 9.0)
    if pooled <= 0:
        return HedgesG(float("nan"), correction, float("nan"), float("nan"), float("nan"))
    g = correction * (x.mean() - y.mean()) / np.sqrt(pooled)
    se = float(np.sqrt((n1 + n2) / (n1 * n2) + g**2 / (2.0 * (n1 + n2))))
    z = stats.norm.ppf(0.5 + level / 2)
    return HedgesG(float(g), correction, se, float(g - z * se), float(g + z * se))


def mann_whitney_p(x: np.ndarray, y: np.ndarray) -> float:
    """Two-sided Mann-Whitney U p-value (normal approximation, tie-corrected)."""
    if np.ptp(np.concatenate([x, y])) == 0:
        return 1.0
    return float(stats.mannwhitneyu(x, y, alternative="two-sided", method="asymptotic").pvalue)


def bh_adjust(p: np.ndarray) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (q-values); NaN stays NaN."""
    p = np.asarray(p, dtype=float)
    out = np.full(p.shape, np.nan)
    ok = np.isfinite(p)
    m = int(ok.sum())
    if m == 0:
        return out
    values = p[ok]
    order = np.argsort(values, kind="stable")
    ranked = values[order] * m / np.arange(1, m + 1)
    adjusted = np.minimum.accumulate(ranked[::-1])[::-1]
    q = np.empty(m)
    q[order] = np.minimum(adjusted, 1.0)
    out[ok] = q
    return out


def spearman_rho(x: np.ndarray, y: np.ndarray) -> float:
    """Spearman's rank correlation; NaN when either side is constant or too short."""
    ok = np.isfinite(x) & np.isfinite(y)
    if ok.sum() < 3 or np.ptp(x[ok]) == 0 or np.ptp(y[ok]) == 0:
        return float("nan")
    return float(stats.spearmanr(x[ok], y[ok]).statistic)


# --------------------------------------------------------------------------- counts machinery


@dataclass(frozen=True)
class Sorted:
    """Distinct sorted values of two bands and where each lot's value sits.

    ``top_valid`` / ``bottom_valid`` mark the band's lots with a value; lots
    without one simply carry no weight.
    """

    values: np.ndarray
    top_pos: np.ndarray
    bottom_pos: np.ndarray
    top_valid: np.ndarray
    bottom_valid: np.ndarray

    @classmethod
    def of(cls, top: np.ndarray, bottom: np.ndarray) -> Sorted:
        top_valid, bottom_valid = np.isfinite(top), np.isfinite(bottom)
        values = np.unique(np.concatenate([top[top_valid], bottom[bottom_valid]]))
        return cls(values, np.searchsorted(values, top[top_valid]),
                   np.searchsorted(values, bottom[bottom_valid]), top_valid, bottom_valid)

    def counts(self, weights: np.ndarray, band: str) -> np.ndarray:
        """Total weight at each distinct value (rows) per resample (columns).

        ``weights`` is lots x resamples, as :func:`resample_weights` gives it.
        """
        pos = self.top_pos if band == "top" else self.bottom_pos
        valid = self.top_valid if band == "top" else self.bottom_valid
        onehot = scipy.sparse.csr_matrix(
            (np.ones(pos.size, dtype=weights.dtype), (pos, np.flatnonzero(valid))),
            shape=(self.values.size, valid.size))
        return np.asarray(onehot @ weights)


def delta_from_counts(top: np.ndarray, bottom: np.ndarray) -> np.ndarray:
    """Cliff's delta per resample (columns) from weights at the distinct values (rows)."""
    top = top.astype(np.float64, copy=False)
    bottom = bottom.astype(np.float64, copy=False)
    below = np.cumsum(bottom, axis=0) - bottom  # bottom weight strictly below each value
    u = np.einsum("kb,kb->b", top, below + 0.5 * bottom)
    n1, n2 = top.sum(axis=0), bottom.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return 2.0 * u / (n1 * n2) - 1.0


def youden_from_counts(top: np.ndarray, bottom: np.ndarray, values: np.ndarray,
                       higher_better: bool) -> tuple[np.ndarray, np.ndarray]:
    """Youden cut and J per resample (columns of the weight matrices).

    ``higher_better``: a lot is called top when its value >= cut; otherwise when
    its value <= cut. Ties in J go to the cut scikit-learn's ``roc_curve``
    lists first (the highest cut, or the lowest for lower_better).
    """
    # weights are whole multiplicities, so J scaled by n1 n2 is an exact integer in
    # float64: ties are then true ties, decided by the rule, not by rounding
    top = top.astype(np.float64, copy=False)
    bottom = bottom.astype(np.float64, copy=False)
    n1 = top.sum(axis=0, keepdims=True)
    n2 = bottom.sum(axis=0, keepdims=True)
    if higher_better:
        score = (np.cumsum(top[::-1], axis=0)[::-1] * n2
                 - np.cumsum(bottom[::-1], axis=0)[::-1] * n1)
        best = score.shape[0] - 1 - np.argmax(score[::-1], axis=0)
    else:
        score = np.cumsum(top, axis=0) * n2 - np.cumsum(bottom, axis=0) * n1
        best = np.argmax(score, axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        j = score / (n1 * n2)
    return values[best], j[best, np.arange(j.shape[1])]


def resample_weights(rng: np.random.Generator, n: int, b: int) -> np.ndarray:
    """Multiplicities of ``n`` lots (rows) in each of ``b`` resamples with replacement."""
    draws = rng.integers(0, n, size=(b, n), dtype=np.int64)
    draws += (np.arange(b, dtype=np.int64) * n)[:, None]
    counts = np.bincount(draws.ravel(), minlength=b * n).reshape(b, n)
    return np.ascontiguousarray(counts.T, dtype=np.float32)


def blocks(b: int, width: int) -> list[slice]:
    """Slices of the resamples so that one block holds at most CHUNK_CELLS cells."""
    step = max(1, CHUNK_CELLS // max(width, 1))
    return [slice(i, min(i + step, b)) for i in range(0, b, step)]


def quantile_or_nan(x: np.ndarray, q: float) -> float:
    """The ``q`` quantile of ``x``; NaN for an empty array."""
    return float(np.quantile(x, q)) if x.size else float("nan")


def iqr_or_nan(x: np.ndarray) -> float:
    """The interquartile range of ``x``; NaN for an empty array."""
    return float(np.subtract(*np.quantile(x, [0.75, 0.25]))) if x.size else float("nan")
