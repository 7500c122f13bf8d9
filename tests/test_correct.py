import numpy as np
import pytest
from scipy.stats import false_discovery_control
from statsmodels.stats.multitest import multipletests

from audit.stats.correct import CORRECTIONS, adjust

# Benjamini & Hochberg (1995), JRSS B 57:289, section 4.2: fifteen p-values of a clinical trial.
BH95 = [0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240, 0.4262, 0.5719,
        0.6528, 0.7590, 1.0000]


def test_bh_1995_example_rejections():
    q, m = adjust(BH95, method="bh")
    assert m == 15
    assert int((q <= 0.05).sum()) == 4  # the paper: BH rejects the four smallest
    b, _ = adjust(BH95, method="bonferroni")
    assert int((b <= 0.05).sum()) == 3  # the paper: Bonferroni rejects three
    for ours, theirs in [("bh", "fdr_bh"), ("by", "fdr_by"), ("holm", "holm"), ("bonferroni", "bonferroni")]:
        # the paper's fifteen p-values through statsmodels' multipletests
        np.testing.assert_allclose(adjust(BH95, method=ours)[0], multipletests(BH95, method=theirs)[1], rtol=1e-12)


@pytest.mark.parametrize("ours,theirs", [("bh", "fdr_bh"), ("by", "fdr_by"), ("holm", "holm"),
                                         ("bonferroni", "bonferroni")])
def test_against_statsmodels(ours, theirs):
    rng = np.random.default_rng(0)
    p = np.concatenate([rng.uniform(0, 1, 300), rng.uniform(0, 0.001, 20)])
    rng.shuffle(p)
    q, _ = adjust(p, method=ours)
    ref = multipletests(p, method=theirs)[1]  # statsmodels reference
    np.testing.assert_allclose(q, ref, rtol=1e-12)


def test_bh_by_against_scipy():
    p = np.random.default_rng(1).uniform(0, 0.2, 100)
    np.testing.assert_allclose(adjust(p, method="bh")[0], false_discovery_control(p, method="bh"), rtol=1e-12)
    np.testing.assert_allclose(adjust(p, method="by")[0], false_discovery_control(p, method="by"), rtol=1e-12)


@pytest.mark.parametrize("method", list(CORRECTIONS))
def test_order_monotone_clipped_and_nan(method):
    p = np.array([0.5, np.nan, 0.01, 0.2, 0.9, np.nan, 0.03])
    q, m = adjust(p, method=method)
    assert m == 5 and np.isnan(q[[1, 5]]).all()
    ok = ~np.isnan(p)
    order = np.argsort(p[ok])
    assert np.all(np.diff(q[ok][order]) >= -1e-15)
    assert np.all(q[ok] <= 1) and np.all(q[ok] >= p[ok] - 1e-15)


def test_empty_family():
    q, m = adjust([], method="bh")
    assert m == 0 and q.size == 0
    q, m = adjust([np.nan, np.nan], method="holm")
    assert m == 0 and np.isnan(q).all()
