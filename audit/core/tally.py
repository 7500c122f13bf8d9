"""Step 3: per-slice sufficient statistics, as sums that add across chunks of rows.

For every slice family (the whole table, each attribute, each pair of attributes) this
module counts the confusion cells of every slice and sums the per-row losses. Everything
later (metrics, intervals, tests) is derived from these sums, so a table read in chunks,
or tallied on several workers, gives the same audit by adding :class:`Tally` objects.

Layout
------
A slice's position inside its family is the mixed-radix number of its attribute codes
(first attribute most significant). ``counts[s, y * K + yhat]`` holds the number of rows
of slice ``s`` with true class ``y`` and predicted class ``yhat`` (``K = 2`` here; the
layout already fits ``K`` classes). ``sums[s]`` holds Σ log loss, Σ log loss², Σ Brier,
Σ Brier² over the slice's rows (zeros when no probability is given).

Two kernels produce identical counts: a compiled one (numba, one pass over the rows
for all families) and a plain numpy one (``np.bincount`` per family) kept as the
reference and fallback. Float sums agree to rounding.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

try:  # the compiled kernel is optional at import time; numpy is the fallback
    import numba
    from numba import njit, prange
except ImportError:  # pragma: no cover - numba is a declared dependency
    numba = None

#: Probabilities are clipped to [EPS, 1 - EPS] before taking logs.
EPS = 1e-15
N_SUMS = 4  # Σ ll, Σ ll², Σ brier, Σ brier²
#: Rows per block of the compiled kernel (see ``_binary_kernel``); measured in bench/.
KERNEL_BLOCK = 8192


def row_losses(y: np.ndarray, score: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-row log loss (natural log, clipped at ``EPS``) and Brier score."""
    if numba is not None and len(y) > 100_000:
        return _losses(y.astype(np.int8, copy=False), np.asarray(score, dtype=np.float64), EPS)
    p = np.clip(score, EPS, 1.0 - EPS)
    yb = y.astype(bool)
    ll = -np.log(np.where(yb, p, 1.0 - p))
    br = (score - y) ** 2
    return ll, br


@dataclass
class Tally:
    """Sums for a list of slice families; ``tally_a + tally_b`` tallies the union of rows."""

    families: tuple[tuple[int, ...], ...]
    shapes: tuple[tuple[int, ...], ...]
    offsets: np.ndarray  # start row of each family in counts/sums (len = families + 1)
    counts: np.ndarray   # (slices, K*K) int64
    sums: np.ndarray     # (slices, N_SUMS) float64
    n_classes: int = 2

    def __add__(self, other: "Tally") -> "Tally":
        if self.families != other.families or self.shapes != other.shapes:
            raise ValueError("tallies cover different slice families; encode every chunk with the same levels")
        return Tally(self.families, self.shapes, self.offsets, self.counts + other.counts,
                     self.sums + other.sums, self.n_classes)

    def family(self, k: int) -> tuple[np.ndarray, np.ndarray]:
        a, b = self.offsets[k], self.offsets[k + 1]
        return self.counts[a:b], self.sums[a:b]


def plan_families(n_attributes: int, max_order: int) -> list[tuple[int, ...]]:
    fams: list[tuple[int, ...]] = [()]
    if max_order >= 1:
        fams += [(i,) for i in range(n_attributes)]
    if max_order >= 2:
        fams += [(i, j) for i in range(n_attributes) for j in range(i + 1, n_attributes)]
    return fams


def _layout(families, cards):
    shapes = tuple(tuple(cards[i] for i in f) for f in families)
    sizes = [math.prod(s) for s in shapes]
    offsets = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    return shapes, offsets


def tally_numpy(codes, cards, cell, ll=None, br=None, *, families, n_classes=2) -> Tally:
    """Reference kernel: one ``np.bincount`` per family and quantity."""
    kk = n_classes * n_classes
    shapes, offsets = _layout(families, cards)
    total = int(offsets[-1])
    counts = np.zeros((total, kk), dtype=np.int64)
    sums = np.zeros((total, N_SUMS), dtype=np.float64)
    n = len(cell)
    weights = [] if ll is None else [ll, ll * ll, br, br * br]
    for k, fam in enumerate(families):
        size = int(offsets[k + 1] - offsets[k])
        idx = np.zeros(n, dtype=np.int64)
        for a in fam:
            idx = idx * cards[a] + codes[a]
        counts[offsets[k]:offsets[k + 1]] = np.bincount(idx * kk + cell, minlength=size * kk).reshape(size, kk)
        for w, wt in enumerate(weights):
            sums[offsets[k]:offsets[k + 1], w] = np.bincount(idx, weights=wt, minlength=size)
    return Tally(tuple(families), shapes, offsets, counts, sums, n_classes)


