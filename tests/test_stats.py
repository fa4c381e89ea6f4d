"""The pure statistics of the profile stage, checked against the outside world.

Every check names its source: a reference implementation (SciPy, scikit-learn,
statsmodels), a published formula, or a published worked example. Where a number
comes from a secondary source or from memory, the comment says so.
"""

from __future__ import annotations

import dataclasses
import math
from fractions import Fraction

import numpy as np
import pytest
from scipy import special
from scipy import stats as sps
from sklearn.metrics import roc_auc_score, roc_curve
from statsmodels.stats.multitest import multipletests

from vinstrata.profile import stats

# --------------------------------------------------------------------------- helpers


def _tied_sample(rng: np.random.Generator, n: int, shift: float = 0.0) -> np.ndarray:
    """Normal values rounded to one decimal (and sometimes to integers): many ties."""
    values = rng.normal(shift, 1.0, n)
    return np.round(values, 0 if n % 2 else 1)


def _weights_from_draws(draws: np.ndarray, n: int) -> np.ndarray:
    """Lots x resamples multiplicities from explicit index draws (resamples x n)."""
    out = np.zeros((n, draws.shape[0]), dtype=np.float32)
    for b, idx in enumerate(draws):
        np.add.at(out[:, b], idx, 1.0)
    return out


def _exact_j(df: float) -> float:
    """Hedges (1981) exact correction J(df) = Gamma(df/2) / (sqrt(df/2) Gamma((df-1)/2))."""
    return math.exp(special.gammaln(df / 2) - special.gammaln((df - 1) / 2)) / math.sqrt(df / 2)


# --------------------------------------------------------------------------- Cliff's delta


@pytest.mark.parametrize("n1,n2", [(5, 7), (10, 10), (23, 41), (60, 35), (200, 150)])
def test_cliffs_delta_equals_mann_whitney_u_with_ties(n1: int, n2: int) -> None:
    # Cliff 1993, Psychological Bulletin 114(3): delta = P(X>Y) - P(X<Y) = 2U/(n1 n2) - 1,
    # U the Mann-Whitney statistic of x with ties counting half; U from SciPy.
    rng = np.random.default_rng(1000 + n1 * n2)
    for _ in range(5):
        x = rng.integers(0, 6, n1).astype(float)  # integers on a short scale: heavy ties
        y = rng.integers(0, 5, n2).astype(float)
        u = sps.mannwhitneyu(x, y).statistic
        assert stats.cliffs_delta(x, y) == pytest.approx(2 * u / (n1 * n2) - 1, abs=1e-12)
        xr, yr = _tied_sample(rng, n1, 0.3), _tied_sample(rng, n2)
        u = sps.mannwhitneyu(xr, yr).statistic
        assert stats.cliffs_delta(xr, yr) == pytest.approx(2 * u / (n1 * n2) - 1, abs=1e-12)


def test_cliffs_delta_is_the_pairwise_dominance_and_antisymmetric() -> None:
    # Cliff 1993: the definition over all pairs, counted directly; delta(y, x) = -delta(x, y).
    rng = np.random.default_rng(7)
    x, y = rng.integers(0, 4, 17).astype(float), rng.integers(0, 4, 13).astype(float)
    diff = np.sign(x[:, None] - y[None, :])
    assert stats.cliffs_delta(x, y) == pytest.approx(diff.mean(), abs=1e-12)
    assert stats.cliffs_delta(y, x) == pytest.approx(-diff.mean(), abs=1e-12)
    # complete separation gives +1 / -1
    assert stats.cliffs_delta([5.0, 6.0], [1.0, 2.0, 3.0]) == 1.0
    assert stats.cliffs_delta([1.0, 2.0], [5.0, 6.0, 7.0]) == -1.0


# --------------------------------------------------------------------------- bootstrap machinery


@pytest.mark.parametrize("n,b", [(1, 5), (7, 50), (60, 400), (333, 64)])
def test_resample_weights_are_multiplicities_of_n_draws(n: int, b: int) -> None:
    # Efron and Tibshirani 1993: a bootstrap resample draws n lots with replacement, so each
    # resample's multiplicities are non-negative integers summing to n.
    w = stats.resample_weights(np.random.default_rng(n + b), n, b)
    assert w.shape == (n, b)
    assert np.all(w >= 0)
    np.testing.assert_array_equal(w, np.round(w))
    np.testing.assert_array_equal(w.sum(axis=0), np.full(b, n))


def test_resample_weights_are_uniform_draws_with_replacement() -> None:
    # Multinomial(n, 1/n) margins: each multiplicity is Binomial(n, 1/n), mean 1 and
    # variance 1 - 1/n; P(lot absent) = (1 - 1/n)^n. With 50 x 4000 cells the sampling
    # error of these moments is below 0.01; a permutation (variance 0) or a biased draw fails.
    n, b = 50, 4000
    w = stats.resample_weights(np.random.default_rng(3), n, b).astype(float)
    assert w.var() == pytest.approx(1 - 1 / n, abs=0.03)
    assert (w == 0).mean() == pytest.approx((1 - 1 / n) ** n, abs=0.01)
    # every lot is drawn about equally often
    assert np.abs(w.mean(axis=1) - 1).max() < 0.1
    # the resamples differ from one another
    assert len({tuple(col) for col in w.T[:100]}) == 100


@pytest.mark.parametrize("n_top,n_bottom", [(12, 15), (40, 25), (80, 80)])
def test_vectorised_bootstrap_delta_equals_slow_resampled_delta(n_top: int, n_bottom: int) -> None:
    # Definition of the bootstrap (Efron and Tibshirani 1993) + Cliff 1993: for explicit
    # resamples, the delta from the sorted counts equals cliffs_delta of the resampled
    # arrays computed directly.
    rng = np.random.default_rng(n_top * 100 + n_bottom)
    top = rng.integers(0, 8, n_top).astype(float) + 0.5
    bottom = np.round(rng.normal(3.0, 2.0, n_bottom))
    b = 60
    draws_t = rng.integers(0, n_top, (b, n_top))
    draws_b = rng.integers(0, n_bottom, (b, n_bottom))
    sorted_ = stats.Sorted.of(top, bottom)
    fast = stats.delta_from_counts(
        sorted_.counts(_weights_from_draws(draws_t, n_top), "top"),
        sorted_.counts(_weights_from_draws(draws_b, n_bottom), "bottom"))
    slow = [stats.cliffs_delta(top[it], bottom[ib]) for it, ib in zip(draws_t, draws_b)]
    np.testing.assert_allclose(fast, slow, rtol=0, atol=1e-12)


def test_vectorised_delta_with_unit_weights_is_the_observed_delta() -> None:
    # Cliff 1993 via SciPy's U: one column of ones is the sample itself.
    rng = np.random.default_rng(11)
    top, bottom = _tied_sample(rng, 31, 0.4), _tied_sample(rng, 44)
    sorted_ = stats.Sorted.of(top, bottom)
    one_t, one_b = np.ones((31, 1), np.float32), np.ones((44, 1), np.float32)
    d = stats.delta_from_counts(sorted_.counts(one_t, "top"), sorted_.counts(one_b, "bottom"))
    u = sps.mannwhitneyu(top, bottom).statistic
    assert d.shape == (1,)
    assert d[0] == pytest.approx(2 * u / (31 * 44) - 1, abs=1e-12)


