"""Step 7: flag and rank the tested slices.

A slice is flagged when its adjusted p-value is at most ``alpha`` and it is worse than
the rest of the rows. Tested slices are ranked worst first by the conservative end of the
interval of (slice − rest) in the bad direction: the lower end for a metric where higher
is worse, minus the upper end otherwise. A large but noisy gap in a tiny slice has a wide
interval whose conservative end is near zero, so it cannot outrank a solid gap. Ties are
broken by the raw p-value, then by the slice's position in the table (input column order, then
level order), so the ranking is deterministic.
"""
from __future__ import annotations

from typing import Any, Mapping

import numpy as np
import pandas as pd


def badness(diff_low: np.ndarray, diff_high: np.ndarray, *, higher_is_worse: bool) -> np.ndarray:
    """How surely worse than the rest the slice is, in the metric's units (larger = worse)."""
    return np.asarray(diff_low if higher_is_worse else -np.asarray(diff_high), dtype=float)


def order_by(key: np.ndarray, then: np.ndarray) -> np.ndarray:
    """The permutation ``np.lexsort((then, key))`` (ascending ``key``, ties by ``then``, then by
    position; NaN last), from numpy's fast unstable sort with only the tied rows sorted again:
    on 125,000 slices it takes a fifth of the time of lexsort."""
    key = np.asarray(key, dtype=float)
    o = np.argsort(key)
    ks = key[o]
    nan = np.isnan(ks)
    same = (ks[1:] == ks[:-1]) | (nan[1:] & nan[:-1])
    if same.any():
        grp = np.cumsum(np.concatenate([[True], ~same])) - 1
        tied = np.zeros(len(ks), dtype=bool)
        tied[1:] |= same
        tied[:-1] |= same
        sel = np.flatnonzero(tied)
        sub, g = o[sel], grp[sel]
        # Tied slices mostly share their counts, so their p-values too: then (group, position) is
        # the whole key, one integer sort. Groups whose p-values differ take the full lexsort.
        by = np.argsort(g.astype(np.int64) * len(key) + sub)
        sub, g = sub[by], g[by]
        pv = np.asarray(then, dtype=float)[sub]
        pn = np.isnan(pv)
        differ = (g[1:] == g[:-1]) & ~((pv[1:] == pv[:-1]) | (pn[1:] & pn[:-1]))
        if differ.any():
            sub = sub[np.lexsort((sub, pv, g))]
        o[sel] = sub
    return o


def flag_and_rank(cols: Mapping[str, np.ndarray], *, alpha: float, higher_is_worse: bool) -> dict[str, Any]:
    """The ``worse_than_rest``, ``flagged``, ``severity`` and ``rank`` columns of a slice table.

    ``cols`` maps the table's columns (``status``, ``diff``, ``diff_low``, ``diff_high``,
    ``p_value``, ``q_value``) to arrays of equal length.
    """
    tested = np.asarray(cols["status"]) == "tested"
    diff = np.asarray(cols["diff"], dtype=float)
    worse = (diff > 0) if higher_is_worse else (diff < 0)
    q = np.asarray(cols["q_value"], dtype=float)
    flagged = tested & worse & (q <= alpha)
    sev = badness(np.asarray(cols["diff_low"], dtype=float), np.asarray(cols["diff_high"], dtype=float),
                  higher_is_worse=higher_is_worse)
    sev = np.where(tested, sev, np.nan)
    idx = np.flatnonzero(tested)
    order = order_by(-sev[idx], np.asarray(cols["p_value"], dtype=float)[idx])  # ties: p-value, then table order
    rank = np.zeros(len(tested), dtype=np.int64)
    rank[idx[order]] = np.arange(1, len(idx) + 1)
    return {"worse_than_rest": tested & worse, "flagged": flagged, "severity": sev,
            "rank": pd.arrays.IntegerArray(rank, ~tested)}


def rank_among(members: np.ndarray, severity: np.ndarray, p_value: np.ndarray) -> pd.arrays.IntegerArray:
    """Ranks 1, 2, ... of the ``members`` (a boolean mask) by ``severity`` (largest first), ties by
    p-value then table position; empty for the others. Used for the flagged slices and the
    findings, ranked by the conservative end of their selection-adjusted interval."""
    members = np.asarray(members, dtype=bool)
    idx = np.flatnonzero(members)
    sev = np.asarray(severity, dtype=float)[idx]
    order = order_by(-np.where(np.isnan(sev), -np.inf, sev), np.asarray(p_value, dtype=float)[idx])
    rank = np.zeros(len(members), dtype=np.int64)
    rank[idx[order]] = np.arange(1, len(idx) + 1)
    return pd.arrays.IntegerArray(rank, ~members)
