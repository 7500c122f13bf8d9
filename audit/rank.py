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

import numpy as np
import pandas as pd


def badness(diff_low: np.ndarray, diff_high: np.ndarray, *, higher_is_worse: bool) -> np.ndarray:
    """How surely worse than the rest the slice is, in the metric's units (larger = worse)."""
    return np.asarray(diff_low if higher_is_worse else -np.asarray(diff_high), dtype=float)


def flag_and_rank(df: pd.DataFrame, *, alpha: float, higher_is_worse: bool) -> pd.DataFrame:
    """Add ``worse``, ``flagged``, ``severity`` and ``rank`` columns to a slice table."""
    tested = (df["status"] == "tested").to_numpy()
    diff = df["diff"].to_numpy(dtype=float)
    worse = (diff > 0) if higher_is_worse else (diff < 0)
    q = df["q_value"].to_numpy(dtype=float)
    flagged = tested & worse & (q <= alpha)
    sev = badness(df["diff_low"].to_numpy(dtype=float), df["diff_high"].to_numpy(dtype=float),
                  higher_is_worse=higher_is_worse)
    sev = np.where(tested, sev, np.nan)
    idx = np.flatnonzero(tested)
    order = np.lexsort((idx, df["p_value"].to_numpy(dtype=float)[idx], -sev[idx]))
    rank = np.full(len(df), np.nan)
    rank[idx[order]] = np.arange(1, len(idx) + 1)
    out = df  # the engine owns this frame; columns are added in place
    out["worse_than_rest"] = np.where(tested, worse, False)
    out["flagged"] = flagged
    out["severity"] = sev
    missing = np.isnan(rank)
    out["rank"] = pd.arrays.IntegerArray(np.where(missing, 0, rank).astype(np.int64), missing)
    return out