def test_sorted_counts_are_the_weight_at_each_distinct_value() -> None:
    # Plain counting: row k of counts is the total weight of the band's lots at values[k].
    top = np.array([3.0, 1.0, 3.0, np.nan, 2.0])
    bottom = np.array([2.0, 2.0, np.nan, 5.0])
    sorted_ = stats.Sorted.of(top, bottom)
    np.testing.assert_array_equal(sorted_.values, [1.0, 2.0, 3.0, 5.0])
    w_top = np.array([[1, 2], [3, 0], [1, 1], [9, 9], [0, 2]], dtype=np.float32)
    w_bottom = np.array([[1, 0], [1, 4], [7, 7], [2, 0]], dtype=np.float32)
    np.testing.assert_array_equal(sorted_.counts(w_top, "top"), [[3, 0], [0, 2], [2, 3], [0, 0]])
    np.testing.assert_array_equal(sorted_.counts(w_bottom, "bottom"),
                                  [[0, 0], [2, 4], [0, 0], [2, 0]])


def test_nan_lots_carry_no_weight_in_the_bootstrap() -> None:
    # Profiles leave unmeasured values out: a NaN lot drawn into a resample counts for
    # nothing, so the delta equals the slow delta of the resampled arrays with NaNs dropped,
    # and equals the delta computed with the NaN lots' rows removed beforehand.
    rng = np.random.default_rng(5)
    n_top, n_bottom, b = 30, 36, 80
    top = np.round(rng.normal(1.0, 1.0, n_top), 1)
    bottom = np.round(rng.normal(0.0, 1.0, n_bottom), 1)
    top[[2, 9, 17, 25]] = np.nan
    bottom[[0, 5, 6, 30, 35]] = np.nan
    w_top = stats.resample_weights(rng, n_top, b)
    w_bottom = stats.resample_weights(rng, n_bottom, b)
    sorted_ = stats.Sorted.of(top, bottom)
    fast = stats.delta_from_counts(sorted_.counts(w_top, "top"),
                                   sorted_.counts(w_bottom, "bottom"))
    assert np.all(np.isfinite(fast))

    slow = []
    for j in range(b):
        xt = np.repeat(top, w_top[:, j].astype(int))
        xb = np.repeat(bottom, w_bottom[:, j].astype(int))
        slow.append(stats.cliffs_delta(xt[np.isfinite(xt)], xb[np.isfinite(xb)]))
    np.testing.assert_allclose(fast, slow, rtol=0, atol=1e-12)

    ok_t, ok_b = np.isfinite(top), np.isfinite(bottom)
    dropped = stats.Sorted.of(top[ok_t], bottom[ok_b])
    pre = stats.delta_from_counts(dropped.counts(w_top[ok_t], "top"),
                                  dropped.counts(w_bottom[ok_b], "bottom"))
    np.testing.assert_allclose(fast, pre, rtol=0, atol=1e-12)