if numba is not None:

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

else:  # pragma: no cover - numba is a declared dependency

    def small_histogram(codes, size):
        return np.bincount(codes, minlength=size)


def tally(codes, cards, cell, ll=None, br=None, *, families, n_classes=2, kernel="auto",
          group_limit: int = 96) -> Tally:
    """Tally every family in ``families`` (tuples of at most two attribute indices).

    ``kernel`` is ``"compiled"``, ``"numpy"`` or ``"auto"`` (compiled when numba imports; the
    compiled kernel has the binary record layout, other class counts use numpy).
    """
    if kernel == "numpy" or numba is None or n_classes != 2 or any(len(f) > 2 for f in families):
        return tally_numpy(codes, cards, cell, ll, br, families=families, n_classes=n_classes)
    families = tuple(families)
    pairs = tuple(f for f in families if len(f) == 2)
    if pairs and all(_derivable(f, pairs) for f in families if len(f) < 2):
        # Count only the pairs; every single and the whole table are their margins.
        return _from_pairs(_grouped_pairs(codes, cards, cell, ll, br, pairs, n_classes, group_limit),
                           families, cards)
    return _compiled(codes, cards, cell, ll, br, families, n_classes)


def plan_groups(cards, limit: int) -> list[list[int]]:
    """Pack attributes into groups whose product of cardinalities stays within ``limit``
    (largest attribute first, filled with the smallest that fit)."""
    order = sorted(range(len(cards)), key=lambda i: (-cards[i], i))
    used: set[int] = set()
    groups = []
    for i in order:
        if i in used:
            continue
        g, prod = [i], cards[i]
        used.add(i)
        for j in reversed(order):
            if j not in used and prod * cards[j] <= limit:
                g.append(j)
                prod *= cards[j]
                used.add(j)
        groups.append(sorted(g))
    return sorted(groups)


def _grouped_pairs(codes, cards, cell, ll, br, pairs, n_classes, limit) -> Tally:
    """Tally attribute pairs through pairs of attribute *groups*.

    Each row updates one cell per pair of groups instead of one per pair of attributes
    (15 instead of 66 updates for the 12-attribute benchmark); each attribute pair is a margin of
    the table of the two groups that hold it (or of any table holding its one group).
    """
    kk = n_classes * n_classes
    groups = plan_groups(cards, limit)
    if len(groups) == len(cards) or len(groups) < 2:
        return _compiled(codes, cards, cell, ll, br, pairs, n_classes)
    where = {a: gi for gi, g in enumerate(groups) for a in g}
    gcards = [math.prod(cards[a] for a in g) for g in groups]
    gpairs = [(i, j) for i in range(len(groups)) for j in range(i + 1, len(groups))]
    acc = _run_group_kernel(codes, cards, cell, ll, br, groups, gcards, gpairs, n_classes)
    gshapes, goffsets = _layout(gpairs, gcards)
    gt = Tally(tuple(gpairs), gshapes, goffsets, None, None, n_classes)
    shapes, offsets = _layout(pairs, cards)
    out = np.zeros((int(offsets[-1]), kk + N_SUMS))
    for k, (i, j) in enumerate(pairs):
        gi, gj = where[i], where[j]
        if gi == gj:
            other = 1 if gi == 0 else 0
            gp = (min(gi, other), max(gi, other))
        else:
            gp = (gi, gj) if gi < gj else (gj, gi)
        f = gpairs.index(gp)
        axes_attrs = groups[gp[0]] + groups[gp[1]]
        block = acc[gt.offsets[f]:gt.offsets[f + 1]].reshape([cards[a] for a in axes_attrs] + [kk + N_SUMS])
        # positions of i and j; if a group appears once, each attribute appears once
        ai, aj = axes_attrs.index(i), axes_attrs.index(j)
        keep = sorted((ai, aj))
        summed = block.sum(axis=tuple(ax for ax in range(len(axes_attrs)) if ax not in keep))
        if ai > aj:
            summed = summed.transpose(1, 0, 2)
        out[offsets[k]:offsets[k + 1]] = summed.reshape(-1, kk + N_SUMS)
    return Tally(tuple(pairs), shapes, offsets, np.rint(out[:, :kk]).astype(np.int64),
                 np.ascontiguousarray(out[:, kk:]), n_classes)


