"""The compiled kernels (numba): the tally's one pass over the rows, per-row losses, small
histograms, and the bucketed sort behind per-slice ROC AUC.

This module is imported only when a table is large enough for compiling to pay off
(``tally.use_compiled``); small tables take the numpy paths, which give identical counts, so
a command line on a small file never loads numba. Kernels are cached on disk (``cache=True``):
the first call in a fresh checkout compiles them (a few seconds), later processes load them.
"""
from __future__ import annotations

import math

import numba
import numpy as np
from numba import njit, prange


@njit(parallel=True, cache=True, nogil=True)
def _losses(y, score, eps):  # pragma: no cover - compiled
    n = y.shape[0]
    ll = np.empty(n)
    br = np.empty(n)
    for i in prange(n):
        p = min(max(score[i], eps), 1.0 - eps)
        ll[i] = -np.log(p) if y[i] == 1 else -np.log(1.0 - p)
        d = score[i] - y[i]
        br[i] = d * d
    return ll, br

@njit(parallel=True, cache=True, nogil=True)
def _histogram(codes, size, nth):  # pragma: no cover - compiled
    # Four interleaved counters per thread: a run of equal codes does not wait on one counter.
    n = codes.shape[0]
    out = np.zeros((nth, 4, size), dtype=np.int64)
    chunk = (n + nth - 1) // nth
    for t in prange(nth):
        o = out[t]
        lo = t * chunk
        hi = min(n, lo + chunk)
        stop = lo + (hi - lo) // 4 * 4
        for i in range(lo, stop, 4):
            o[0, codes[i]] += 1
            o[1, codes[i + 1]] += 1
            o[2, codes[i + 2]] += 1
            o[3, codes[i + 3]] += 1
        for i in range(stop, hi):
            o[0, codes[i]] += 1
    return out.sum(axis=0).sum(axis=0)

