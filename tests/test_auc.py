"""Per-slice ROC AUC (bucketed sort, two threads) against scikit-learn's roc_auc_score."""
import numpy as np
import pytest
from sklearn.metrics import roc_auc_score

from audit.core.auc import _u_numpy, slice_auc
from audit.core.tally import _layout, plan_families, tally


def _rows(score_kind: str, n: int = 120_000, seed: int = 21):
    rng = np.random.default_rng(seed)
    cards = [2, 5, 300]  # 300 levels: codes wider than one byte
    codes = [rng.integers(0, c, n).astype(np.int32) for c in cards]
    y = rng.integers(0, 2, n).astype(np.int8)
    if score_kind == "continuous":
        p = np.clip(rng.beta(2, 5, n) + 0.2 * y, 0, 1)
    elif score_kind == "coarse":  # a score given to two decimals: ties everywhere
        p = np.round(np.clip(rng.beta(2, 5, n) + 0.2 * y, 0, 1), 2)
    elif score_kind == "crowded":  # nearly every score in one narrow band, one outlier in its bucket, both ends
        p = np.r_[0.3 + 1e-9 * rng.random(n - 5) * (1 + y[:-5]), 0.3005, 0.0, 1.0, 1.0, 0.0]
    else:  # a single value: every pair is a tie
        p = np.full(n, 0.5)
    return codes, cards, y, p


@pytest.mark.parametrize("kind", ["continuous", "coarse", "crowded", "constant"])
def test_slice_auc_matches_sklearn(kind):
    codes, cards, y, p = _rows(kind)
    fams = plan_families(len(cards), 2)
    cell = (y * 2 + (p >= 0.5)).astype(np.int8)
    t = tally(codes, cards, cell, families=fams)
    auc = slice_auc(codes, cards, y, p, families=fams, counts=t.counts, compiled=True)
    rng = np.random.default_rng(4)
    for k in [0, 1, 2, 3, 4, 5, 6]:  # the whole table, the three singles, the three pairs
        fam = fams[k]
        lo = t.offsets[k]
        for s in rng.choice(int(t.offsets[k + 1] - lo), min(6, int(t.offsets[k + 1] - lo)), replace=False):
            mask = np.ones(len(y), bool)
            rest = int(s)
            for a in reversed(fam):
                mask &= codes[a] == rest % cards[a]
                rest //= cards[a]
            yt, pt = y[mask], p[mask]
            got = auc[lo + s]
            if yt.min() == yt.max():
                assert np.isnan(got)
            else:
                # reference: sklearn.metrics.roc_auc_score (ties count one half)
                assert got == pytest.approx(roc_auc_score(yt, pt), rel=1e-12, abs=1e-15)


def test_compiled_u_equals_numpy_reference():
    codes, cards, y, p = _rows("coarse", n=30_000)
    fams = plan_families(len(cards), 1)
    cell = (y * 2 + (p >= 0.5)).astype(np.int8)
    t = tally(codes, cards, cell, families=fams)
    auc = slice_auc(codes, cards, y, p, families=fams, counts=t.counts, compiled=True)
    _, offsets = _layout(fams, cards)
    u = _u_numpy(p, y, codes, cards, fams, offsets)
    npos, nneg = t.counts[:, 2] + t.counts[:, 3], t.counts[:, 0] + t.counts[:, 1]
    np.testing.assert_allclose(auc, u / (npos * nneg), rtol=1e-12)
