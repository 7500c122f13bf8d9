import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

from audit.stats.intervals import (clopper_pearson, f1_interval, mean_interval, mover_difference, welch_difference,
                             wilson)


@pytest.mark.parametrize("k,n,lo,hi", [
    # Newcombe (1998), Statistics in Medicine 17:857-872, Table II, method 3 (Wilson score, no correction)
    (81, 263, 0.2553, 0.3662), (15, 148, 0.0624, 0.1605), (0, 20, 0.0000, 0.1611), (1, 29, 0.0061, 0.1718),
])
def test_wilson_against_newcombe_1998(k, n, lo, hi):
    got = wilson(k, n)
    assert round(float(got[0]), 4) == lo and round(float(got[1]), 4) == hi
    # the same table through statsmodels' Wilson interval
    rlo, rhi = proportion_confint(k, n, alpha=0.05, method="wilson")
    assert float(got[0]) == pytest.approx(rlo, abs=1e-12) and float(got[1]) == pytest.approx(rhi, abs=1e-12)


@pytest.mark.parametrize("k,n", [(81, 263), (15, 148), (0, 20), (1, 29), (20, 20), (0, 1), (1, 1)])
def test_clopper_pearson_on_newcombe_tables(k, n):
    # Reference: statsmodels proportion_confint(method="beta") on Newcombe's (1998) four tables
    # plus the all-or-nothing ends.
    lo, hi = clopper_pearson(k, n)
    rlo, rhi = proportion_confint(k, n, alpha=0.05, method="beta")
    assert float(lo) == pytest.approx(np.nan_to_num(rlo), abs=1e-12)
    assert float(hi) == pytest.approx(np.nan_to_num(rhi, nan=1.0), abs=1e-12)
    # Closed forms of the exact interval (Clopper & Pearson 1934): with no events the upper end
    # is 1 - (alpha/2)^(1/n); with all events the lower end is (alpha/2)^(1/n).
    if k == 0:
        assert float(lo) == 0.0 and float(hi) == pytest.approx(1 - 0.025 ** (1 / n), rel=1e-12)
    if k == n:
        assert float(hi) == 1.0 and float(lo) == pytest.approx(0.025 ** (1 / n), rel=1e-12)


def test_wilson_and_exact_against_statsmodels():
    rng = np.random.default_rng(1)
    n = rng.integers(1, 500, 200)
    k = rng.binomial(n, rng.random(200))
    for level in (0.9, 0.95, 0.99):
        lo, hi = wilson(k, n, level=level)
        rlo, rhi = proportion_confint(k, n, alpha=1 - level, method="wilson")
        np.testing.assert_allclose(lo, rlo, atol=1e-12)
        np.testing.assert_allclose(hi, rhi, atol=1e-12)
        lo, hi = clopper_pearson(k, n, level=level)
        rlo, rhi = proportion_confint(k, n, alpha=1 - level, method="beta")
        np.testing.assert_allclose(lo, np.nan_to_num(rlo), atol=1e-10)
        np.testing.assert_allclose(hi, np.nan_to_num(rhi, nan=1.0), atol=1e-10)


def test_wilson_is_nan_for_empty_denominator():
    lo, hi = wilson(np.array([0]), np.array([0]))
    assert np.isnan(lo[0]) and np.isnan(hi[0])


@pytest.mark.parametrize("a,b,c,d,lo,hi", [
    # Newcombe (1998), Statistics in Medicine 17:873-890, Table II, method 10 (values from memory,
    # each table also checked against statsmodels in the test)
    (56, 70, 48, 80, 0.0524, 0.3339), (9, 10, 3, 10, 0.1705, 0.8090), (0, 10, 0, 20, -0.1611, 0.2775),
    (10, 10, 0, 20, 0.6791, 1.0000),
])
def test_newcombe_difference(a, b, c, d, lo, hi):
    l1, h1 = wilson(a, b)
    l2, h2 = wilson(c, d)
    _, dl, dh = mover_difference(a / b, l1, h1, c / d, l2, h2)
    assert round(float(dl), 4) == lo and round(float(dh), 4) == hi
    # the same table through statsmodels' Newcombe hybrid score interval
    rl, rh = confint_proportions_2indep(a, b, c, d, method="newcomb", compare="diff", alpha=0.05)
    assert float(dl) == pytest.approx(rl, abs=1e-12) and float(dh) == pytest.approx(rh, abs=1e-12)