def small_histogram(codes, size):
    """Counts of each value of a small unsigned integer array (no int64 copy, unlike np.bincount)."""
    return _histogram(codes, size, max(1, min(numba.get_num_threads(), 1 + len(codes) // 100_000)))

@njit(parallel=True, cache=True, nogil=True)
def _binary_kernel(gt, cell, ll, br, ga, gb, gcb, off, total, nth, block):  # pragma: no cover - compiled
    # One record per slice of each group pair: 4 cell counts then Σll, Σll², Σbr, Σbr², kept
    # together so an update touches one cache line; counts are float64, exact below 2**53.
    # Each thread takes a contiguous share of the rows and walks it in blocks; within a block
    # it finishes one group pair before the next, so the updates of a run stay in one table
    # and the group codes are read as contiguous streams (gt is groups × rows).
    n = cell.shape[0]
    nf = ga.shape[0]
    acc = np.zeros((nth, total * 8), dtype=np.float64)
    chunk = (n + nth - 1) // nth
    for t in prange(nth):
        lo = t * chunk
        hi = min(n, lo + chunk)
        o = acc[t]
        for blo in range(lo, hi, block):
            bhi = min(hi, blo + block)
            for k in range(nf):
                start = off[k]
                ca = gt[ga[k]]
                cb = gt[gb[k]]
                width = gcb[k]
                for r in range(blo, bhi):
                    base = (start + np.int64(ca[r]) * width + cb[r]) * 8
                    a = ll[r]
                    b = br[r]
                    o[base + cell[r]] += 1.0
                    o[base + 4] += a
                    o[base + 5] += a * a
                    o[base + 6] += b
                    o[base + 7] += b * b
    return acc


@njit(parallel=True, cache=True, nogil=True)
def _class_kernel(gt, cell, ll, br, ga, gb, gcb, off, total, nth, block, kk):  # pragma: no cover - compiled
    # _binary_kernel for K classes, with the record split in two tables: K² int32 cell counts
    # per slice (one cache line for K = 4) and Σll, Σll², Σbr, Σbr² per slice. A single float
    # record of K² + 4 values spans two or three lines and measured slower.
    n = cell.shape[0]
    nf = ga.shape[0]
    cnt = np.zeros((nth, total * kk), dtype=np.int32)
    sm = np.zeros((nth, total * 4), dtype=np.float64)
    chunk = (n + nth - 1) // nth
    for t in prange(nth):
        lo = t * chunk
        hi = min(n, lo + chunk)
        oc = cnt[t]
        os_ = sm[t]
        for blo in range(lo, hi, block):
            bhi = min(hi, blo + block)
            for k in range(nf):
                start = off[k]
                ca = gt[ga[k]]
                cb = gt[gb[k]]
                width = gcb[k]
                for r in range(blo, bhi):
                    s = start + np.int64(ca[r]) * width + cb[r]
                    a = ll[r]
                    b = br[r]
                    oc[s * kk + cell[r]] += 1
                    q = s * 4
                    os_[q] += a
                    os_[q + 1] += a * a
                    os_[q + 2] += b
                    os_[q + 3] += b * b
    return cnt, sm


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


@njit(parallel=True, cache=True, nogil=True)
def _triple_kernel(cm, cell, ll, br, fi, fj, fk, cj, ck, rm_off, rowmap, lut_off, lut, off, total, nth,
                   block):  # pragma: no cover - compiled
    # Kept triples only: a row's (first, second) value cell picks a row of the family's lookup
    # table (-1: that pair is below support), its third value the triple's slot (-1: pruned).
    # Same record and the same walk as _binary_kernel: rows in blocks, one family at a time.
    n = cell.shape[0]
    nf = fi.shape[0]
    acc = np.zeros((nth, total * 8), dtype=np.float64)
    chunk = (n + nth - 1) // nth
    for t in prange(nth):
        lo = t * chunk
        hi = min(n, lo + chunk)
        o = acc[t]
        for blo in range(lo, hi, block):
            bhi = min(hi, blo + block)
            for f in range(nf):
                a = cm[fi[f]]
                b = cm[fj[f]]
                c = cm[fk[f]]
                w = cj[f]
                kw = ck[f]
                r0 = rm_off[f]
                l0 = lut_off[f]
                start = off[f]
                for r in range(blo, bhi):
                    row = rowmap[r0 + np.int64(a[r]) * w + b[r]]
                    if row < 0:
                        continue
                    s = lut[l0 + np.int64(row) * kw + c[r]]
                    if s < 0:
                        continue
                    base = (start + s) * 8
                    x = ll[r]
                    y = br[r]
                    o[base + cell[r]] += 1.0
                    o[base + 4] += x
                    o[base + 5] += x * x
                    o[base + 6] += y
                    o[base + 7] += y * y
    return acc


@njit(parallel=True, cache=True, nogil=True)
def _group_triple_counts(gt, cell, pa, pb, pw, pstart, pend, gc, wc, off, total, nth, block):  # pragma: no cover - compiled
    # Cell counts only (int32, four per cell of each group triple): a quarter of the float
    # record's bytes, so a group triple's table stays in cache. Rows in blocks as in
    # _binary_kernel; per block, each group's code is joined to the cell once (c4 = code*4 + cell)
    # and each pair of groups (pa, pb) is joined once (tmp = a*pw + b), so a group triple
    # (pair p, third group gc[k] of width wc[k]) costs one multiply-add and one increment per row.
    # The triples of pair p are pstart[p] .. pend[p] - 1.
    n = cell.shape[0]
    ng = gt.shape[0]
    npair = pa.shape[0]
    acc = np.zeros((nth, total * 4), dtype=np.int32)
    chunk = (n + nth - 1) // nth
    for t in prange(nth):
        lo = t * chunk
        hi = min(n, lo + chunk)
        o = acc[t]
        tmp = np.empty(block, dtype=np.int32)
        c4 = np.empty((ng, block), dtype=np.int32)
        for blo in range(lo, hi, block):
            m = min(hi, blo + block) - blo
            for g in range(ng):
                cg = gt[g]
                for r in range(m):
                    c4[g, r] = (np.int32(cg[blo + r]) << 2) + cell[blo + r]
            for p in range(npair):
                ca = gt[pa[p]]
                cb = gt[pb[p]]
                w = pw[p]
                for r in range(m):
                    tmp[r] = np.int32(ca[blo + r]) * w + cb[blo + r]
                for k in range(pstart[p], pend[p]):
                    start = off[k] * 4
                    w2 = wc[k] * 4
                    cc = c4[gc[k]]
                    for r in range(m):
                        o[start + tmp[r] * w2 + cc[r]] += 1
    return acc


@njit(parallel=True, cache=True, nogil=True)
def probabilities_fit(P, tol):  # pragma: no cover - compiled
    # One pass over a (classes × rows) probability matrix: how many values are missing or outside
    # [0, 1], and how many rows do not sum to 1 within tol (the sum taken class by class, in
    # order, as numpy's sum over the first axis does).
    k, n = P.shape
    bad = 0
    off = 0
    for i in prange(n):
        s = 0.0
        for c in range(k):
            v = P[c, i]
            if not (v >= 0.0 and v <= 1.0):
                bad += 1
            s += v
        if abs(s - 1.0) > tol:
            off += 1
    return bad, off


@njit(parallel=True, cache=True, nogil=True)
def half_erfc(x):  # pragma: no cover - compiled
    # ½ erfc(x / √2) per element: the normal upper tail, with the C library's erfc.
    out = np.empty(x.shape[0])
    s = math.sqrt(2.0)
    for i in prange(x.shape[0]):
        out[i] = 0.5 * math.erfc(x[i] / s)
    return out


@njit(parallel=True, cache=True, nogil=True)
def _class_rows(P, y, eps):  # pragma: no cover - compiled
    # One pass over a (classes × rows) probability matrix: the most probable class (the first on a
    # tie, as numpy's argmax), -ln p(true class) clipped, and Σ_c (p_c − [y = c])².
    k, n = P.shape
    yhat = np.empty(n, dtype=np.int8)
    ll = np.empty(n)
    br = np.empty(n)
    for i in prange(n):
        best = 0
        bv = P[0, i]
        s2 = 0.0
        for c in range(k):
            v = P[c, i]
            s2 += v * v
            if v > bv:
                bv = v
                best = c
        yhat[i] = best
        pt = P[y[i], i]
        ll[i] = -np.log(min(max(pt, eps), 1.0 - eps))
        br[i] = s2 - 2.0 * pt + 1.0
    return yhat, ll, br
