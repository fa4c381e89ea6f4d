"""The outlier score: exact tails, no saturation, and the atypical line calibrated.

Outside checks: SciPy's chi-square and F tails (``scipy.stats.chi2.logsf``,
``scipy.stats.f.logsf``) where they are exact; closed forms far beyond, where SciPy
underflows: P(chi-square(2) > x) = exp(-x / 2) and P(F(2, nu) > f) = (1 + 2 f / nu)^(-nu/2)
(both follow from the densities by direct integration); Hyndman and Fan (1996), The
American Statistician 50(4), definition 6, for the percentile of the atypical line.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps

from vinstrata.segment import typicality as typ
from vinstrata.segment.transform import fit_scaler

# --------------------------------------------------------------------------- exact tails


@pytest.mark.parametrize("p", [2, 5, 12, 17])
def test_chi2_log_tail_matches_scipy_where_scipy_is_exact(p: int) -> None:
    x = np.array([0.5, 3.0, 20.0, 90.0, 400.0, 900.0])
    np.testing.assert_allclose(typ.log_chi2_tail(x, p), sps.chi2.logsf(x, p), rtol=1e-12)
    # the far-tail continued fraction itself, where scipy is still exact
    far = np.array([200.0, 600.0, 1200.0])
    np.testing.assert_allclose(typ._log_gamma_upper_cf(p / 2, far / 2), sps.chi2.logsf(far, p),
                               rtol=1e-12)


@pytest.mark.parametrize(("d1", "d2"), [(2, 7), (12, 30), (12, 300), (5, 5000), (16, 60_000)])
def test_f_log_tail_matches_scipy_where_scipy_is_exact(d1: int, d2: int) -> None:
    f = np.array([0.2, 1.0, 5.0, 20.0, 100.0])
    ref = sps.f.logsf(f, d1, d2)
    exact = np.isfinite(ref)  # F(16, 60000) at f = 100 already underflows in scipy
    np.testing.assert_allclose(typ.log_f_tail(f, d1, d2)[exact], ref[exact], rtol=1e-11)
    # the continued fraction alone, on points where scipy is still exact
    f = np.array([5.0, 20.0, 60.0])
    a, b = d2 / 2, d1 / 2
    x = d2 / (d2 + d1 * f)
    got = typ._log_beta_cf(a, b, x, np.log(d2) - np.log(d2 + d1 * f),
                           np.log(d1 * f) - np.log(d2 + d1 * f))
    np.testing.assert_allclose(got, sps.f.logsf(f, d1, d2), rtol=1e-11)


def test_tails_follow_the_closed_forms_far_beyond_scipy() -> None:
    # chi-square(2): P(X > x) = exp(-x/2) exactly; scipy's logsf is -inf from x of about 1500
    x = np.array([10.0, 1e3, 1e4, 1e6, 1e9])
    np.testing.assert_allclose(typ.log_chi2_tail(x, 2), -x / 2, rtol=1e-12)
    # F(2, nu): P(F > f) = (1 + 2 f / nu)^(-nu / 2); large nu underflows in scipy
    for nu in (40, 60_000):
        f = np.array([10.0, 100.0, 1e3, 1e4, 1e6])
        expected = -nu / 2 * np.log1p(2 * f / nu)
        np.testing.assert_allclose(typ.log_f_tail(f, 2, nu), expected, rtol=1e-10)
    assert np.isinf(sps.f.logsf(1e4, 2, 60_000))  # what the closed form replaces


def test_z_of_log_tail_is_the_normal_quantile_at_any_depth() -> None:
    # scipy.special.ndtri_exp inverts the log normal cdf; checked against norm.isf where the
    # tail is representable, and against the tail asymptote z ~ sqrt(-2 log tail) beyond
    log_tail = np.array([-0.1, -3.0, -30.0, -300.0])
    np.testing.assert_allclose(typ.z_of_log_tail(log_tail), sps.norm.isf(np.exp(log_tail)),
                               rtol=1e-10)
    deep = np.array([-1e4, -1e6])
    z = typ.z_of_log_tail(deep)
    np.testing.assert_allclose(sps.norm.logsf(z), deep, rtol=1e-9)
    assert np.all(z < np.sqrt(-2 * deep)) and np.all(z > 0.99 * np.sqrt(-2 * deep))


@pytest.mark.parametrize("support", [0, 10, 40, 2000, 100_000])
def test_the_score_keeps_growing_with_distance(support: int) -> None:
    # no saturation: a lot twice as far (in d2) always scores higher, out to d2 = 1e12
    d2 = np.geomspace(1.0, 1e12, 200)
    scores = typ.distance_score(d2, 12, support)
    assert np.all(np.isfinite(scores))
    assert np.all(np.diff(scores) > 0)
    # each z carries its tail exactly: scipy's normal log tail of z gives the log tail back
    # (the old score floored the tail at exp(-700), so every z stopped near 37.5)
    if support <= 14:
        log_tail = typ.log_chi2_tail(d2, 12)
    else:
        f = d2 * support * (support - 12) / (12 * (support + 1) * (support - 1))
        log_tail = typ.log_f_tail(f, 12, support - 12)
    np.testing.assert_allclose(sps.norm.logsf(scores), log_tail, rtol=1e-9)
    if log_tail[-1] < -800:
        assert scores[-1] > 39


def test_score_matches_the_f_law_of_a_new_lot() -> None:
    # Hotelling's T2 for a new observation: d2 m (m - p) / (p (m + 1) (m - 1)) ~ F(p, m - p);
    # z is its upper-tail normal quantile (scipy as the reference)
    p, m = 8, 60
    d2 = np.array([2.0, 8.0, 20.0, 60.0])
    f = d2 * m * (m - p) / (p * (m + 1) * (m - 1))
    expected = sps.norm.isf(sps.f.sf(f, p, m - p))
    np.testing.assert_allclose(typ.distance_score(d2, p, m), expected, rtol=1e-9)


# --------------------------------------------------------------------------- the atypical line


def test_atypical_line_is_hyndman_fan_definition_6() -> None:
    # definition 6: the k-th of n sorted scores sits at probability k / (n + 1)
    scores = np.arange(1.0, 40.0)  # 39 scores: 38 / 40 = 0.95 is exactly the 38th
    assert typ.atypical_line(scores, 95.0) == 38.0
    assert typ.atypical_line(np.append(scores, np.nan), 95.0) == 38.0  # NaN ignored


def test_atypical_line_lets_the_configured_share_of_exchangeable_lots_through() -> None:
    # a new score exchangeable with n scored ones exceeds the line with probability 5 %
    # (rank argument); numpy's default percentile would let 7.2 % through at n = 40
    rng = np.random.default_rng(4)
    n, reps = 40, 20_000
    scored = rng.standard_normal((reps, n))
    new = rng.standard_normal(reps)
    lines = np.percentile(scored, 95.0, axis=1, method="weibull")
    assert typ.atypical_line(scored[0], 95.0) == pytest.approx(lines[0])
    share = np.mean(new > lines)
    assert share == pytest.approx(0.05, abs=0.005)  # binomial SD 0.0015
    assert np.mean(new > np.percentile(scored, 95.0, axis=1)) > 0.065


# --------------------------------------------------------------------------- calibration

ANALYTES = 12
_ORDER = np.random.default_rng(11).permutation(ANALYTES)
# correlations 0.8 between neighbours, 0.64 two apart, ... shuffled over the analytes
_CORR = (0.8 ** np.abs(np.subtract.outer(np.arange(ANALYTES), np.arange(ANALYTES))))[
    np.ix_(_ORDER, _ORDER)]
_CHOL = np.linalg.cholesky(_CORR)


def _chemistry(rng: np.random.Generator, n: int) -> pd.DataFrame:
    """Correlated normal chemistry, analyte a0 log-normal (a residual sugar, say)."""
    z = rng.standard_normal((n, ANALYTES)) @ _CHOL.T
    x = 6.0 + z
    x[:, 0] = 2.0 * np.exp(0.7 * z[:, 0])
    return pd.DataFrame(x, columns=[f"a{i}" for i in range(ANALYTES)])


def _atypical_share(lots: int, fits: int, new_lots: int, seed: int) -> tuple[float, float]:
    """Mean share (and its Monte-Carlo error) of fresh lots above the 95th percentile line.

    Each fit is a style of ``lots`` lots, scaled and shaped as the engine does
    (``fit_scaler``, ``fit_shape``), its line the percentile of its own lots'
    scores as placing takes it; the fresh lots come from the same chemistry.
    """
    rng = np.random.default_rng(seed)
    shares = []
    for _ in range(fits):
        train, fresh = _chemistry(rng, lots), _chemistry(rng, new_lots)
        scaler, _ = fit_scaler(train)
        shape = typ.fit_shape(scaler.transform(train))
        line = typ.atypical_line(shape.score(scaler.transform(train)), 95.0)
        shares.append(np.mean(shape.score(scaler.transform(fresh)) > line))
    shares = np.asarray(shares)
    return float(shares.mean()), float(shares.std(ddof=1) / np.sqrt(fits))


@pytest.mark.parametrize(("lots", "fits", "new_lots"), [(40, 200, 2000), (200, 100, 2000),
                                                         (2000, 20, 4000)])
def test_fresh_lots_of_a_style_are_atypical_at_the_configured_rate(lots: int, fits: int,
                                                                   new_lots: int) -> None:
    """A lot drawn from its style's own chemistry is atypical 5 % of the time, +-2 points.

    12 analytes correlated up to 0.8, one log-normal. Measured (mean share over the
    fits +- its Monte-Carlo error, the SD of the shares over sqrt(fits)): 40 lots
    5.7 +- 0.3 %, 200 lots 5.5 +- 0.2 %, 2,000 lots 5.3 +- 0.1 %. With numpy's
    default percentile the 40-lot style let about 8 % through (the line then sits
    too low for small styles).
    """
    share, error = _atypical_share(lots, fits, new_lots, seed=lots)
    assert abs(share - 0.05) <= 0.02, (share, error)
    assert error < 0.005  # the check is sharp enough to fail a miscalibrated line
