"""Cut points of numeric attributes and the labels of their bins.

Quantile bins take their inner edges from the quantiles of a sample, rounded to a few
significant digits before any row is assigned, so a printed label is the rule itself.

A *mass point* (one value held by so many rows that two quantile edges fall on it, or a
quantile edge falls on the smallest value, or one edge falls on it and it holds a bin's
share of the rows, while the edges stay within the count asked for) gets a bin of its own:
the quantile edges on it are replaced by one edge at the value and one at the next distinct
value above it, each rounded only within the gap that keeps the sample's rows where they
are; the bins left over go to the other values, cut at their own quantiles. Without this, a column
that is 80% zeros has every edge at 0 and ends as one bin ``(-inf, inf)``, which only says
"not missing". The edges never number more than ``n_bins - 1``, so a column never gets more
bins than asked for.
"""
from __future__ import annotations

from decimal import ROUND_CEILING, ROUND_FLOOR, ROUND_HALF_EVEN, Decimal
from typing import Sequence

import numpy as np


def plain(x: float) -> str:
    """An edge as plain digits, exactly (the shortest text that reads back as the same float)."""
    if x == np.inf:
        return "inf"
    if x == -np.inf:
        return "-inf"
    if float(x).is_integer() and abs(x) < 1e16:
        return str(int(x))
    return np.format_float_positional(float(x), trim="-")


def bin_labels(edges: Sequence[float], *, lower_tail: bool, upper_tail: bool) -> list[str]:
    """Labels for bins cut at ``edges``: ``[a, b)`` each, with optional open tails.

    >>> bin_labels([18, 30, 65], lower_tail=True, upper_tail=True)
    ['(-inf, 18)', '[18, 30)', '[30, 65)', '[65, inf)']
    """
    txt = [plain(e) for e in edges]
    out = [f"(-inf, {txt[0]})"] if lower_tail else []
    out += [f"[{txt[i]}, {txt[i + 1]})" for i in range(len(txt) - 1)]
    if upper_tail:
        out.append(f"[{txt[-1]}, inf)")
    return out


def round_edges(inner: np.ndarray, lo: float, hi: float) -> np.ndarray:
    """Inner quantile edges rounded to the fewest significant digits (two or more) that keep
    them distinct, increasing and inside (lo, hi]; raw edges if no rounding does."""
    return _rounded_edges(np.asarray(inner, dtype=float), {}, lo, hi)


def quantile_edges(sample: np.ndarray, lo: float, hi: float, n_bins: int) -> np.ndarray:
    """Inner edges of at most ``n_bins`` quantile bins of ``sample`` (values in [lo, hi]), with
    each mass point in a bin of its own (see the module docstring); empty for one bin."""
    sample = np.asarray(sample, dtype=float)
    if not len(sample) or n_bins < 2:
        return np.empty(0)
    raw = np.quantile(sample, np.linspace(0.0, 1.0, n_bins + 1)[1:-1])
    values, repeats = np.unique(raw, return_counts=True)
    # A value two edges fall on, or the smallest value an edge falls on (that edge is dropped:
    # nothing lies below it), holds more than a bin's share of the rows.
    mass = [float(v) for v, r in zip(values, repeats) if r >= 2 or v == lo]
    edges = _cut(sample, values, mass, lo, hi, n_bins)
    # A value holding a bin's share that only one edge falls on (45% of the rows at 37.5 with 3
    # bins) and that shares its bin with other values is isolated too, heaviest first, while the
    # edges stay within n_bins - 1, and only where that costs no bin.
    pinned = _pinned(sample, mass, lo)
    more = list(mass)
    for v in _heavy(sample, n_bins, values, skip=mass):
        extra = _pins(sample, v, lo)
        if _alone(v, edges, sample) or len(pinned.keys() | extra.keys()) > n_bins - 1:
            continue
        more.append(v)
        pinned.update(extra)
    if len(more) > len(mass):
        tried = _cut(sample, values, more, lo, hi, n_bins)
        if len(tried) >= len(edges):
            edges = tried
    return edges