def test_newcombe_difference_against_statsmodels():
    rng = np.random.default_rng(2)
    for _ in range(50):
        n1, n2 = rng.integers(5, 300, 2)
        k1, k2 = rng.integers(0, n1 + 1), rng.integers(0, n2 + 1)
        l1, h1 = wilson(k1, n1)
        l2, h2 = wilson(k2, n2)
        _, dl, dh = mover_difference(k1 / n1, l1, h1, k2 / n2, l2, h2)
        rl, rh = confint_proportions_2indep(k1, n1, k2, n2, method="newcomb", compare="diff")
        assert dl == pytest.approx(rl, abs=1e-10) and dh == pytest.approx(rh, abs=1e-10)


@pytest.mark.parametrize("method,theirs", [("wilson", "wilson"), ("clopper-pearson", "beta")])
def test_f1_interval_is_the_jaccard_interval_mapped(method, theirs):
    # Reference: statsmodels proportion_confint for J = tp / (tp + fp + fn), mapped through the
    # increasing F1 = 2J / (1 + J) (the identity F1 = 2J/(1+J) is textbook algebra).
    rng = np.random.default_rng(6)
    tp, fp, fn = (rng.integers(0, 200, 100) for _ in range(3))
    tp[0] = 0
    lo, hi = f1_interval(tp, fp, fn, method=method, level=0.9)
    jl, jh = proportion_confint(tp, tp + fp + fn, alpha=0.1, method=theirs)
    jl, jh = np.nan_to_num(jl), np.nan_to_num(jh, nan=1.0)
    np.testing.assert_allclose(lo, 2 * jl / (1 + jl), atol=1e-12)
    np.testing.assert_allclose(hi, 2 * jh / (1 + jh), atol=1e-12)


def test_mean_interval_against_scipy():
    x = np.random.default_rng(3).exponential(1.0, 57)
    lo, hi = mean_interval(len(x), x.sum(), (x * x).sum())
    ref = stats.t.interval(0.95, len(x) - 1, loc=x.mean(), scale=stats.sem(x))  # scipy reference
    assert (lo, hi) == pytest.approx(ref, rel=1e-10)


def test_welch_difference_against_scipy():
    rng = np.random.default_rng(4)
    a, b = rng.normal(0.3, 1.0, 40), rng.normal(0.0, 2.0, 90)
    d, lo, hi, se, df, *_ = welch_difference(len(a), a.sum(), (a * a).sum(), len(b), b.sum(), (b * b).sum())
    res = stats.ttest_ind(a, b, equal_var=False)  # scipy reference (Welch)
    ref = res.confidence_interval(0.95)
    assert (lo, hi) == pytest.approx((ref.low, ref.high), rel=1e-9)
    assert d == pytest.approx(a.mean() - b.mean(), rel=1e-12)
    assert df == pytest.approx(res.df, rel=1e-12)  # Welch-Satterthwaite degrees of freedom, scipy's


def test_wilson_coverage_simulation():
    # Simulation: nominal 95% should cover 93-97% over a spread of n and p (fixed seed).
    rng = np.random.default_rng(20)
    p = rng.uniform(0.05, 0.95, 20_000)
    n = rng.integers(30, 400, 20_000)
    k = rng.binomial(n, p)
    lo, hi = wilson(k, n)
    cover = np.mean((lo <= p) & (p <= hi))
    assert 0.93 <= cover <= 0.97


