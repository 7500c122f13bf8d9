"""Step 3b: ROC AUC of every slice, from one global sort of the scores.

AUC is a rank statistic, not a sum, so it cannot be added across chunks of rows like the
tallies. Within a slice, AUC = U / (n₊ n₋), where U counts (positive, negative) pairs
with the positive scored higher, ties counting ½ (the Mann-Whitney statistic; equal to
scikit-learn's ``roc_auc_score``). Rows are visited once in increasing score order; for
every family each positive adds the number of negatives of its own slice seen so far.
"""
from __future__ import annotations

import numpy as np

from .tally import _layout, code_matrix

try:
    from numba import njit, prange
except ImportError:  # pragma: no cover
    njit = None


if njit is not None:

    @njit(parallel=True, cache=True, nogil=True)
    def _u_kernel(score, y, ct, fa, fb, cb, off, total):  # pragma: no cover - compiled
        # Rows arrive sorted by score. Families are independent, so they run in parallel;
        # each family's slices occupy their own range of the output arrays.
        nf = fa.shape[0]
        u = np.zeros(total)
        n = score.shape[0]
        for k in prange(nf):
            size = off[k + 1] - off[k]
            neg_before = np.zeros(size)
            pos_blk = np.zeros(size)
            neg_blk = np.zeros(size)
            uk = np.zeros(size)
            i = 0
            while i < n:
                s = score[i]
                j = i
                while j < n and score[j] == s:
                    j += 1
                for r in range(i, j):
                    idx = np.int64(ct[r, fa[k]]) * cb[k] + ct[r, fb[k]]
                    if y[r] == 1:
                        uk[idx] += neg_before[idx]
                        pos_blk[idx] += 1.0
                    else:
                        neg_blk[idx] += 1.0
                for r in range(i, j):  # ties within the block count one half
                    idx = np.int64(ct[r, fa[k]]) * cb[k] + ct[r, fb[k]]
                    if pos_blk[idx] != 0.0 or neg_blk[idx] != 0.0:
                        uk[idx] += 0.5 * pos_blk[idx] * neg_blk[idx]
                        neg_before[idx] += neg_blk[idx]
                        pos_blk[idx] = 0.0
                        neg_blk[idx] = 0.0
                i = j
            for q in range(size):
                u[off[k] + q] = uk[q]
        return u


def _u_numpy(perm, score, y, codes, cards, families, offsets):
    # Reference path without numba: per family, midranks within each slice.
    from scipy.stats import rankdata

    u = np.zeros(int(offsets[-1]))
    for k, fam in enumerate(families):
        idx = np.zeros(len(y), dtype=np.int64)
        for a in fam:
            idx = idx * cards[a] + codes[a]
        order = np.lexsort((score, idx))
        si, ss, sy = idx[order], score[order], y[order]
        starts = np.flatnonzero(np.r_[True, si[1:] != si[:-1]])
        ends = np.r_[starts[1:], len(si)]
        for a0, b0 in zip(starts, ends):
            r = rankdata(ss[a0:b0])
            npos = sy[a0:b0].sum()
            u[offsets[k] + si[a0]] = r[sy[a0:b0] == 1].sum() - npos * (npos + 1) / 2
    return u


def slice_auc(codes, cards, y, score, *, families, counts) -> np.ndarray:
    """ROC AUC per slice for ``families`` (NaN where a slice lacks positives or negatives).

    ``counts`` is the (slices × 4) cell array of the same families, for n₊ and n₋.
    """
    shapes, offsets = _layout(families, cards)
    perm = np.argsort(score)  # order within ties does not matter: ties are counted as blocks
    yy = y.astype(np.int8, copy=False)
    if njit is not None:
        n_attr = len(codes)
        fa = np.array([f[0] if len(f) > 0 else n_attr for f in families], dtype=np.int64)
        fb = np.array([f[1] if len(f) > 1 else n_attr for f in families], dtype=np.int64)
        cb = np.array([cards[f[1]] if len(f) > 1 else 1 for f in families], dtype=np.int64)
        used = sorted({a for f in families for a in f})
        local = {a: i for i, a in enumerate(used)}
        fa = np.array([local.get(int(x), len(used)) for x in fa], dtype=np.int64)
        fb = np.array([local.get(int(x), len(used)) for x in fb], dtype=np.int64)
        # Gather the rows into score order once, so the kernel reads them sequentially.
        ct = code_matrix([codes[a] for a in used] + [np.zeros(len(y), dtype=np.int32)],
                         [cards[a] for a in used] + [1])[perm]
        u = _u_kernel(score[perm], yy[perm], ct, fa, fb, cb, offsets.copy(), int(offsets[-1]))
    else:  # pragma: no cover
        u = _u_numpy(perm, score, yy, codes, cards, families, offsets)
    npos = counts[:, 2] + counts[:, 3]
    nneg = counts[:, 0] + counts[:, 1]
    with np.errstate(invalid="ignore", divide="ignore"):
        auc = u / (npos * nneg)
    return np.where((npos > 0) & (nneg > 0), auc, np.nan)
