"""Step 3b: ROC AUC of every slice.

AUC is a rank statistic, not a sum. Within a slice, AUC = U / (n₊ n₋), where U counts
(positive, negative) pairs with the positive scored higher, ties counting ½ (the
Mann-Whitney statistic; equal to scikit-learn's ``roc_auc_score``). Two kinds of evidence:

* :class:`ExactAuc` — from one table held in memory: rows are visited once in increasing
  score order and, for every family, each positive adds the negatives of its own slice seen
  so far. The compiled path sorts in two steps with the rows' codes carried along (a counting
  sort into equal-width score buckets, then each bucket on its own, in cache); the numpy path
  ranks within each slice. Exact values do not add across chunks.
* :class:`ScoreHistogram` — for a table read in chunks: per slice, counts of positives and
  negatives in :data:`HIST_BINS` equal-width score bins on [0, 1]. Histograms add across
  chunks. AUC from them counts every (positive, negative) pair in the same bin as a tie (½),
  so the error against the exact AUC is at most ½ Σ_b n₊_b n₋_b / (n₊ n₋), a bound computed
  per slice from the histogram itself and reported.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .tally import _layout

#: Score buckets of the compiled sort's first pass (equal-width on [0, 1]).
N_BUCKETS = 1024
#: Score bins per slice of a streamed run's AUC histograms (equal-width on [0, 1]).
HIST_BINS = 4096
#: A streamed run's histograms are kept under this many bytes; past it fewer bins are used.
HIST_BYTES = 256 * 1024 * 1024


@dataclass
class ExactAuc:
    """Exact AUC per slice of the tally's families ``families`` (a subset), in layout order."""

    families: tuple[tuple[int, ...], ...]
    values: np.ndarray

    def __add__(self, other):
        raise ValueError("exact ROC AUC values do not add across chunks; tally chunks with score histograms")

    def result(self):
        return self.values, np.zeros(len(self.values))


@dataclass
class ScoreHistogram:
    """Per-slice score histograms by class: ``hist[s, b, c]`` rows of slice ``s`` in score bin
    ``b`` with true class ``c`` (0 negative, 1 positive). Adds across chunks."""

    families: tuple[tuple[int, ...], ...]
    bins: int
    hist: np.ndarray

    def __add__(self, other: "ScoreHistogram") -> "ScoreHistogram":
        if self.families != other.families or self.bins != other.bins:
            raise ValueError("score histograms of different layouts")
        return ScoreHistogram(self.families, self.bins, self.hist + other.hist)

    def result(self) -> tuple[np.ndarray, np.ndarray]:
        """(AUC, bound on |AUC − exact AUC|) per slice; NaN where a class is absent."""
        neg = self.hist[:, :, 0].astype(float)
        pos = self.hist[:, :, 1].astype(float)
        below = np.cumsum(neg, axis=1) - neg  # negatives in lower bins
        u = (pos * below).sum(axis=1) + 0.5 * (pos * neg).sum(axis=1)
        npos, nneg = pos.sum(axis=1), neg.sum(axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            auc = u / (npos * nneg)
            bound = 0.5 * (pos * neg).sum(axis=1) / (npos * nneg)
        ok = (npos > 0) & (nneg > 0)
        return np.where(ok, auc, np.nan), np.where(ok, bound, np.nan)


def hist_bins(n_slices: int) -> int:
    """Bins per slice: :data:`HIST_BINS`, halved until the histograms fit :data:`HIST_BYTES`."""
    b = HIST_BINS
    while b > 64 and n_slices * b * 2 * 8 > HIST_BYTES:
        b //= 2
    return b


def score_histogram(codes, cards, y, score, *, families, bins: int) -> ScoreHistogram:
    """One chunk's per-slice score histograms for ``families``."""
    shapes, offsets = _layout(families, cards)
    b = np.minimum((np.asarray(score) * bins).astype(np.int64), bins - 1)
    yy = np.asarray(y).astype(np.int64)
    out = np.zeros((int(offsets[-1]), bins, 2), dtype=np.int64)
    for k, fam in enumerate(families):
        idx = np.zeros(len(yy), dtype=np.int64)
        for a in fam:
            idx = idx * cards[a] + codes[a]
        size = int(offsets[k + 1] - offsets[k])
        out[offsets[k]:offsets[k + 1]] = np.bincount((idx * bins + b) * 2 + yy,
                                                     minlength=size * bins * 2).reshape(size, bins, 2)
    return ScoreHistogram(tuple(families), bins, out)


def _u_numpy(score, y, codes, cards, families, offsets):
    """U per slice without numba: within each slice, the positives' midranks (ties share)."""
    u = np.zeros(int(offsets[-1]))
    n = len(y)
    pos = np.arange(n)
    for k, fam in enumerate(families):
        idx = np.zeros(n, dtype=np.int64)
        for a in fam:
            idx = idx * cards[a] + codes[a]
        order = np.lexsort((score, idx))
        si, ss, sy = idx[order], score[order], y[order].astype(float)
        new_slice = np.r_[True, si[1:] != si[:-1]]
        slice_start = np.maximum.accumulate(np.where(new_slice, pos, 0))
        new_tie = new_slice | np.r_[True, ss[1:] != ss[:-1]]
        tie_id = np.cumsum(new_tie) - 1
        first = pos[new_tie]
        last = np.r_[first[1:], n] - 1
        midrank = (first[tie_id] + last[tie_id]) / 2.0 - slice_start + 1.0  # 1-based within the slice
        size = int(offsets[k + 1] - offsets[k])
        rsum = np.bincount(si, weights=midrank * sy, minlength=size)
        npos = np.bincount(si, weights=sy, minlength=size)
        u[offsets[k]:offsets[k + 1]] = rsum - npos * (npos + 1) / 2.0
    return u


def slice_auc(codes, cards, y, score, *, families, counts, compiled: bool | None = None) -> np.ndarray:
    """Exact ROC AUC per slice for ``families`` (NaN where a slice lacks positives or negatives).

    ``counts`` is the (slices × 4) cell array of the same families, for n₊ and n₋.
    ``compiled`` picks the numba path (default: when the table is large).
    """
    from .tally import use_compiled

    shapes, offsets = _layout(families, cards)
    yy = y.astype(np.int8, copy=False)
    if compiled is None:
        compiled = use_compiled(len(y), 8 * len(families))
    if compiled:
        import numba

        from .kernels import _bucket_rows, _u_kernel

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
    else:
        u = _u_numpy(np.asarray(score, dtype=np.float64), yy, codes, cards, families, offsets)
    npos = counts[:, 2] + counts[:, 3]
    nneg = counts[:, 0] + counts[:, 1]
    with np.errstate(invalid="ignore", divide="ignore"):
        auc = u / (npos * nneg)
    return np.where((npos > 0) & (nneg > 0), auc, np.nan)
