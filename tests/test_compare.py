import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.proportion import proportion_effectsize, proportions_ztest

from audit.stats.compare import cohens_h, fisher_two_sided, two_proportion, welch_p


def test_fisher_against_scipy():
    rng = np.random.default_rng(7)
    tables = []
    for _ in range(300):
        r1, r2 = rng.integers(1, 60, 2)
        a, c = rng.integers(0, r1 + 1), rng.integers(0, r2 + 1)
        tables.append((a, r1, c, r2))
    t = np.array(tables)
    got = fisher_two_sided(t[:, 0], t[:, 1], t[:, 0] + t[:, 2], t[:, 1] + t[:, 3])
    ref = [stats.fisher_exact([[a, r1 - a], [c, r2 - c]]).pvalue for a, r1, c, r2 in tables]  # scipy reference
    np.testing.assert_allclose(got, ref, rtol=1e-9)


def test_fisher_against_scipy_on_wide_and_lopsided_tables():
    # Tables with thousands of rows, zero cells and all-events rows (several support-width bands).
    tables = [(0, 12, 3, 900), (3, 12, 20, 900), (12, 12, 1, 3000), (0, 1, 0, 5), (1, 1, 0, 1), (40, 2500, 9, 300),
              (600, 1200, 700, 1300), (5, 4000, 0, 40)]
    t = np.array(tables)
    got = fisher_two_sided(t[:, 0], t[:, 1], t[:, 0] + t[:, 2], t[:, 1] + t[:, 3])
    ref = [stats.fisher_exact([[a, r1 - a], [c, r2 - c]]).pvalue for a, r1, c, r2 in tables]  # scipy reference
    np.testing.assert_allclose(got, ref, rtol=1e-9)


def test_z_test_equals_uncorrected_chi_square():
    rng = np.random.default_rng(8)
    for _ in range(100):
        n1, n2 = rng.integers(200, 3000, 2)
        k1, k2 = rng.binomial(n1, 0.3), rng.binomial(n2, 0.33)
        p, method = two_proportion(np.array([k1]), np.array([n1]), np.array([k2]), np.array([n2]))
        assert method[0] == "z"
        ref = stats.chi2_contingency([[k1, n1 - k1], [k2, n2 - k2]], correction=False).pvalue  # scipy reference
        assert p[0] == pytest.approx(ref, rel=1e-9)
        _, zp = proportions_ztest([k1, k2], [n1, n2])  # statsmodels reference: pooled two-sided z test
        assert p[0] == pytest.approx(zp, rel=1e-9)


def test_small_expected_counts_switch_to_fisher():
    p, method = two_proportion(np.array([3]), np.array([12]), np.array([20]), np.array([900]))
    assert method[0] == "fisher"
    assert p[0] == pytest.approx(stats.fisher_exact([[3, 9], [20, 880]]).pvalue, rel=1e-9)


def test_welch_p_against_scipy():
    rng = np.random.default_rng(9)
    a, b = rng.normal(0.2, 1, 35), rng.normal(0, 3, 80)
    from audit.stats.intervals import welch_difference

    d, _, _, se, df, *_ = welch_difference(len(a), a.sum(), (a * a).sum(), len(b), b.sum(), (b * b).sum())
    ref = stats.ttest_ind_from_stats(a.mean(), a.std(ddof=1), len(a), b.mean(), b.std(ddof=1), len(b),
                                     equal_var=False)  # scipy reference
    assert welch_p(d, se, df) == pytest.approx(ref.pvalue, rel=1e-9)
    raw = stats.ttest_ind(a, b, equal_var=False)  # scipy reference on the raw rows
    assert welch_p(d, se, df) == pytest.approx(raw.pvalue, rel=1e-9)


def test_cohens_h_known_value():
    # Cohen (1988): h = 2 asin √0.5 − 2 asin √0.25 ≈ 0.5236 (π/6); computed from the definition.
    assert cohens_h(0.5, 0.25) == pytest.approx(np.pi / 6, rel=1e-12)
    p1, p2 = np.linspace(0, 1, 11), np.linspace(1, 0, 11) ** 2
    np.testing.assert_allclose(cohens_h(p1, p2), proportion_effectsize(p1, p2), atol=1e-12)  # statsmodels reference


def test_compiled_normal_tail_is_pythons_erfc_value_for_value():
    # The compiled loop for large slice tables must give the numbers of Python's math.erfc exactly.
    from audit.core.tally import numba_available

    if not numba_available():
        pytest.skip("numba not installed")
    import math

    from audit.core.kernels import half_erfc

    rng = np.random.default_rng(3)
    z = np.concatenate([np.abs(rng.normal(0, 3, 5000)), rng.exponential(10, 2000), [0.0, 40.0, np.inf, np.nan]])
    want = np.array([0.5 * math.erfc(x / math.sqrt(2.0)) for x in z])
    assert np.array_equal(half_erfc(z), want, equal_nan=True)
