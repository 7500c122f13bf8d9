"""Step 5b: test each slice against its complement (the rest of the rows).

Methods, by metric kind:

* rates and F1 — a two-proportion comparison. Two-sided pooled z test (equal to Pearson's
  chi-square on the 2 × 2 table without continuity correction); when any expected cell
  count is below 5 (Cochran's rule, common practice) Fisher's exact test is used instead.
  F1 is compared through the Jaccard index J = tp / (tp + fp + fn): F1 = 2J/(1+J) is
  increasing in J, so equal J means equal F1.
* mean losses (log loss, Brier) — Welch's unequal-variance t test from n, Σx and Σx².

Effect sizes: Cohen's h = 2 asin √p₁ − 2 asin √p₂ for proportions and F1; Cohen's d with
the average of the two variances for means.
"""
from __future__ import annotations

import math
import sys
from dataclasses import dataclass

import numpy as np

from .methods import TEST_METHODS

#: Expected cell count under which Fisher's exact test replaces the z test.
MIN_EXPECTED = 5.0


@dataclass(frozen=True)
class TestMethod:
    name: str
    title: str
    kinds: tuple[str, ...]
    reference: str


#: Slice-versus-rest tests: the registry ``methods.TEST_METHODS`` with the metric kinds each serves.
TESTS: dict[str, TestMethod] = {
    k: TestMethod(k, m.title, tuple(m.detail.split()), m.reference) for k, m in TEST_METHODS.items()}


def _log_factorial(k: np.ndarray) -> np.ndarray:
    """ln k! for whole k >= 0, from math.lgamma on the distinct values (no scipy needed)."""
    k = np.asarray(k, dtype=float)
    u, inv = np.unique(k, return_inverse=True)
    vals = np.array([math.lgamma(x + 1.0) if x >= 0 else math.nan for x in u.tolist()])
    return vals[inv].reshape(k.shape)


def _log_choose(a, b):
    return _log_factorial(a) - _log_factorial(b) - _log_factorial(np.asarray(a) - np.asarray(b))


def _hypergeom_logpmf(x, total, good, draws):
    # ln P(X = x) for X ~ hypergeometric(total, good, draws): C(good, x) C(total - good, draws - x) / C(total, draws)
    x, total, good, draws = (np.asarray(v, dtype=float) for v in (x, total, good, draws))
    return _log_choose(good, x) + _log_choose(total - good, draws - x) - _log_choose(total, draws)


def fisher_two_sided(a, row1, col1, total) -> np.ndarray:
    """Two-sided Fisher exact p-values for many 2 × 2 tables at once.

    Each table has ``a`` events among ``row1`` rows of the slice, ``col1`` events in all and
    ``total`` rows. The p-value sums the hypergeometric probabilities of every table with
    the same margins that is no more likely than the observed one (relative tolerance
    1e-7, as scipy does).
    """
    a = np.asarray(a, dtype=np.int64)
    row1 = np.asarray(row1, dtype=np.int64)
    col1 = np.asarray(col1, dtype=np.int64)
    total = np.broadcast_to(np.asarray(total, dtype=np.int64), a.shape)
    out = np.full(a.shape, np.nan)
    if a.size == 0:
        return out
    lo = np.maximum(0, row1 + col1 - total)
    hi = np.minimum(row1, col1)
    width = hi - lo + 1
    # Batch tables of similar support width (powers of two) to bound memory.
    band = np.ceil(np.log2(width)).astype(np.int64)
    for b in np.unique(band):
        members = np.flatnonzero(band == b)
        wmax = int(width[members].max())
        step = max(1, 4_000_000 // wmax)
        for s in range(0, len(members), step):
            idx = members[s:s + step]
            x = lo[idx, None] + np.arange(wmax)[None, :]
            valid = x <= hi[idx, None]
            xs = np.where(valid, x, lo[idx, None])
            logp = _hypergeom_logpmf(xs, total[idx, None], col1[idx, None], row1[idx, None])
            obs = _hypergeom_logpmf(a[idx], total[idx], col1[idx], row1[idx])
            keep = valid & (logp <= obs[:, None] + np.log1p(1e-7))
            pm = np.where(keep, np.exp(logp - obs[:, None]), 0.0).sum(axis=1) * np.exp(obs)
            out[idx] = np.minimum(pm, 1.0)
    return out


def two_proportion(k1, n1, k2, n2):
    """Compare k1/n1 (slice) with k2/n2 (rest): return p-values and the method used per slice."""
    k1 = np.asarray(k1, dtype=float)
    n1 = np.asarray(n1, dtype=float)
    k2 = np.asarray(k2, dtype=float)
    n2 = np.asarray(n2, dtype=float)
    N = n1 + n2
    K = k1 + k2
    with np.errstate(invalid="ignore", divide="ignore"):
        pool = K / N
        se = np.sqrt(pool * (1 - pool) * (1 / n1 + 1 / n2))
        z = (k1 / n1 - k2 / n2) / se
        p = 2 * _normal_sf(np.abs(z))
        # the smallest expected cell count, min over n_i * X / N for X in (K, N - K): rounding is
        # monotone, so this is exactly the smallest of the four (without making all four)
        expected = np.minimum(n1, n2) * np.minimum(K, N - K) / N
    p = np.where(se == 0, 1.0, p)  # no events or no non-events anywhere: nothing differs
    defined = (n1 > 0) & (n2 > 0)
    small = defined & (expected < MIN_EXPECTED) & (se > 0)
    if small.any():
        p[small] = fisher_two_sided(k1[small], n1[small], K[small], N[small])
    p = np.where(defined, p, np.nan)
    method = np.empty(p.shape, dtype=object)  # one string object per method, not one per slice
    method.fill("z")
    method[small] = "fisher"
    method[~defined] = ""
    return p, method


_ERFC = np.frompyfunc(math.erfc, 1, 1)


#: From this many values on, the compiled loop (when the compiled kernels are loaded already).
COMPILED_ERFC_MIN = 20_000


def _normal_sf(z):
    """Upper tail of the standard normal, ½ erfc(z / √2), with the C library's erfc.

    A large table of slices whose tally was compiled uses the same erfc in a compiled loop (the
    same numbers, about a tenth of the time); otherwise numpy calls Python's erfc per value, so a
    small audit never loads the compiler."""
    z = np.asarray(z, dtype=float)
    if z.ndim == 1 and len(z) >= COMPILED_ERFC_MIN and "numba" in sys.modules:
        from ..core.kernels import half_erfc

        return half_erfc(z)
    return (0.5 * _ERFC(z / math.sqrt(2.0))).astype(float)


def welch_p(d, se, df):
    from scipy.special import stdtr  # Student t distribution function

    with np.errstate(invalid="ignore", divide="ignore"):
        t = d / se
        p = 2 * stdtr(df, -np.abs(t))
    return np.where(se == 0, np.where(d == 0, 1.0, 0.0), p)


def cohens_h(p1, p2):
    with np.errstate(invalid="ignore"):
        return 2 * np.arcsin(np.sqrt(p1)) - 2 * np.arcsin(np.sqrt(p2))


def cohens_d(d, v1, v2):
    with np.errstate(invalid="ignore", divide="ignore"):
        return d / np.sqrt((v1 + v2) / 2)
