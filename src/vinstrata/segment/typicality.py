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
  into a standard-normal z, the outlier score (chi-square(p) for a style too
  small for the F law). The tail is computed in logarithms all the way out
  (:func:`log_f_tail`, :func:`log_chi2_tail`), so the score keeps growing with
  the distance instead of saturating for far outliers;
* a new lot is atypical when its score exceeds the training lots'
  ``place.atypical_percentile`` percentile (:func:`atypical_line`). That line
  is calibrated, not assumed: lots drawn afresh from a style's own chemistry
  (correlated, one analyte log-normal) exceed the 95th percentile line 5 % of
  the time within 2 points for styles of 40, 200 and 2,000 lots
  (``tests/test_typicality.py``). The score itself is a z only approximately:
  the robust estimate departs from Hotelling's law in small styles, which is
  why the line is taken from the training lots' own scores.

:class:`StyleShape` is plain data and stored with the model; new lots are
scored against the stored shapes, the same way as the training lots.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special, stats
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


# The tails below are computed by scipy where it is exact and, beyond, by the continued
# fractions of the incomplete gamma and beta functions (Press et al., Numerical Recipes,
# 2nd ed., sections 6.2 and 6.4, from memory) evaluated in logarithms with Lentz's
# method, so that no tail underflows to 0.
_SCIPY_FLOOR = -500.0  # below this log tail, scipy's double-precision tails lose precision
_TINY = 1e-300
_STEPS = 2000
_EPS = 1e-15


def _lentz(a_of: object, b_of: object, b0: np.ndarray) -> np.ndarray:
    """The continued fraction b0 + a1 / (b1 + a2 / (b2 + ...)) by Lentz's method, elementwise.

    ``a_of(k)`` and ``b_of(k)`` give the k-th partial numerators and denominators.
    """
    f = np.where(b0 == 0, _TINY, b0)
    c, d = f.copy(), np.zeros_like(f)
    done = np.zeros(f.shape, dtype=bool)
    # converged elements keep iterating (their value is frozen) and may overflow: harmless
    with np.errstate(all="ignore"):
        return _lentz_steps(a_of, b_of, f, c, d, done)


def _lentz_steps(a_of: object, b_of: object, f: np.ndarray, c: np.ndarray, d: np.ndarray,
                 done: np.ndarray) -> np.ndarray:
    for k in range(1, _STEPS + 1):
        a, b = a_of(k), b_of(k)  # type: ignore[operator]
        d = b + a * d
        d = np.where(d == 0, _TINY, d)
        c = b + a / c
        c = np.where(c == 0, _TINY, c)
        d = 1.0 / d
        step = c * d
        f = np.where(done, f, f * step)
        done |= np.abs(step - 1.0) < _EPS
        if done.all():
            break
    return f


def _log_gamma_upper_cf(a: float, x: np.ndarray) -> np.ndarray:
    """log Q(a, x), the regularised upper incomplete gamma function, for x > a + 1."""
    # Q(a, x) = exp(-x) x^a / Gamma(a) * 1 / (x + 1 - a - 1 (1 - a) / (x + 3 - a - ...))
    cf = _lentz(lambda k: -k * (k - a), lambda k: x + 2 * k + 1 - a, x + 1 - a)
    return -x + a * np.log(x) - special.gammaln(a) - np.log(cf)


def _log_beta_cf(a: float, b: float, x: np.ndarray, log_x: np.ndarray,
                 log_1mx: np.ndarray) -> np.ndarray:
    """log I_x(a, b), the regularised incomplete beta function, for x < (a + 1) / (a + b + 2)."""
    def num(k: int) -> np.ndarray:
        m = k // 2
        if k % 2:  # odd terms d_(2m+1)
            return -(a + m) * (a + b + m) * x / ((a + 2 * m) * (a + 2 * m + 1))
        return m * (b - m) * x / ((a + 2 * m - 1) * (a + 2 * m))

    cf = _lentz(num, lambda k: np.ones_like(x), np.ones_like(x))
    return a * log_x + b * log_1mx - special.betaln(a, b) - np.log(a) - np.log(cf)


def log_chi2_tail(d2: np.ndarray, p: int) -> np.ndarray:
    """log P(chi-square(p) > d2), accurate far into the tail (no underflow to -inf)."""
    d2 = np.maximum(np.asarray(d2, dtype=float), 0.0)
    out = np.array(stats.chi2.logsf(d2, p), dtype=float)
    far = (out < _SCIPY_FLOOR) & (d2 / 2 > p / 2 + 1)
    if far.any():
        out[far] = _log_gamma_upper_cf(p / 2, d2[far] / 2)
    return out


def log_f_tail(f: np.ndarray, d1: int, d2: int) -> np.ndarray:
    """log P(F(d1, d2) > f), accurate far into the tail (no underflow to -inf).

    P(F > f) = I_x(d2 / 2, d1 / 2) with x = d2 / (d2 + d1 f).
    """
    f = np.maximum(np.asarray(f, dtype=float), 0.0)
    out = np.array(stats.f.logsf(f, d1, d2), dtype=float)
    a, b = d2 / 2, d1 / 2
    with np.errstate(divide="ignore"):
        x = d2 / (d2 + d1 * f)
    far = (out < _SCIPY_FLOOR) & (x < (a + 1) / (a + b + 2))
    if far.any():
        ff = f[far]
        log_x = np.log(d2) - np.log(d2 + d1 * ff)
        log_1mx = np.log(d1 * ff) - np.log(d2 + d1 * ff)
        out[far] = _log_beta_cf(a, b, x[far], log_x, log_1mx)
    return out


def z_of_log_tail(log_tail: np.ndarray) -> np.ndarray:
    """The standard-normal z with upper tail probability exp(log_tail), exact at any depth."""
    return -special.ndtri_exp(np.minimum(np.asarray(log_tail, dtype=float), 0.0))


def distance_score(d2: np.ndarray, p: int, support: int) -> np.ndarray:
    """Standard-normal z of squared distances, allowing for an estimated covariance.

    A lot judged against a centre and covariance estimated from m other lots
    has d2 m (m - p) / (p (m + 1) (m - 1)) ~ F(p, m - p) (Hotelling's T2 for a new
    observation); its upper tail probability is turned into a z. With few lots
    per analyte this stops small styles in many analytes from calling typical
    lots outliers; with many it is the chi-square(p) tail. A style with at most
    p + 2 lots has no usable F law and gets the chi-square tail.
    """
    d2 = np.maximum(np.asarray(d2, dtype=float), 0.0)
    m = int(support)
    if m <= p + 2:
        return z_of_log_tail(log_chi2_tail(d2, p))
    f = d2 * m * (m - p) / (p * (m + 1) * (m - 1))
    return z_of_log_tail(log_f_tail(f, p, m - p))


def atypical_line(scores: np.ndarray, percentile: float) -> float:
    """The outlier score above which a new lot is atypical: a percentile of ``scores``.

    The percentile is Hyndman and Fan's (1996, The American Statistician 50(4))
    definition 6, the Weibull plotting position p (n + 1): a new lot exchangeable
    with the n scored lots then exceeds the line with probability 1 - p even for
    small n, where numpy's default (definition 7) lets about
    (0.05 n + 0.95) / (n + 1) through at the 95th percentile, 7 % for 40 lots.

    Parameters
    ----------
    scores : ndarray
        The training lots' outlier scores (NaN ignored).
    percentile : float
        ``place.atypical_percentile``, 0-100.

    Returns
    -------
    float
    """
    scores = np.asarray(scores, dtype=float)
    return float(np.percentile(scores[np.isfinite(scores)], percentile, method="weibull"))


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