def test_f1_interval_coverage_simulation():
    # The F1 interval (Jaccard mapped through 2J/(1+J)): coverage of the true F1 over repeated
    # samples of a fixed confusion-cell distribution, for several model qualities and sizes.
    rng = np.random.default_rng(21)
    covers = []
    for probs, n in [((0.6, 0.1, 0.1, 0.2), 300), ((0.7, 0.05, 0.15, 0.1), 800), ((0.3, 0.2, 0.1, 0.4), 150),
                     ((0.85, 0.03, 0.05, 0.07), 2000)]:
        tn, fp, fn, tp = probs
        true_f1 = 2 * tp / (2 * tp + fp + fn)
        cells = rng.multinomial(n, probs, size=4000)
        lo, hi = f1_interval(cells[:, 3], cells[:, 1], cells[:, 2])
        covers.append(np.mean((lo <= true_f1) & (true_f1 <= hi)))
    assert all(0.93 <= c <= 0.97 for c in covers), covers


@pytest.mark.parametrize("level", [0.5, 0.8, 0.9, 0.95, 0.99, 0.999, 0.9999])
def test_t_quantile_against_scipy(level):
    # Reference: scipy.stats.t.ppf. Below 400 degrees of freedom t_quantile calls it; above, the
    # Abramowitz & Stegun (1964) 26.7.5 expansion must agree within 1e-10.
    from audit.stats.intervals import T_SERIES_MIN_DF, t_quantile

    df = np.r_[1.0, 2.5, 30.0, 399.0, np.arange(T_SERIES_MIN_DF, T_SERIES_MIN_DF + 3000.0),
               10 ** np.linspace(np.log10(T_SERIES_MIN_DF), 9, 400), np.inf]
    q = 0.5 + level / 2
    np.testing.assert_allclose(t_quantile(q, df), stats.t.ppf(q, df), rtol=0, atol=1e-10)
    assert np.isnan(t_quantile(q, np.array([np.nan]))[0])


def test_mean_interval_against_scipy_t_interval_for_large_slices():
    # Reference: scipy.stats.t.interval on the same mean and standard error, slices of 1,000 to
    # 200,000 rows (the expansion's range).
    rng = np.random.default_rng(5)
    for n in (1_000, 20_000, 200_000):
        x = rng.gamma(2.0, 0.3, n)
        lo, hi = mean_interval(np.array([n]), np.array([x.sum()]), np.array([(x * x).sum()]), level=0.95)
        rlo, rhi = stats.t.interval(0.95, n - 1, loc=x.mean(), scale=stats.sem(x))
        assert lo[0] == pytest.approx(rlo, rel=1e-12) and hi[0] == pytest.approx(rhi, rel=1e-12)


def test_t_quantile_for_whole_df_matches_scipy_without_loading_it():
    # Reference: scipy.special.stdtrit. The engine solves whole ν from Abramowitz & Stegun
    # 26.7.3/26.7.4 (finite series) by Newton's method, so a default audit does not import scipy.
    from scipy.special import stdtrit

    from audit.stats.intervals import t_quantile

    df = np.arange(1, 400, dtype=float)
    for q in (0.6, 0.75, 0.9, 0.95, 0.975, 0.995, 0.99995):
        np.testing.assert_allclose(t_quantile(q, df), stdtrit(df, q), rtol=1e-11)
    np.testing.assert_allclose(t_quantile(0.975, np.array([2.5, 17.3])), stdtrit(np.array([2.5, 17.3]), 0.975),
                               rtol=1e-12)  # fractional ν (Welch) goes to scipy itself


def test_normal_tail_and_log_factorial_match_scipy():
    from scipy.special import gammaln, ndtr

    from audit.stats.compare import _log_factorial, _normal_sf

    z = np.linspace(-8, 30, 400)
    np.testing.assert_allclose(_normal_sf(z), ndtr(-z), rtol=1e-10)
    k = np.arange(0, 50_000)
    np.testing.assert_allclose(_log_factorial(k), gammaln(k + 1.0), rtol=1e-14, atol=1e-13)
