"""How typical a lot's chemistry is of a style: the outlier score.

UMAP with min_dist 0 pulls lots that resemble no style into the nearest
cluster, so typicality is judged in the scaled chemistry itself, not in the
clustering space. Each style's chemistry is summarised by a robust centre and
covariance, and a lot's score is its Mahalanobis distance to that centre:

* the estimate is a minimum-covariance-determinant one (Rousseeuw and Van
  Driessen 1999, "A fast algorithm for the minimum covariance determinant
  estimator", Technometrics 41): start from the half of the style's lots with
  the smallest coordinate-wise robust distances, repeat concentration steps
  (refit on the half nearest the current fit) until the half is stable, then
  reweight with the lots inside the 97.5 % chi-square quantile. Lots that fit
  no style lie far from the style's chemistry, so they cannot pull the estimate
  even where they are numerous inside one UMAP cluster;
* the covariance is shrunk towards its diagonal scale (Ledoit and Wolf 2004)
  so that small styles in many analytes stay well conditioned;
* the squared distance of a lot to a normal style whose centre and covariance
  were estimated from m lots follows a scaled F(p, m - p) distribution
  (Hotelling's T2 for a new observation); its upper tail probability is turned
  into a standard-normal z, the outlier score. For large m this is the
  chi-square(p) tail (computed then by the Wilson-Hilferty cube-root
  transform). A score of 3.5 (the default cutoff for "fits no style") is a
  chance of about 2 in 10,000 for a typical lot.

:class:`StyleShape` is plain data and stored with the model; new lots are
scored against the stored shapes, the same way as the training lots.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats
from sklearn.covariance import ledoit_wolf

MAX_STEPS = 20
REWEIGHT_QUANTILE = 0.975


@dataclass(frozen=True)
class StyleShape:
    """Robust centre and precision matrix of one style's scaled chemistry.

    ``support`` is the number of lots the final estimate rests on; it sets
    the finite-sample correction of the score.
    """

    centre: np.ndarray
    precision: np.ndarray
    support: int = 0

    @property
    def dims(self) -> int:
        return int(self.centre.shape[0])

    def distance2(self, x: np.ndarray) -> np.ndarray:
        """Squared Mahalanobis distance of each row of ``x`` to the centre."""
        diff = np.atleast_2d(x) - self.centre
        return np.einsum("ij,jk,ik->i", diff, self.precision, diff)

    def score(self, x: np.ndarray) -> np.ndarray:
        """Outlier score of each row: a standard-normal z of its squared distance."""
        return distance_score(self.distance2(x), self.dims, self.support)

    def to_dict(self) -> dict[str, object]:
        return {"centre": self.centre.tolist(), "precision": self.precision.tolist(),
                "support": int(self.support)}

    @classmethod
    def from_dict(cls, data: dict[str, object]) -> StyleShape:
        return cls(centre=np.asarray(data["centre"], dtype=float),
                   precision=np.asarray(data["precision"], dtype=float),
                   support=int(data.get("support", 0)))  # type: ignore[arg-type]


def wilson_hilferty(d2: np.ndarray, p: int) -> np.ndarray:
    """Standard-normal z of chi-square(p) values by the Wilson-Hilferty transform."""
    c = 2.0 / (9.0 * p)
    return (np.cbrt(np.maximum(d2, 0.0) / p) - (1.0 - c)) / np.sqrt(c)


def distance_score(d2: np.ndarray, p: int, support: int) -> np.ndarray:
    """Standard-normal z of squared distances, allowing for an estimated covariance.

    A lot judged against a centre and covariance estimated from m other lots
    has d2 m (m - p) / (p (m + 1) (m - 1)) ~ F(p, m - p) (Hotelling's T2 for a new
    observation); its upper tail probability is turned into a z. With many lots
    per analyte this is the Wilson-Hilferty z of chi-square(p); with few it
    stops small styles in many analytes from calling typical lots outliers.
    """
    d2 = np.maximum(np.asarray(d2, dtype=float), 0.0)
    m = int(support)
    if m <= p + 2 or m > 50_000:
        return wilson_hilferty(d2, p)
    f = d2 * m * (m - p) / (p * (m + 1) * (m - 1))
    tail = stats.f.logsf(f, p, m - p)
    return _z_of_log_tail(tail)


def _z_of_log_tail(log_tail: np.ndarray) -> np.ndarray:
    """z with upper tail probability exp(log_tail), accurate far into the tail."""
    return stats.norm.isf(np.exp(np.maximum(log_tail, -700.0)))

def _mean_cov(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    centre = x.mean(axis=0)
    if len(x) < 2:
        return centre, np.eye(x.shape[1])
    cov, _ = ledoit_wolf(x, assume_centered=False)
    return centre, cov


def _precision(cov: np.ndarray) -> np.ndarray:
    floor = 1e-9 * max(float(np.trace(cov)) / cov.shape[0], 1e-12)
    return np.linalg.pinv(cov + floor * np.eye(cov.shape[0]), hermitian=True)


def fit_shape(x: np.ndarray) -> StyleShape:
    """Robust centre and covariance of one style's lots (rows of ``x``).

    Parameters
    ----------
    x : ndarray, shape (n_lots, p)
        Scaled chemistry of the style's lots.

    Returns
    -------
    StyleShape
    """
    x = np.asarray(x, dtype=float)
    n, p = x.shape
    if n <= 2:
        centre = x.mean(axis=0) if n else np.zeros(p)
        return StyleShape(centre=centre, precision=np.eye(p))
    h = min(n, max((n + p + 1) // 2, 2))
    median = np.median(x, axis=0)
    mad = 1.4826 * np.median(np.abs(x - median), axis=0)
    mad = np.where(mad > 0, mad, np.maximum(x.std(axis=0), 1e-6))
    start = np.argsort((((x - median) / mad) ** 2).sum(axis=1), kind="stable")[:h]
    subset = np.sort(start)
    for _ in range(MAX_STEPS):
        centre, cov = _mean_cov(x[subset])
        d2 = StyleShape(centre, _precision(cov)).distance2(x)
        nearer = np.sort(np.argsort(d2, kind="stable")[:h])
        if np.array_equal(nearer, subset):
            break
        subset = nearer
    # consistency: the h nearest lots of a clean style are a chi-square sample cut
    # at its h/n quantile, so their median distance sits at the h/(2n) quantile;
    # using the half alone keeps lots that fit no style out of the correction
    centre, cov = _mean_cov(x[subset])
    d2 = StyleShape(centre, _precision(cov)).distance2(x[subset])
    cov = cov * (np.median(d2) / stats.chi2.ppf(0.5 * h / n, p))
    d2 = StyleShape(centre, _precision(cov)).distance2(x)
    keep = d2 <= stats.chi2.ppf(REWEIGHT_QUANTILE, p)
    support = h
    if keep.sum() > p:
        centre, cov = _mean_cov(x[keep])
        d2 = StyleShape(centre, _precision(cov)).distance2(x[keep])
        # the kept lots are a chi-square sample cut at its 97.5 % quantile
        target = stats.chi2.ppf(0.5 * REWEIGHT_QUANTILE, p)
        cov = cov * (np.median(d2) / target)
        support = int(keep.sum())
    return StyleShape(centre=centre, precision=_precision(cov), support=support)
