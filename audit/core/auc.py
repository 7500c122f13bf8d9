"""Step 3b: ROC AUC of every slice, from one sort of the scores.

AUC is a rank statistic, not a sum, so it cannot be added across chunks of rows like the
tallies. Within a slice, AUC = U / (n₊ n₋), where U counts (positive, negative) pairs
with the positive scored higher, ties counting ½ (the Mann-Whitney statistic; equal to
scikit-learn's ``roc_auc_score``). Rows are visited once in increasing score order; for
every family each positive adds the number of negatives of its own slice seen so far.

The sort is done in two steps with the rows' codes carried along: a counting sort into
equal-width score buckets, then a sort of each bucket on its own, small enough to stay in
cache. Reading rows through a global permutation instead costs a cache miss per row.
"""
from __future__ import annotations

import numpy as np

from .tally import _layout

try:
    import numba
    from numba import njit, prange
except ImportError:  # pragma: no cover
    njit = None


#: Score buckets of the first sorting pass (equal-width on [0, 1]).
N_BUCKETS = 1024

if njit is not None:

    @njit(parallel=True, cache=True, nogil=True)
    def _bucket_rows(score, y, cm, nbk, nth):  # pragma: no cover - compiled
        # Counting sort of the rows into equal-width score buckets, moving each row's score,
        # label and codes (cm is codes × rows) so later passes read every bucket contiguously.
        n = score.shape[0]
        na = cm.shape[0]
        chunk = (n + nth - 1) // nth
        hist = np.zeros((nth, nbk), dtype=np.int64)
        for t in prange(nth):
            for i in range(t * chunk, min(n, (t + 1) * chunk)):
                hist[t, min(np.int64(score[i] * nbk), nbk - 1)] += 1
        start = np.zeros(nbk + 1, dtype=np.int64)
        pos = np.zeros((nth, nbk), dtype=np.int64)
        run = 0
        for b in range(nbk):
            start[b] = run
            for t in range(nth):
                pos[t, b] = run
                run += hist[t, b]
        start[nbk] = run
        ss = np.empty(n)
        sy = np.empty(n, dtype=np.int8)
        sc = np.empty((n, na), dtype=cm.dtype)
        for t in prange(nth):
            p = pos[t]
            for i in range(t * chunk, min(n, (t + 1) * chunk)):
                b = min(np.int64(score[i] * nbk), nbk - 1)
                q = p[b]
                p[b] = q + 1
                ss[q] = score[i]
                sy[q] = y[i]
                for j in range(na):
                    sc[q, j] = cm[j, i]
        return ss, sy, sc, start

    @njit(cache=True, nogil=True)
    def _sort_bucket(v, lo, hi, order, cnt, tmp):  # pragma: no cover - compiled
        # order[0:m] <- positions lo..hi-1 sorted by v: a counting sort into about m equal-width
        # sub-buckets of [min, max], then insertion sort inside each; a crowded sub-bucket falls
        # back to argsort.
        m = hi - lo
        vmin = v[lo]
        vmax = v[lo]
        for i in range(lo, hi):
            vmin = min(vmin, v[i])
            vmax = max(vmax, v[i])
        if vmax == vmin:
            for i in range(m):
                order[i] = lo + i
            return
        nsub = m
        scale = nsub / (vmax - vmin)
        for s in range(nsub + 1):
            cnt[s] = 0
        for i in range(lo, hi):
            s = min(np.int64((v[i] - vmin) * scale), nsub - 1)
            tmp[i - lo] = s
            cnt[s + 1] += 1
        for s in range(nsub):
            cnt[s + 1] += cnt[s]
        for i in range(lo, hi):
            s = tmp[i - lo]
            order[cnt[s]] = i
            cnt[s] += 1
        # cnt[s] is now the end of sub-bucket s
        begin = 0
        for s in range(nsub):
            end = cnt[s]
            w = end - begin
            if w > 64:
                sub = order[begin:end].copy()
                o = np.argsort(v[sub])
                for q in range(w):
                    order[begin + q] = sub[o[q]]
            elif w > 1:
                for q in range(begin + 1, end):
                    key = order[q]
                    kv = v[key]
                    j = q - 1
                    while j >= begin and v[order[j]] > kv:
                        order[j + 1] = order[j]
                        j -= 1
                    order[j + 1] = key
            begin = end

    @njit(parallel=True, cache=True, nogil=True)
    def _u_kernel(ss, sy, sc, start, fa, fb, cb, off, total, nth):  # pragma: no cover - compiled
        # Buckets are visited in score order. Each is sorted on its own and its rows copied in that
        # order to a small buffer that stays in cache. Thread t takes a contiguous run of buckets and
        # counts, per slice, U within its run and its negatives and positives; runs are joined at the
        # end: a positive of run t is also above every negative of the runs before it. Equal scores
        # share a bucket, so no tie block is split between runs.
        nbk = start.shape[0] - 1
        n = start[nbk]
        nf = fa.shape[0]
        na = sc.shape[1]
        cut = np.zeros(nth + 1, dtype=np.int64)
        b = 0
        for t in range(1, nth):
            while b < nbk and start[b] < t * n // nth:
                b += 1
            cut[t] = b
        cut[nth] = nbk
        big = 0
        for bk in range(nbk):
            big = max(big, start[bk + 1] - start[bk])
        R = np.zeros((nth, total, 3))  # per slice: U, negatives, positives
        for t in prange(nth):
            acc = R[t]
            order = np.empty(big, dtype=np.int64)
            cnt = np.empty(big + 1, dtype=np.int64)
            tmp = np.empty(big, dtype=np.int64)
            lsc = np.empty((big, na), dtype=sc.dtype)
            ly = np.empty(big)
            lv = np.empty(big)
            pb = np.zeros(total)
            nb = np.zeros(total)
            for bk in range(cut[t], cut[t + 1]):
                lo = start[bk]
                hi = start[bk + 1]
                m = hi - lo
                if m == 0:
                    continue
                _sort_bucket(ss, lo, hi, order, cnt, tmp)
                ties = False
                for i in range(m):
                    r = order[i]
                    lv[i] = ss[r]
                    ly[i] = sy[r]
                    for j in range(na):
                        lsc[i, j] = sc[r, j]
                    if i > 0 and lv[i] == lv[i - 1]:
                        ties = True
                if not ties:  # the common case: one family at a time, no branch per row
                    for k in range(nf):
                        base = off[k]
                        ca = fa[k]
                        cf = fb[k]
                        width = cb[k]
                        for i in range(m):
                            idx = base + np.int64(lsc[i, ca]) * width + lsc[i, cf]
                            yv = ly[i]
                            acc[idx, 0] += yv * acc[idx, 1]
                            acc[idx, 1] += 1.0 - yv
                            acc[idx, 2] += yv
                else:
                    i = 0
                    while i < m:
                        j = i + 1
                        while j < m and lv[j] == lv[i]:
                            j += 1
                        for q in range(i, j):
                            for k in range(nf):
                                idx = off[k] + np.int64(lsc[q, fa[k]]) * cb[k] + lsc[q, fb[k]]
                                if ly[q] == 1.0:
                                    acc[idx, 0] += acc[idx, 1]
                                    pb[idx] += 1.0
                                else:
                                    nb[idx] += 1.0
                        for q in range(i, j):  # ties within the block count one half
                            for k in range(nf):
                                idx = off[k] + np.int64(lsc[q, fa[k]]) * cb[k] + lsc[q, fb[k]]
                                if pb[idx] != 0.0 or nb[idx] != 0.0:
                                    acc[idx, 0] += 0.5 * pb[idx] * nb[idx]
                                    acc[idx, 1] += nb[idx]
                                    acc[idx, 2] += pb[idx]
                                    pb[idx] = 0.0
                                    nb[idx] = 0.0
                        i = j
        out = np.zeros(total)
        below = np.zeros(total)
        for t in range(nth):
            for q in range(total):
                out[q] += R[t, q, 0] + R[t, q, 2] * below[q]
                below[q] += R[t, q, 1]
        return out


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
    yy = y.astype(np.int8, copy=False)
    if njit is not None:
        used = sorted({a for f in families for a in f})
        local = {a: i for i, a in enumerate(used)}
        const = len(used)  # an all-zero code row stands in for "no attribute"
        fa = np.array([local[f[0]] if len(f) > 0 else const for f in families], dtype=np.int64)
        fb = np.array([local[f[1]] if len(f) > 1 else const for f in families], dtype=np.int64)
        cb = np.array([cards[f[1]] if len(f) > 1 else 1 for f in families], dtype=np.int64)
        top = max([cards[a] for a in used] + [1])
        dt = np.uint8 if top <= 255 else (np.uint16 if top <= 65535 else np.int32)
        cm = np.zeros((len(used) + 1, len(y)), dtype=dt)
        for i, a in enumerate(used):
            cm[i] = codes[a]
        nth = max(1, min(numba.get_num_threads(), 1 + len(y) // 50_000))
        ss, sy, sc, start = _bucket_rows(np.asarray(score, dtype=np.float64), yy, cm, N_BUCKETS, nth)
        u = _u_kernel(ss, sy, sc, start, fa, fb, cb, offsets.copy(), int(offsets[-1]), nth)
    else:  # pragma: no cover
        u = _u_numpy(np.argsort(score), score, yy, codes, cards, families, offsets)
    npos = counts[:, 2] + counts[:, 3]
    nneg = counts[:, 0] + counts[:, 1]
    with np.errstate(invalid="ignore", divide="ignore"):
        auc = u / (npos * nneg)
    return np.where((npos > 0) & (nneg > 0), auc, np.nan)
