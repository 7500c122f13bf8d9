"""The compiled kernel against the numpy reference, chunk additivity, and counts against
scikit-learn's confusion_matrix."""
import numpy as np
import pytest
from sklearn.metrics import confusion_matrix

from audit.core.tally import plan_families, row_losses, tally, tally_numpy


@pytest.fixture(scope="module")
def rows():
    rng = np.random.default_rng(11)
    n = 20_000
    cards = [2, 3, 7, 300]  # 300 levels exercises the 16-bit code matrix
    codes = [rng.integers(0, c, n).astype(np.int32) for c in cards]
    y = rng.integers(0, 2, n).astype(np.int8)
    p = rng.random(n)
    cell = (y * 2 + (p >= 0.5)).astype(np.int8)
    ll, br = row_losses(y, p)
    return codes, cards, cell, ll, br, y, p


def test_compiled_equals_numpy(rows):
    codes, cards, cell, ll, br, *_ = rows
    fams = plan_families(len(cards), 2)
    a = tally(codes, cards, cell, ll, br, families=fams, kernel="compiled")
    b = tally_numpy(codes, cards, cell, ll, br, families=fams)
    assert np.array_equal(a.counts, b.counts)
    np.testing.assert_allclose(a.sums, b.sums, rtol=1e-11, atol=1e-9)


@pytest.mark.parametrize("kernel", ["compiled", "numpy"])
def test_chunks_add_up(rows, kernel):
    codes, cards, cell, ll, br, *_ = rows
    fams = plan_families(len(cards), 2)
    whole = tally(codes, cards, cell, ll, br, families=fams, kernel=kernel)
    cut = 7_919
    first = tally([c[:cut] for c in codes], cards, cell[:cut], ll[:cut], br[:cut], families=fams, kernel=kernel)
    second = tally([c[cut:] for c in codes], cards, cell[cut:], ll[cut:], br[cut:], families=fams, kernel=kernel)
    both = first + second
    assert np.array_equal(both.counts, whole.counts)
    np.testing.assert_allclose(both.sums, whole.sums, rtol=1e-11)


@pytest.mark.parametrize("kernel", ["compiled", "numpy"])
def test_counts_match_sklearn_confusion_matrix(rows, kernel):
    codes, cards, cell, ll, br, y, p = rows
    fams = plan_families(len(cards), 2)
    t = tally(codes, cards, cell, ll, br, families=fams, kernel=kernel)
    yhat = (p >= 0.5).astype(int)
    rng = np.random.default_rng(3)
    for k in rng.choice(len(fams), 8, replace=False):
        fam = fams[k]
        counts, _ = t.family(k)
        for s in rng.choice(len(counts), 5):
            if not fam:
                mask = np.ones(len(y), bool)
            elif len(fam) == 1:
                mask = codes[fam[0]] == s
            else:
                mask = (codes[fam[0]] == s // cards[fam[1]]) & (codes[fam[1]] == s % cards[fam[1]])
            # reference: sklearn.metrics.confusion_matrix, ravel order tn, fp, fn, tp
            ref = confusion_matrix(y[mask], yhat[mask], labels=[0, 1]).ravel()
            assert counts[s].tolist() == ref.tolist()


def test_log_loss_sum_matches_sklearn(rows):
    from sklearn.metrics import log_loss

    *_, y, p = rows
    ll, br = row_losses(y, p)
    assert ll.mean() == pytest.approx(log_loss(y, p), rel=1e-12)


def test_compiled_losses_equal_numpy_losses():
    # The compiled per-row losses (used above 100,000 rows) against the numpy expression.
    rng = np.random.default_rng(12)
    y = rng.integers(0, 2, 200_000).astype(np.int8)
    p = np.r_[rng.random(199_998), 0.0, 1.0]
    ll, br = row_losses(y, p)
    q = np.clip(p, 1e-15, 1 - 1e-15)
    np.testing.assert_allclose(ll, -np.log(np.where(y == 1, q, 1 - q)), rtol=1e-15)
    np.testing.assert_allclose(br, (p - y) ** 2, rtol=1e-15)