def _derivable(fam, pairs) -> bool:
    return len(fam) == 0 or any(fam[0] in p for p in pairs)


def _from_pairs(pt: Tally, families, cards) -> Tally:
    kk = pt.n_classes ** 2
    shapes, offsets = _layout(families, cards)
    counts = np.zeros((int(offsets[-1]), kk), dtype=np.int64)
    sums = np.zeros((int(offsets[-1]), N_SUMS), dtype=np.float64)
    where = {f: k for k, f in enumerate(pt.families)}
    for k, fam in enumerate(families):
        lo, hi = offsets[k], offsets[k + 1]
        if len(fam) == 2:
            c, s = pt.family(where[fam])
        else:
            p = next(p for p in pt.families if len(fam) == 0 or fam[0] in p)
            c, s = pt.family(where[p])
            c = c.reshape(cards[p[0]], cards[p[1]], kk)
            s = s.reshape(cards[p[0]], cards[p[1]], N_SUMS)
            keep = () if len(fam) == 0 else (p.index(fam[0]),)
            axes = tuple(ax for ax in (0, 1) if ax not in keep)
            c = c.sum(axis=axes).reshape(-1, kk)
            s = s.sum(axis=axes).reshape(-1, N_SUMS)
        counts[lo:hi] = c
        sums[lo:hi] = s
    return Tally(tuple(families), shapes, offsets, counts, sums, pt.n_classes)


def _compiled(codes, cards, cell, ll, br, families, n_classes) -> Tally:
    """Every family through the group kernel, each attribute its own group.

    A constant group with no members (code 0) at index ``len(codes)`` turns singles and the
    whole table into pairs (attribute, constant), so the kernel has one branch-free update.
    """
    n_attr = len(codes)
    groups = [[a] for a in range(n_attr)] + [[]]
    gcards = list(cards) + [1]
    fams = [((f[0] if len(f) > 0 else n_attr), (f[1] if len(f) > 1 else n_attr)) for f in families]
    acc = _run_group_kernel(codes, cards, cell, ll, br, groups, gcards, fams, n_classes)
    kk = n_classes * n_classes
    shapes, offsets = _layout(families, cards)
    return Tally(tuple(families), shapes, offsets, acc[:, :kk].astype(np.int64), np.ascontiguousarray(acc[:, kk:]),
                 n_classes)


def _run_group_kernel(codes, cards, cell, ll, br, groups, gcards, gpairs, n_classes) -> np.ndarray:
    """One pass over the rows; returns the (cells × (K² + 4)) accumulator of the group pairs."""
    kk = n_classes * n_classes
    _, goffsets = _layout(gpairs, gcards)
    ga = np.array([p[0] for p in gpairs], dtype=np.int64)
    gb = np.array([p[1] for p in gpairs], dtype=np.int64)
    gcb = np.array([gcards[p[1]] for p in gpairs], dtype=np.int64)
    if ll is None:
        ll = br = np.zeros(len(cell))
    nth = max(1, min(numba.get_num_threads(), 1 + len(cell) // 50_000))
    # Groups × rows matrix of group codes (mixed radix of the members), in the narrowest type;
    # built row by row of the matrix so every numpy step runs over contiguous memory.
    gdt = np.uint16 if max(gcards) <= 65535 else np.int64
    gt = np.empty((len(groups), len(cell)), dtype=gdt)
    for q, g in enumerate(groups):
        v = gt[q]
        if not g:
            v[:] = 0
            continue
        np.copyto(v, codes[g[0]], casting="unsafe")
        for a in g[1:]:
            np.multiply(v, gdt(cards[a]), out=v)
            np.add(v, codes[a], out=v, casting="unsafe")
    total = int(goffsets[-1])
    c8 = cell.astype(np.int8, copy=False)
    acc = _binary_kernel(gt, c8, ll, br, ga, gb, gcb, goffsets[:-1].copy(), total, nth, KERNEL_BLOCK)
    return acc.sum(axis=0).reshape(total, kk + 4)