def _cut(sample: np.ndarray, values: np.ndarray, mass: list[float], lo: float, hi: float, n_bins: int) -> np.ndarray:
    """Rounded inner edges: each value in ``mass`` in a bin of its own, the bins left cut at the
    quantiles of the other values (no mass: the quantile edges ``values`` themselves)."""
    pinned = _pinned(sample, mass, lo)
    free = [float(v) for v in values if lo < v <= hi]
    if mass:
        # The bins the mass points leave go to the other values, by their own quantiles: a column of
        # 80% zeros asked for 5 bins gets the zeros and 4 quantile bins of the rest, not 2 bins.
        rest = sample[~np.isin(sample, mass)]
        k = n_bins - len(pinned)
        free = [float(v) for v in np.quantile(rest, np.linspace(0.0, 1.0, k + 1)[1:-1])] if k >= 2 and len(rest) else []
        free = [v for v in free if lo < v <= hi]
    # An edge inside a pinned gap would cut off an empty bin beside the mass point.
    free = [e for e in free if e not in pinned and not any(a < e <= b for a, b in pinned.values())]
    return _rounded_edges(np.asarray(free), pinned, lo, hi)


def _pinned(sample: np.ndarray, mass: list[float], lo: float) -> dict[float, tuple[float, float]]:
    """Edge -> (a, b]: the gap any cut of which splits the sample alike, for every mass point."""
    out: dict[float, tuple[float, float]] = {}
    for v in mass:
        out.update(_pins(sample, v, lo))
    return out


def _alone(v: float, edges: np.ndarray, sample: np.ndarray) -> bool:
    """Whether the bin ``edges`` put ``v`` in holds no other value of the sample."""
    lower = edges[edges <= v]
    upper = edges[edges > v]
    a = lower[-1] if len(lower) else -np.inf
    b = upper[0] if len(upper) else np.inf
    return not np.any((sample >= a) & (sample < b) & (sample != v))


def _pins(sample: np.ndarray, v: float, lo: float) -> dict[float, tuple[float, float]]:
    """The edges that give the value ``v`` a bin of its own: ``v`` itself (cut within the gap below
    it) unless nothing lies below, and the next distinct value above (cut within the gap above)."""
    out: dict[float, tuple[float, float]] = {}
    below, above = sample[sample < v], sample[sample > v]
    if v > lo and len(below):
        out[v] = (float(below.max()), v)
    if len(above):
        nxt = float(above.min())
        out[nxt] = (v, nxt)
    return out


def _heavy(sample: np.ndarray, n_bins: int, candidates, *, skip: list[float]) -> list[float]:
    """The ``candidates`` that hold at least 1/n_bins of the sample, heaviest first (the quantile
    edges are the candidates: a value holding a bin's share of the sample carries one)."""
    counts = [(int(np.count_nonzero(sample == v)), float(v)) for v in candidates if float(v) not in skip]
    return [v for c, v in sorted(counts, key=lambda cv: -cv[0]) if c * n_bins >= len(sample)]


def _at_digits(x: float, digits: int, mode) -> float:
    """``x`` rounded to ``digits`` significant digits (``mode``: a ``decimal`` rounding)."""
    if x == 0 or not np.isfinite(x):
        return float(x)
    d = Decimal(repr(float(x)))
    return float(d.quantize(Decimal(1).scaleb(d.adjusted() - digits + 1), rounding=mode))


def _short_within(x: float, a: float, b: float) -> float:
    """The number with the fewest significant digits (two or more) in (a, b], nearest ``x`` when
    the nearest rounding lies there; ``x`` itself (inside by construction) otherwise."""
    for digits in range(2, 18):
        for mode in (ROUND_HALF_EVEN, ROUND_FLOOR, ROUND_CEILING):
            r = _at_digits(x, digits, mode)
            if a < r <= b:
                return r
    return float(x)


def _rounded_edges(free: np.ndarray, pinned: dict[float, tuple[float, float]], lo: float, hi: float) -> np.ndarray:
    """Free edges rounded together to the fewest significant digits (two or more) that keep them
    inside (lo, hi]; pinned edges each rounded within their own gap; all distinct and increasing
    in their raw order. Raw edges if no rounding of the free ones does."""
    free = np.unique(free[(free > lo) & (free <= hi)]) if len(free) else np.empty(0)
    fixed = {e: _short_within(e, a, b) for e, (a, b) in pinned.items()}
    keys = sorted(list(free.tolist()) + list(fixed))
    if not keys:
        return np.empty(0)
    is_free = [k not in fixed for k in keys]
    for digits in range(2, 10):
        out = np.array([float(f"{k:.{digits}g}") if f else fixed[k] for k, f in zip(keys, is_free)])
        inside = all(lo < r <= hi for r, f in zip(out, is_free) if f)
        if inside and np.all(np.diff(out) > 0):
            return out
    return np.array(keys, dtype=float)