def test_blocks_cover_every_resample_once_within_the_memory_bound() -> None:
    # profile.py loops over stats.blocks to fill every bootstrap column exactly once.
    for b, width in [(2000, 1), (2000, 5000), (7, 10**7), (1, 3), (4001, 1999)]:
        parts = stats.blocks(b, width)
        covered = np.concatenate([np.arange(b)[s] for s in parts])
        np.testing.assert_array_equal(covered, np.arange(b))
        step = max(1, stats.CHUNK_CELLS // width)
        assert all(s.stop - s.start <= step for s in parts)


# --------------------------------------------------------------------------- Hedges' g


@pytest.mark.parametrize("n1,n2", [(4, 5), (10, 10), (13, 29), (120, 80)])
def test_hedges_g_matches_pooled_sd_computation(n1: int, n2: int) -> None:
    # Hedges 1981; Hedges and Olkin 1985: g = J (mean1 - mean2) / s_pooled,
    # J = 1 - 3 / (4 (n1 + n2) - 9); SE = sqrt((n1+n2)/(n1 n2) + g^2 / (2 (n1+n2)));
    # 95 % CI g +/- 1.96 SE. Independent numpy computation.
    rng = np.random.default_rng(n1 + 1000 * n2)
    x, y = rng.normal(10.3, 2.0, n1), rng.normal(9.1, 1.5, n2)
    s_pooled = np.sqrt((np.sum((x - x.mean()) ** 2) + np.sum((y - y.mean()) ** 2))
                       / (n1 + n2 - 2))
    j = 1 - 3 / (4 * (n1 + n2) - 9)
    g = j * (x.mean() - y.mean()) / s_pooled
    se = np.sqrt((n1 + n2) / (n1 * n2) + g**2 / (2 * (n1 + n2)))
    res = stats.hedges_g(x, y)
    assert res.correction == pytest.approx(j, rel=1e-12)
    assert res.g == pytest.approx(g, rel=1e-10)
    assert res.se == pytest.approx(se, rel=1e-10)
    assert res.ci_low == pytest.approx(g - 1.96 * se, abs=1e-4 * se)
    assert res.ci_high == pytest.approx(g + 1.96 * se, abs=1e-4 * se)
    # the level is honoured: 90 % uses z = 1.645 (normal quantile, SciPy)
    res90 = stats.hedges_g(x, y, level=0.90)
    assert res90.ci_high - res90.g == pytest.approx(1.6449 * se, abs=1e-4 * se)
    # direction: swapping the bands flips the sign
    assert stats.hedges_g(y, x).g == pytest.approx(-g, rel=1e-10)


@pytest.mark.parametrize("n_total", [12, 13, 15, 20, 30, 50, 100, 1000])
def test_hedges_correction_matches_exact_gamma_form(n_total: int) -> None:
    # Hedges 1981 exact J(df) = Gamma(df/2) / (sqrt(df/2) Gamma((df-1)/2)), df = n1 + n2 - 2;
    # the approximation 1 - 3/(4 (n1+n2) - 9) = 1 - 3/(4 df - 1) agrees within 1e-3 for
    # df >= 10 (Hedges and Olkin 1985).
    n1 = n_total // 2
    n2 = n_total - n1
    rng = np.random.default_rng(n_total)
    res = stats.hedges_g(rng.normal(size=n1), rng.normal(size=n2))
    df = n_total - 2
    assert res.correction == pytest.approx(1 - 3 / (4 * df - 1), rel=1e-12)
    assert abs(res.correction - _exact_j(df)) < 1e-3
    assert res.correction < 1


def test_hedges_g_reproduces_lakens_2013_movie_example() -> None:
    # Lakens 2013, "Calculating and reporting effect sizes to facilitate cumulative science:
    # a practical primer for t-tests and ANOVAs", Frontiers in Psychology 4:863: the worked
    # example of two independent groups (movie ratings, n = 10 per movie) reports
    # t(18) = 2.52, Cohen's d_s = 1.13 and Hedges' g_s = 1.08 (two decimals).
    # The paper's full text could not be read through the search tool (only its abstract);
    # the ratings and these numbers are confirmed through independent test suites that
    # quote the paper: R package dgromer/apa, tests/testthat/test-cohens-d.R ("Example data
    # from Lakens, D. (2013) ... doi:10.3389/fpsyg.2013.00863"; round(d, 2) == 1.13,
    # hedges_g 1.08) and tests/testthat/test-t-apa.R ("t(18) = 2.52, p = .022, d = 1.13");
    # Perl Statistics::ANOVA::EffectSize tests ("Example from Lakens (2013) pp. 7-8", the
    # same ratings). Tolerance: the two decimals the source uses.
    movie_1 = np.array([9, 7, 8, 9, 8, 9, 9, 10, 9, 9], dtype=float)
    movie_2 = np.array([9, 6, 7, 8, 7, 9, 8, 8, 8, 7], dtype=float)
    res = stats.hedges_g(movie_1, movie_2)
    assert round(res.g, 2) == 1.08
    assert round(res.g / res.correction, 2) == 1.13  # Cohen's d_s
    assert res.correction == pytest.approx(1 - 3 / (4 * 20 - 9), rel=1e-12)
    # Lakens 2013 formula 2: d_s = t sqrt(1/n1 + 1/n2), t from SciPy's Student t-test
    t = sps.ttest_ind(movie_1, movie_2).statistic
    assert round(t, 2) == 2.52
    assert res.g / res.correction == pytest.approx(t * np.sqrt(1 / 10 + 1 / 10), rel=1e-10)


def test_hedges_g_is_nan_when_both_bands_are_constant() -> None:
    # no spread, no standardised difference: the profile row shows an empty g, not inf
    res = stats.hedges_g(np.full(12, 3.0), np.full(11, 2.0))
    assert np.isnan(res.g) and np.isnan(res.ci_low) and np.isnan(res.ci_high)


# --------------------------------------------------------------------------- Benjamini-Hochberg


@pytest.mark.parametrize("m", [1, 2, 7, 50, 500])
def test_bh_adjust_matches_statsmodels(m: int) -> None:
    # Benjamini and Hochberg 1995, JRSS B 57(1); reference: statsmodels
    # multipletests(p, method="fdr_bh")[1].
    rng = np.random.default_rng(m)
    p = np.concatenate([rng.uniform(0, 1, m - m // 3), rng.uniform(0, 0.01, m // 3)])
    rng.shuffle(p)
    expected = multipletests(p, method="fdr_bh")[1]
    np.testing.assert_allclose(stats.bh_adjust(p), expected, rtol=1e-12, atol=0)
    # tied p-values (rounded) still agree
    pr = np.round(p, 2)
    np.testing.assert_allclose(stats.bh_adjust(pr), multipletests(pr, method="fdr_bh")[1],
                               rtol=1e-12, atol=0)


def test_bh_adjust_keeps_nan_and_adjusts_over_the_finite_tests_only() -> None:
    # Rows without a test (insufficient bands) have p = NaN; they stay NaN and do not count
    # in m. Reference: statsmodels on the finite entries.
    rng = np.random.default_rng(42)
    p = rng.uniform(0, 0.2, 40)
    nan_at = [0, 3, 4, 17, 39]
    p[nan_at] = np.nan
    q = stats.bh_adjust(p)
    ok = np.isfinite(p)
    assert np.isnan(q[nan_at]).all()
    np.testing.assert_allclose(q[ok], multipletests(p[ok], method="fdr_bh")[1],
                               rtol=1e-12, atol=0)
    assert np.isnan(stats.bh_adjust(np.array([np.nan, np.nan]))).all()


def test_bh_adjust_reproduces_benjamini_hochberg_1995_example() -> None:
    # Benjamini and Hochberg 1995, JRSS B 57(1), section 4: 15 p-values from the thrombolysis
    # trial (Neuhaus et al. 1992); at q* = 0.05 the first four hypotheses are rejected
    # (Bonferroni rejects three). The p-values were first written from memory; they are
    # confirmed by SciPy's documentation of scipy.stats.false_discovery_control ("We follow
    # the example from [1]", [1] = Benjamini and Hochberg 1995), which also prints the
    # adjusted values used below (to 8 decimals, hence the tolerance) and says "the first
    # *four* adjusted p-values fall below 0.05". Cross-checked against statsmodels as well.
    p = np.array([0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344,
                  0.0459, 0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.000])
    q = stats.bh_adjust(p)
    np.testing.assert_array_equal(q < 0.05, [True] * 4 + [False] * 11)
    assert int((p * len(p) < 0.05).sum()) == 3  # Bonferroni, as the paper contrasts
    published = [0.0015, 0.003, 0.0095, 0.035625, 0.0603, 0.06385714, 0.06385714, 0.0645,
                 0.0765, 0.486, 0.58118182, 0.714875, 0.75323077, 0.81321429, 1.0]
    np.testing.assert_allclose(q, published, rtol=0, atol=5e-9)
    np.testing.assert_allclose(q, multipletests(p, method="fdr_bh")[1], rtol=1e-12)
    # input order is kept: shuffled p-values give the same q per hypothesis
    order = np.random.default_rng(0).permutation(15)
    np.testing.assert_allclose(stats.bh_adjust(p[order]), q[order], rtol=1e-12)


# --------------------------------------------------------------------------- Youden and AUC


def _roc_reference(top: np.ndarray, bottom: np.ndarray, higher_better: bool
                   ) -> tuple[float, float, float, list[float]]:
    """Youden cut, J, AUC and every cut tied with the best J, from scikit-learn.

    score = value (higher_better) or -value (lower_better); the cut is the roc_curve
    threshold at the first argmax of tpr - fpr. The tied cuts are those within 1e-9 of
    the maximum: scikit-learn's own float64 noise decides between exact ties, so the
    order among them is checked separately, with exact arithmetic.
    """
    values = np.concatenate([top, bottom])
    y = np.concatenate([np.ones(top.size), np.zeros(bottom.size)])
    score = values if higher_better else -values
    fpr, tpr, thr = roc_curve(y, score, drop_intermediate=False)
    j = tpr - fpr
    k = int(np.argmax(j))
    sign = 1.0 if higher_better else -1.0
    tied = [float(sign * t) for t in thr[np.abs(j - j[k]) < 1e-9]]
    return float(sign * thr[k]), float(j[k]), float(roc_auc_score(y, score)), tied


def _exact_youden_cut(top: np.ndarray, bottom: np.ndarray, higher_better: bool
                      ) -> tuple[float, Fraction]:
    """Youden 1950 in exact rational arithmetic, ties to the highest (lowest) cut."""
    n1, n2 = top.size, bottom.size
    best: tuple[float, Fraction] | None = None
    values = np.unique(np.concatenate([top, bottom]))
    for v in values[::-1] if higher_better else values:
        if higher_better:
            j = Fraction(int((top >= v).sum()), n1) - Fraction(int((bottom >= v).sum()), n2)
        else:
            j = Fraction(int((top <= v).sum()), n1) - Fraction(int((bottom <= v).sum()), n2)
        if best is None or j > best[1]:
            best = (float(v), j)
    assert best is not None
    return best


def _unit_youden(top: np.ndarray, bottom: np.ndarray, higher_better: bool
                 ) -> tuple[float, float]:
    """youden_from_counts on one column of float32 ones, exactly as profile.py calls it."""
    sorted_ = stats.Sorted.of(top, bottom)
    cut, j = stats.youden_from_counts(
        sorted_.counts(np.ones((top.size, 1), np.float32), "top"),
        sorted_.counts(np.ones((bottom.size, 1), np.float32), "bottom"),
        sorted_.values, higher_better)
    assert cut.shape == (1,) and j.shape == (1,)
    return float(cut[0]), float(j[0])


@pytest.mark.parametrize("seed", range(8))
@pytest.mark.parametrize("higher_better", [True, False])
def test_youden_cut_and_j_match_sklearn_roc_curve(seed: int, higher_better: bool) -> None:
    # Youden 1950, Cancer 3(1): J = sensitivity + specificity - 1 = tpr - fpr, maximised over
    # cuts; reference: sklearn roc_curve, cut = threshold at argmax (tpr - fpr). Rounded
    # values make ties in the values likely.
    rng = np.random.default_rng(seed)
    shift = 0.8 if higher_better else -0.8
    n_top, n_bottom = int(rng.integers(10, 60)), int(rng.integers(10, 60))
    top = np.round(rng.normal(shift, 1.0, n_top) * 2) / 2
    bottom = np.round(rng.normal(0.0, 1.0, n_bottom) * 2) / 2
    cut, j = _unit_youden(top, bottom, higher_better)
    ref_cut, ref_j, _, tied = _roc_reference(top, bottom, higher_better)
    assert j == pytest.approx(ref_j, abs=1e-6)  # counts are float32
    assert cut in tied  # a cut that attains the maximal J
    if len(tied) == 1:
        assert cut == ref_cut


def test_youden_per_resample_matches_sklearn_on_each_resample() -> None:
    # Youden 1950 via scikit-learn, one bootstrap column at a time (the cut CI's input).
    rng = np.random.default_rng(21)
    top = np.round(rng.normal(1.0, 1.0, 25), 1)
    bottom = np.round(rng.normal(0.0, 1.0, 30), 1)
    b = 30
    draws_t, draws_b = rng.integers(0, 25, (b, 25)), rng.integers(0, 30, (b, 30))
    sorted_ = stats.Sorted.of(top, bottom)
    cuts, js = stats.youden_from_counts(sorted_.counts(_weights_from_draws(draws_t, 25), "top"),
                                        sorted_.counts(_weights_from_draws(draws_b, 30),
                                                       "bottom"),
                                        sorted_.values, True)
    untied = 0
    for k in range(b):
        ref_cut, ref_j, _, tied = _roc_reference(top[draws_t[k]], bottom[draws_b[k]], True)
        assert js[k] == pytest.approx(ref_j, abs=1e-6)
        assert cuts[k] in tied
        if len(tied) == 1:
            untied += 1
            assert cuts[k] == ref_cut
    assert untied >= b // 2  # the strict comparison was really exercised


@pytest.mark.parametrize("higher_better", [True, False])
def test_youden_tie_goes_to_the_cut_sklearn_lists_first(higher_better: bool) -> None:
    # stats.youden_from_counts documents: "Ties in J go to the cut scikit-learn's roc_curve
    # lists first (the highest cut, or the lowest for lower_better)". Hand-checkable case
    # (Youden 1950 by hand): top = {0, 2, 3}, bottom = {0, 0, 1, 2, 2, 3}; cut 3 gives
    # J = 1/3 - 1/6 = 1/6, cut 2 gives J = 2/3 - 3/6 = 1/6: an exact tie, so the cut is 3
    # (and -3 on the mirrored data for lower_better). sklearn roc_curve also lists 3 first.
    sign = 1.0 if higher_better else -1.0
    top = sign * np.array([0.0, 2.0, 3.0])
    bottom = sign * np.array([0.0, 0.0, 1.0, 2.0, 2.0, 3.0])
    ref_cut, ref_j, _, _ = _roc_reference(top, bottom, higher_better)
    assert ref_cut == sign * 3.0 and ref_j == pytest.approx(1 / 6)
    cut, j = _unit_youden(top, bottom, higher_better)
    assert j == pytest.approx(1 / 6, abs=1e-6)
    assert cut == sign * 3.0


def test_youden_ties_follow_the_documented_rule_on_point_and_bootstrap_cuts() -> None:
    # The same documented tie rule, checked in exact rational arithmetic (Youden 1950) on
    # rounded data where ties in J are common, for the observed cut and for resamples.
    rng = np.random.default_rng(2024)
    wrong = []
    for case in range(60):
        higher = case % 2 == 0
        n_top, n_bottom = int(rng.integers(10, 40)), int(rng.integers(10, 40))
        top = np.round(rng.normal(0.8 if higher else -0.8, 1.0, n_top) * 2) / 2
        bottom = np.round(rng.normal(0.0, 1.0, n_bottom) * 2) / 2
        cut, _ = _unit_youden(top, bottom, higher)
        if cut != _exact_youden_cut(top, bottom, higher)[0]:
            wrong.append(("observed", case))
        w_top, w_bottom = stats.resample_weights(rng, n_top, 10), stats.resample_weights(
            rng, n_bottom, 10)
        sorted_ = stats.Sorted.of(top, bottom)
        cuts, _ = stats.youden_from_counts(sorted_.counts(w_top, "top"),
                                           sorted_.counts(w_bottom, "bottom"),
                                           sorted_.values, higher)
        for k in range(10):
            exact = _exact_youden_cut(np.repeat(top, w_top[:, k].astype(int)),
                                      np.repeat(bottom, w_bottom[:, k].astype(int)), higher)
            if cuts[k] != exact[0]:
                wrong.append(("resample", case, k))
    assert wrong == []


@pytest.mark.parametrize("seed", range(5))
def test_auc_from_delta_matches_sklearn(seed: int) -> None:
    # Hanley and McNeil 1982 / Mann-Whitney: AUC = U / (n1 n2) = (delta + 1) / 2, as the
    # profile reports it; reference: sklearn roc_auc_score with score = value, and
    # 1 - AUC for lower_better (score = -value).
    rng = np.random.default_rng(100 + seed)
    top, bottom = _tied_sample(rng, 21 + seed, 0.5), _tied_sample(rng, 34)
    delta = stats.cliffs_delta(top, bottom)
    auc = (delta + 1) / 2
    ref_hi = _roc_reference(top, bottom, True)[2]
    ref_lo = _roc_reference(top, bottom, False)[2]
    assert auc == pytest.approx(ref_hi, abs=1e-12)
    assert 1 - auc == pytest.approx(ref_lo, abs=1e-12)


# --------------------------------------------------------------------------- tests and labels


@pytest.mark.parametrize("n1,n2", [(10, 10), (15, 31), (80, 60)])
def test_mann_whitney_p_matches_scipy_two_sided_asymptotic(n1: int, n2: int) -> None:
    # Mann and Whitney 1947; reference: scipy.stats.mannwhitneyu two-sided, normal
    # approximation with tie correction (method="asymptotic").
    rng = np.random.default_rng(n1 * n2)
    x, y = rng.integers(0, 7, n1).astype(float), rng.integers(1, 8, n2).astype(float)
    ref = sps.mannwhitneyu(x, y, alternative="two-sided", method="asymptotic").pvalue
    assert stats.mann_whitney_p(x, y) == pytest.approx(ref, rel=1e-12)
    assert stats.mann_whitney_p(y, x) == pytest.approx(ref, rel=1e-12)  # two-sided


def test_mann_whitney_p_is_one_when_all_values_are_equal() -> None:
    # No ordering information at all: no evidence against the null (SciPy would return NaN,
    # which would silently drop the test from the BH family).
    assert stats.mann_whitney_p(np.full(12, 4.0), np.full(15, 4.0)) == 1.0


def test_spearman_rho_matches_scipy_and_drops_missing_pairs() -> None:
    # Spearman 1904; reference: scipy.stats.spearmanr on the complete pairs.
    rng = np.random.default_rng(9)
    x = np.round(rng.normal(size=80), 1)
    y = np.round(0.5 * x + rng.normal(size=80))
    assert stats.spearman_rho(x, y) == pytest.approx(sps.spearmanr(x, y).statistic, rel=1e-12)
    x[[1, 5, 40]] = np.nan
    y[[2, 5, 70]] = np.nan
    ok = np.isfinite(x) & np.isfinite(y)
    ref = sps.spearmanr(x[ok], y[ok]).statistic
    assert stats.spearman_rho(x, y) == pytest.approx(ref, rel=1e-12)


def test_spearman_rho_is_nan_without_variation_or_pairs() -> None:
    # A constant analyte (or grade) or fewer than 3 complete pairs has no rank correlation.
    assert np.isnan(stats.spearman_rho(np.full(10, 2.0), np.arange(10.0)))
    assert np.isnan(stats.spearman_rho(np.arange(10.0), np.full(10, 2.0)))
    assert np.isnan(stats.spearman_rho(np.array([1.0, 2.0, np.nan, np.nan]),
                                       np.array([1.0, 3.0, 2.0, np.nan])))


@pytest.mark.parametrize("delta,label", [
    (0.0, "negligible"), (0.1469, "negligible"), (0.147, "small"), (0.3299, "small"),
    (0.33, "medium"), (0.4739, "medium"), (0.474, "large"), (1.0, "large"),
    (-0.1469, "negligible"), (-0.147, "small"), (-0.33, "medium"), (-0.474, "large"),
    (float("nan"), ""),
])
def test_magnitude_follows_romano_2006_thresholds(delta: float, label: str) -> None:
    # Romano et al. 2006: |delta| < 0.147 negligible, < 0.33 small, < 0.474 medium, else large.
    assert stats.magnitude(delta) == label


# --------------------------------------------------------------------------- Brunner-Munzel


@pytest.mark.parametrize(("n1", "n2", "spread"), [(10, 10, 1.0), (12, 31, 2.5), (60, 45, 0.5),
                                                  (200, 150, 1.0)])
def test_brunner_munzel_p_matches_scipy_with_ties(n1: int, n2: int, spread: float) -> None:
    # Brunner and Munzel 2000, Biometrical Journal 42(1); reference: scipy.stats.brunnermunzel
    # (two-sided, Student's t with Satterthwaite's df). Values rounded to one decimal or
    # to integers: many ties, and unequal spreads, which the test allows.
    rng = np.random.default_rng(n1 + n2)
    x, y = _tied_sample(rng, n1, 0.4), np.round(rng.normal(0.0, spread, n2), 1)
    ref = sps.brunnermunzel(x, y).pvalue
    assert stats.brunner_munzel_p(x, y) == pytest.approx(ref, rel=1e-10)
    assert stats.brunner_munzel_p(y, x) == pytest.approx(ref, rel=1e-10)  # two-sided


def test_brunner_munzel_tests_the_delta_not_the_spread() -> None:
    # Two centred normals with SD 1 and 4: P(X > Y) = 1/2 (delta 0) but the distributions
    # differ. Mann-Whitney's test of equal distributions is not built for this null; the
    # Brunner-Munzel test is (Brunner and Munzel 2000). Over 400 such pairs of 30 lots its
    # rejection rate at 5 % stays near 5 % (binomial SD 1.1 points).
    rng = np.random.default_rng(77)
    rejected = [stats.brunner_munzel_p(rng.normal(0, 1, 30), rng.normal(0, 4, 30)) < 0.05
                for _ in range(400)]
    assert np.mean(rejected) < 0.09


@pytest.mark.filterwarnings("ignore::RuntimeWarning")  # SciPy's 0/0
def test_brunner_munzel_p_is_one_when_every_value_is_equal() -> None:
    # no ordering information: no evidence against P = 1/2 (SciPy gives NaN, which would
    # silently drop the test from the BH family)
    assert stats.brunner_munzel_p(np.full(12, 4.0), np.full(15, 4.0)) == 1.0
    assert np.isnan(sps.brunnermunzel(np.full(12, 4.0), np.full(15, 4.0)).pvalue)


@pytest.mark.filterwarnings("ignore::RuntimeWarning")  # SciPy's 0/0
@pytest.mark.parametrize(("n1", "n2"), [(10, 10), (10, 14), (25, 30)])
def test_brunner_munzel_p_at_complete_separation(n1: int, n2: int) -> None:
    # Every top lot above every bottom lot: the variance estimate is 0 and SciPy gives NaN.
    # The reported p is 2 / C(n1 + n2, n1), the probability that exchangeable bands fall
    # completely apart in either direction: the studentised permutation test of Neubert and
    # Brunner 2007 (CSDA 51), where only the two separated arrangements reach an infinite
    # statistic; it equals the exact two-sided Mann-Whitney p-value, checked with
    # scipy.stats.mannwhitneyu(method="exact") where SciPy computes it exactly (no ties).
    top, bottom = np.arange(n1) + 100.0, np.arange(n2, dtype=float)
    expected = 2 / math.comb(n1 + n2, n1)
    assert stats.brunner_munzel_p(top, bottom) == pytest.approx(expected, rel=1e-9)
    assert stats.brunner_munzel_p(bottom, top) == pytest.approx(expected, rel=1e-9)
    exact = sps.mannwhitneyu(top, bottom, alternative="two-sided", method="exact").pvalue
    assert exact == pytest.approx(expected, rel=1e-9)
    assert np.isnan(sps.brunnermunzel(top, bottom).pvalue)


def test_brunner_munzel_needs_two_lots_per_band() -> None:
    assert np.isnan(stats.brunner_munzel_p(np.array([1.0]), np.arange(5.0)))


# --------------------------------------------------------------------------- delta interval


def test_cliffs_delta_of_stacked_bands_is_the_delta_of_each() -> None:
    rng = np.random.default_rng(8)
    top, bottom = np.round(rng.normal(0.3, 1, (6, 17)), 1), np.round(rng.normal(0, 1, (6, 11)), 1)
    got = stats.cliffs_delta(top, bottom)
    assert got.shape == (6,)
    np.testing.assert_allclose(got, [stats.cliffs_delta(t, b) for t, b in zip(top, bottom)])


def test_delta_jackknife_is_the_delta_with_each_lot_left_out() -> None:
    # Quenouille-Tukey jackknife, by brute force: Cliff's delta recomputed without each lot
    rng = np.random.default_rng(5)
    top, bottom = _tied_sample(rng, 13, 0.5), _tied_sample(rng, 18)
    jack_top, jack_bottom = stats.delta_jackknife(top, bottom)
    np.testing.assert_allclose(
        jack_top, [stats.cliffs_delta(np.delete(top, i), bottom) for i in range(13)], atol=1e-12)
    np.testing.assert_allclose(
        jack_bottom, [stats.cliffs_delta(top, np.delete(bottom, j)) for j in range(18)],
        atol=1e-12)


def _delta_of_resamples(top: np.ndarray, bottom: np.ndarray, b: int, seed: int) -> np.ndarray:
    """Cliff's delta of b resamples by the package's machinery, snapped to its exact grid.

    Every resample keeps the band sizes, so each delta is a multiple of 1 / (n1 n2); the
    snap makes float ties exact, as they are for SciPy's own evaluation of the statistic.
    """
    rng = np.random.default_rng(seed)
    sorted_ = stats.Sorted.of(top, bottom)
    deltas = stats.delta_from_counts(
        sorted_.counts(stats.resample_weights(rng, top.size, b), "top"),
        sorted_.counts(stats.resample_weights(rng, bottom.size, b), "bottom"))
    pairs = top.size * bottom.size
    return np.round(deltas * pairs) / pairs


def _scipy_delta(x: np.ndarray, y: np.ndarray, axis: int = -1) -> np.ndarray:
    """Cliff's delta as (pairs above - pairs below) / pairs, vectorised for scipy.stats."""
    x, y = np.moveaxis(x, axis, -1), np.moveaxis(y, axis, -1)
    diff = x[..., :, None] - y[..., None, :]
    return ((diff > 0).sum(axis=(-1, -2)) - (diff < 0).sum(axis=(-1, -2))) / (
        x.shape[-1] * y.shape[-1])


@pytest.mark.parametrize(("n1", "n2", "shift"), [(10, 10, 0.0), (10, 15, 1.2), (24, 31, 0.5)])
def test_bca_interval_of_delta_matches_scipy_bootstrap(n1: int, n2: int, shift: float) -> None:
    # Efron and Tibshirani 1993, ch. 14; reference: scipy.stats.bootstrap(method="BCa") given
    # the same resampled deltas (its bootstrap_result), its own jackknife and bias correction
    rng = np.random.default_rng(n1 * n2)
    top, bottom = _tied_sample(rng, n1, shift), _tied_sample(rng, n2)
    boot = _delta_of_resamples(top, bottom, 2000, seed=n1)
    seed_run = sps.bootstrap((top, bottom), _scipy_delta, n_resamples=10, vectorized=True,
                             method="percentile", rng=1)
    given = dataclasses.replace(seed_run, bootstrap_distribution=boot)
    ref = sps.bootstrap((top, bottom), _scipy_delta, n_resamples=0, vectorized=True,
                        method="BCa", bootstrap_result=given).confidence_interval
    low, high = stats.delta_interval(top, bottom, boot, 0.95)
    assert low == pytest.approx(ref.low, abs=1e-12)
    assert high == pytest.approx(ref.high, abs=1e-12)


def test_bca_interval_of_stacked_statistics_is_the_interval_of_each() -> None:
    rng = np.random.default_rng(12)
    top, bottom = np.round(rng.normal(0.5, 1, (5, 14)), 1), np.round(rng.normal(0, 1, (5, 12)), 1)
    boot = np.stack([_delta_of_resamples(t, b, 500, seed=k)
                     for k, (t, b) in enumerate(zip(top, bottom))])
    low, high = stats.delta_interval(top, bottom, boot, 0.9)
    for k in range(5):
        assert (low[k], high[k]) == pytest.approx(stats.delta_interval(top[k], bottom[k],
                                                                       boot[k], 0.9))


@pytest.mark.parametrize(("n1", "n2"), [(10, 10), (10, 25), (40, 12)])
def test_delta_interval_at_complete_separation_is_feng_and_cliff_eq_8(n1: int, n2: int) -> None:
    # Every resample is separated too, so the bootstrap has no spread. Feng and Cliff 2004
    # (JMASM 3(2), eq. 8, as the R package orddom implements it): delta = 1 gives the
    # interval [(m - t^2) / (m + t^2), 1], m the smaller band, t Student's on n1 + n2 - 2 df.
    top, bottom = np.arange(n1) + 50.0, np.arange(n2, dtype=float)
    t = sps.t.ppf(0.975, n1 + n2 - 2)
    m = min(n1, n2)
    boot = _delta_of_resamples(top, bottom, 300, seed=3)
    assert np.all(boot == 1.0)
    low, high = stats.delta_interval(top, bottom, boot, 0.95)
    assert (low, high) == pytest.approx(((m - t**2) / (m + t**2), 1.0))
    low, high = stats.delta_interval(bottom, top, -boot, 0.95)
    assert (low, high) == pytest.approx((-1.0, -(m - t**2) / (m + t**2)))


def test_delta_interval_when_every_value_is_tied_uses_the_variance_floor() -> None:
    # delta 0 and a zero variance estimate: the floor (1 - d^2) / (n1 n2 - 1) of Cliff (1996,
    # p. 138) and Feng and Cliff (2004, p. 323), in Cliff's (1993) asymmetric interval, which
    # at d = 0 is +- t s / sqrt(1 + t^2 s^2) (worked by hand from the formula)
    n1, n2 = 12, 15
    t = sps.t.ppf(0.975, n1 + n2 - 2)
    s = np.sqrt(1 / (n1 * n2 - 1))
    half = t * s / np.sqrt(1 + t**2 * s**2)
    low, high = stats.delta_interval(np.full(n1, 3.0), np.full(n2, 3.0), np.zeros(200), 0.95)
    assert (low, high) == pytest.approx((-half, half), rel=1e-12)


# --------------------------------------------------------------------------- cut interval


def test_youden_cuts_of_rows_follow_the_exact_rule_on_resampled_rows() -> None:
    # Youden 1950 in exact rational arithmetic (the same reference as youden_from_counts),
    # on rounded data with many ties, lots without a value (NaN) carrying no weight
    rng = np.random.default_rng(31)
    wrong = []
    for case in range(40):
        higher = case % 2 == 0
        n_top, n_bottom = int(rng.integers(5, 30)), int(rng.integers(5, 30))
        top = np.round(rng.normal(0.8 if higher else -0.8, 1.0, n_top) * 2) / 2
        bottom = np.round(rng.normal(0.0, 1.0, n_bottom) * 2) / 2
        top[rng.random(n_top) < 0.1] = np.nan
        rows_top = top[stats.expand_weights(stats.resample_weights(rng, n_top, 8))]
        rows_bottom = bottom[stats.expand_weights(stats.resample_weights(rng, n_bottom, 8))]
        cuts = stats.youden_cuts_of_rows(rows_top, rows_bottom, higher)
        for k in range(8):
            t, b = rows_top[k][np.isfinite(rows_top[k])], rows_bottom[k]
            if t.size and cuts[k] != _exact_youden_cut(t, b, higher)[0]:
                wrong.append((case, k))
        unit, _ = _unit_youden(top[np.isfinite(top)], bottom, higher)
        if stats.youden_cuts_of_rows(top[None], bottom[None], higher)[0] != unit:
            wrong.append((case, "observed"))
    assert wrong == []


def test_expand_weights_lists_each_lot_as_often_as_it_was_drawn() -> None:
    rng = np.random.default_rng(2)
    weights = stats.resample_weights(rng, 9, 50)
    index = stats.expand_weights(weights)
    assert index.shape == (50, 9)
    for b in range(50):
        np.testing.assert_array_equal(np.bincount(index[b], minlength=9), weights[:, b])


def test_silverman_bandwidth_is_the_rule_of_thumb() -> None:
    # Silverman 1986, Density Estimation, eq. 3.31: 0.9 min(SD, IQR / 1.34) n^(-1/5)
    rng = np.random.default_rng(6)
    x = rng.normal(5, 2, 80)
    iqr = np.subtract(*np.quantile(x, [0.75, 0.25]))
    expected = 0.9 * min(x.std(ddof=1), iqr / 1.34) * 80 ** -0.2
    assert stats.silverman_bandwidth(x) == pytest.approx(expected, rel=1e-12)
    rows = rng.normal(0, 1, (4, 30))
    np.testing.assert_allclose(stats.silverman_bandwidth(rows),
                               [stats.silverman_bandwidth(r) for r in rows])
    tied = np.array([1.0] * 20 + [2.0, 3.0])  # IQR 0: the SD alone
    assert stats.silverman_bandwidth(tied) == pytest.approx(0.9 * tied.std(ddof=1) * 22 ** -0.2)
    assert stats.silverman_bandwidth(np.full(10, 4.0)) == 0.0
    assert stats.silverman_bandwidth(np.append(x, np.nan)) == pytest.approx(expected)


def test_shrunk_smoothing_keeps_the_band_mean_and_variance() -> None:
    # Silverman 1986, section 6.4.1: the shrunk smoothed bootstrap draws from a distribution
    # with the sample's mean and variance; checked over many draws of one band
    rng = np.random.default_rng(9)
    band = rng.gamma(2.0, 1.5, 25)
    h = stats.silverman_bandwidth(band)
    drawn = band[rng.integers(0, 25, 400_000)]
    smooth = stats.smoothed_values(drawn, band.mean(), band.std(), h,
                                   rng.standard_normal(drawn.size))
    assert smooth.mean() == pytest.approx(band.mean(), abs=0.01)
    assert smooth.var() == pytest.approx(band.var(), rel=0.01)
    assert len(np.unique(smooth)) > 100_000  # smoothed: no longer 25 values


def test_smoothed_youden_cuts_are_the_cuts_of_the_smoothed_resamples() -> None:
    # the engine's function is the composition its parts describe (the coverage test batches
    # the same parts): multiplicities -> indices -> smoothing -> Youden cut of each row
    rng = np.random.default_rng(4)
    top, bottom = np.round(rng.normal(1, 1, 18), 1), np.round(rng.normal(0, 1, 22), 1)
    top[3] = np.nan
    w_top, w_bottom = stats.resample_weights(rng, 18, 300), stats.resample_weights(rng, 22, 300)
    got = stats.smoothed_youden_cuts(top, bottom, w_top, w_bottom, True,
                                     stats.keyed_rng(1, "a"))
    noise = stats.keyed_rng(1, "a")
    rows = []
    for band, weights in ((top, w_top), (bottom, w_bottom)):
        ok = band[np.isfinite(band)]
        drawn = band[stats.expand_weights(weights)]
        rows.append(stats.smoothed_values(drawn, ok.mean(), ok.std(),
                                          stats.silverman_bandwidth(ok),
                                          noise.standard_normal(drawn.shape)))
    np.testing.assert_array_equal(got, stats.youden_cuts_of_rows(rows[0], rows[1], True))
    # without smoothing (bandwidth 0) the rows' cuts are the plain bootstrap's
    plain = stats.youden_cuts_of_rows(top[stats.expand_weights(w_top)],
                                      bottom[stats.expand_weights(w_bottom)], True)
    assert np.isin(plain, np.concatenate([top, bottom])).all()


def test_cut_interval_holds_the_cut_and_stays_inside_the_data() -> None:
    top, bottom = np.array([2.0, 3.0, 4.0, 5.0]), np.array([1.0, 2.0, 2.5, 3.0])
    boot = np.linspace(0.0, 9.0, 101)  # wider than the data on both sides
    assert stats.cut_interval(top, bottom, 3.0, boot, 0.95) == (1.0, 5.0)
    boot = np.full(50, 2.0)  # every resample below the reported cut
    assert stats.cut_interval(top, bottom, 3.0, boot, 0.95) == (2.0, 3.0)
    low, high = stats.cut_interval(np.stack([top, top]), np.stack([bottom, bottom]),
                                   np.array([3.0, 2.0]), np.stack([boot, boot]), 0.95)
    np.testing.assert_array_equal(low, [2.0, 2.0])
    np.testing.assert_array_equal(high, [3.0, 2.0])


def test_keyed_rng_gives_the_same_stream_for_the_same_keys() -> None:
    a = stats.keyed_rng(7, "cut", "S1", "ph").standard_normal(5)
    np.testing.assert_array_equal(a, stats.keyed_rng(7, "cut", "S1", "ph").standard_normal(5))
    assert not np.array_equal(a, stats.keyed_rng(7, "cut", "S2", "ph").standard_normal(5))
    assert not np.array_equal(a, stats.keyed_rng(8, "cut", "S1", "ph").standard_normal(5))


# --------------------------------------------------------------------------- the drivers table


def test_drivers_table_reports_these_statistics_per_style() -> None:
    # the profile stage end to end on two invented styles: p_value is Brunner-Munzel's
    # (scipy.stats.brunnermunzel), mann_whitney_p the last column (scipy.stats.mannwhitneyu),
    # the delta interval the BCa one and the cut interval holds the cut
    import pandas as pd

    from vinstrata.config import parse_config
    from vinstrata.profile.drivers import DRIVER_COLUMNS, EXTRA_DRIVER_COLUMNS, profile_table
    from vinstrata.read.lots import AnalyteSpec

    rng = np.random.default_rng(3)
    n = 240
    grade = np.round(rng.uniform(10, 20, n), 1)
    style = np.where(np.arange(n) < 120, "S1", "S2")
    ph = np.round(3.3 + 0.04 * (grade - 15) + rng.normal(0, 0.1, n), 2)
    sugar = np.round(rng.gamma(2, 2, n), 1)
    values = pd.DataFrame({"ph": ph, "sugar": sugar})
    flags = pd.DataFrame({"ph": ["measured"] * n, "sugar": ["measured"] * n})
    lots = pd.DataFrame({"grade": grade, "style": style, "nearest_style": style})
    styles = pd.DataFrame({"style": ["S1", "S2"], "trusted": [True, True]})
    specs = tuple(AnalyteSpec(name=a, column=a, kind="", label=a, unit="", unit_in="",
                              factor=1.0, bounds=None, concentration=True)
                  for a in ("ph", "sugar"))
    config = parse_config({"columns": {"lot_id": "lot", "grade": "grade"},
                           "bands": {"cuts": [13.0, 17.0], "labels": ["low", "mid", "high"]},
                           "profile": {"bootstrap": 400}})
    profiles = profile_table(values, flags, lots, styles, specs, config)
    drivers = profiles.drivers
    assert list(drivers.columns) == list(DRIVER_COLUMNS) + list(EXTRA_DRIVER_COLUMNS)
    # mann_whitney_p, then the conditional effects and roles (profile/partial.py)
    assert list(drivers.columns[-6:]) == ["mann_whitney_p", "partial_rho", "partial_ci_low",
                                          "partial_ci_high", "role", "moves_with"]
    for row in drivers[drivers["style"] != "all"].itertuples():
        rows = style == row.style
        top = values[row.analyte].to_numpy()[rows & (grade >= 17)]
        bottom = values[row.analyte].to_numpy()[rows & (grade < 13)]
        assert row.p_value == pytest.approx(sps.brunnermunzel(top, bottom).pvalue, rel=1e-10)
        mw = sps.mannwhitneyu(top, bottom, alternative="two-sided", method="asymptotic").pvalue
        assert row.mann_whitney_p == pytest.approx(mw, rel=1e-10)
        assert row.ci_low <= row.cliffs_delta <= row.ci_high
    assert drivers.loc[drivers["analyte"] == "ph", "is_driver"].all()
    cuts = profiles.thresholds.dropna(subset=["cut"])
    assert len(cuts) >= 2
    assert ((cuts["cut_ci_low"] <= cuts["cut"]) & (cuts["cut"] <= cuts["cut_ci_high"])).all()


# --------------------------------------------------------------------------- bounded memory


def _one_band_group(n_top: int, n_bottom: int, seed: int):
    """A group of one style with a top and a bottom band of rounded values (ties)."""
    from vinstrata.profile.groups import Group

    rng = np.random.default_rng(seed)
    values = np.round(np.concatenate([rng.normal(0.4, 1, n_top), rng.normal(0, 1, n_bottom)]),
                      2)
    bands = np.concatenate([np.full(n_top, 2), np.full(n_bottom, 0)])
    return Group("S1", True, np.arange(n_top + n_bottom), bands), values


@pytest.mark.parametrize("n,b,step", [(7, 13, 1), (7, 13, 5), (101, 40, 3), (2, 9, 4)])
def test_numpy_draws_the_same_stream_whole_or_in_blocks(n: int, b: int, step: int) -> None:
    # The bounded-memory bootstrap relies on numpy's Generator giving the same numbers
    # whether a b x n draw is made at once or a block of rows at a time (odd sizes
    # included, where a 64-bit output would be split), and on leaving the generator
    # in the same state; likewise multinomial (the partial correlations) and
    # standard_normal (the smoothing).
    def split(draw, rng):
        return np.concatenate([draw(rng, min(step, b - i)) for i in range(0, b, step)])

    for draw in (lambda r, k: r.integers(0, n, size=(k, n), dtype=np.int64),
                 lambda r, k: r.multinomial(n, np.full(n, 1.0 / n), size=k),
                 lambda r, k: r.standard_normal((k, n))):
        whole, blocked = np.random.default_rng(9), np.random.default_rng(9)
        np.testing.assert_array_equal(split(draw, blocked), draw(whole, b))
        assert whole.random() == blocked.random()


def test_resamples_drawn_block_by_block_equal_the_whole_matrices() -> None:
    # draw_resamples keeps only generator states; its blocks must be the columns of
    # resample_weights drawn from the same generator (top band first), and the
    # generator must be left where drawing both whole matrices leaves it.
    from vinstrata.profile.groups import draw_resamples

    group, _ = _one_band_group(37, 23, 1)
    for chunk in (10**7, 130, 1):  # one block, several, one resample per block
        old = stats.CHUNK_CELLS
        stats.CHUNK_CELLS = chunk
        try:
            ref, rng = np.random.default_rng(4), np.random.default_rng(4)
            w_top, w_bottom = stats.resample_weights(ref, 37, 50), stats.resample_weights(
                ref, 23, 50)
            kept = draw_resamples(group, 3, 50, rng)
            assert ref.random() == rng.random()
            top = np.concatenate([t for _, t, _ in kept.blocks()])
            bottom = np.concatenate([b for _, _, b in kept.blocks()])
        finally:
            stats.CHUNK_CELLS = old
        np.testing.assert_array_equal(top.T, w_top)
        np.testing.assert_array_equal(bottom.T, w_bottom)
        np.testing.assert_array_equal(kept.weights("top"), w_top)


def test_count_plan_deltas_equal_the_direct_count_computation() -> None:
    # DeltaPlan.deltas (what the profile stage runs, a block at a time) against the
    # direct computation over both bands' distinct values (Sorted.counts +
    # delta_from_counts) and against Cliff 1993's pairwise definition: equal to the bit
    # on tied values with lots missing a value.
    rng = np.random.default_rng(12)
    top, bottom = _tied_sample(rng, 41, 0.5), _tied_sample(rng, 29)
    top[[2, 7]] = np.nan
    bottom[5] = np.nan
    w_top, w_bottom = stats.resample_weights(rng, 41, 300), stats.resample_weights(rng, 29, 300)
    sorted_ = stats.Sorted.of(top, bottom)
    direct = stats.delta_from_counts(sorted_.counts(w_top, "top"),
                                     sorted_.counts(w_bottom, "bottom"))
    plan = stats.DeltaPlan.of(top, bottom)
    blocked = np.concatenate([plan.deltas(w_top[:, s], w_bottom[:, s])
                              for s in stats.blocks(300, 7000)])
    np.testing.assert_array_equal(plan.deltas(w_top, w_bottom), direct)
    np.testing.assert_array_equal(blocked, direct)
    t = np.repeat(np.nan_to_num(top, nan=np.inf), w_top[:, 0].astype(int))
    b = np.repeat(bottom, w_bottom[:, 0].astype(int))
    t, b = t[np.isfinite(t)], b[np.isfinite(b)]
    assert direct[0] == pytest.approx(np.sign(t[:, None] - b[None, :]).mean(), abs=1e-12)


def _sorted_youden(top: np.ndarray, bottom: np.ndarray, higher_better: bool) -> np.ndarray:
    """Youden cuts of each row by sorting every row (the rule of youden_from_counts: J n1 n2
    as whole numbers, ties to the highest cut, or the lowest for lower_better)."""
    out = np.full(top.shape[0], np.nan)
    sign = 1.0 if higher_better else -1.0
    for k in range(top.shape[0]):
        t, b = sign * top[k][np.isfinite(top[k])], sign * bottom[k][np.isfinite(bottom[k])]
        values = np.unique(np.concatenate([t, b]))
        if values.size == 0:
            continue
        score = (b.size * (t[None, :] >= values[:, None]).sum(axis=1)
                 - t.size * (b[None, :] >= values[:, None]).sum(axis=1))
        out[k] = sign * values[np.flatnonzero(score == score.max())[-1]]
    return out


@pytest.mark.parametrize("higher_better", [True, False])
def test_binned_youden_cuts_equal_the_cuts_of_sorted_rows(higher_better: bool) -> None:
    # youden_cuts_of_rows sorts only the bins that can hold the best cut; it must give
    # every row's cut of the full sort: smoothed (continuous) rows, rounded rows full of
    # ties, rows with missing lots, a far outlier that squeezes the bins, constant rows.
    rng = np.random.default_rng(21)
    for case in range(60):
        n1, n2, rows = (int(v) for v in rng.integers([1, 1, 1], [80, 80, 12]))
        top = rng.normal(0.6 if higher_better else -0.6, 1.0, (rows, n1))
        bottom = rng.normal(0.0, rng.uniform(0.3, 3.0), (rows, n2))
        if case % 3 == 1:
            top, bottom = np.round(top, 1), np.round(bottom, 1)
        if case % 4 == 2:
            top[rng.random(top.shape) < 0.3] = np.nan
        if case % 5 == 3:
            top[:, 0] = 1e6
        if case % 11 == 4:
            top[:], bottom[:] = 2.0, 2.0
        got = stats.youden_cuts_of_rows(top, bottom, higher_better)
        np.testing.assert_array_equal(got, _sorted_youden(top, bottom, higher_better),
                                      err_msg=f"case {case}")


def _peak_bootstrap_bytes(n: int, b: int) -> int:
    """Peak traced memory of one band pair's bootstrap: deltas and smoothed cuts."""
    import tracemalloc

    from vinstrata.profile.drivers import boot_deltas
    from vinstrata.profile.groups import draw_resamples
    from vinstrata.profile.thresholds import _smoothed_cuts

    group, values = _one_band_group(n // 2, n - n // 2, 3)
    tracemalloc.start()
    try:
        kept = draw_resamples(group, 3, b, np.random.default_rng(1))
        xt, xb = values[kept.top_rows], values[kept.bottom_rows]
        boot_deltas(kept, {"x": (xt, xb)})
        _smoothed_cuts([({"direction": "higher_better"}, xt, xb, np.random.default_rng(2))],
                       kept)
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def test_bootstrap_memory_does_not_grow_with_lots_times_resamples() -> None:
    # Drawn whole, 200 resamples of 200,000 lots take 20 B x n bytes (0.8 GB) and of 20,000
    # lots a tenth of that; drawn in blocks of at most CHUNK_CELLS cells the two peaks are
    # about the same: a block's cells, not lots x resamples.
    small, large = _peak_bootstrap_bytes(20_000, 200), _peak_bootstrap_bytes(200_000, 200)
    assert large < 2.5 * small  # ten times the lots
    assert large < 20 * 200 * 200_000 / 3
