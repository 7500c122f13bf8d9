"""Step 6: control errors across the family of slices tested.

Adjusted p-values come back in input order, are monotone in the raw p-values and clipped
to 1. NaN entries (untested slices) stay NaN and are not counted in the family size m.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from .methods import CORRECTION_METHODS


def _bh(p: np.ndarray, *, dependent: bool = False) -> np.ndarray:
    # Benjamini & Hochberg (1995), step-up; Benjamini & Yekutieli (2001) for dependence.
    m = len(p)
    # Tied p-values get the same adjusted value in any order, so the fast unstable sort will do.
    order = np.argsort(p)
    ranked = p[order] * m / np.arange(1, m + 1)
    if dependent:
        ranked = ranked * np.sum(1.0 / np.arange(1, m + 1))
    adj = np.minimum.accumulate(ranked[::-1])[::-1]
    out = np.empty(m)
    out[order] = np.minimum(adj, 1.0)
    return out


def _holm(p: np.ndarray) -> np.ndarray:
    # Holm (1979), step-down.
    m = len(p)
    order = np.argsort(p)  # ties: the same adjusted value in any order
    adj = np.maximum.accumulate(p[order] * (m - np.arange(m)))
    out = np.empty(m)
    out[order] = np.minimum(adj, 1.0)
    return out


@dataclass(frozen=True)
class Correction:
    name: str
    title: str
    controls: str
    func: Callable[[np.ndarray], np.ndarray]
    reference: str


_FUNCS: dict[str, Callable[[np.ndarray], np.ndarray]] = {
    "bh": _bh, "by": lambda p: _bh(p, dependent=True), "holm": _holm,
    "bonferroni": lambda p: np.minimum(p * len(p), 1.0), "none": lambda p: p.copy(),
}

#: Multiple-testing corrections (``--correction``): the registry ``methods.CORRECTION_METHODS``
#: with each method's implementation.
CORRECTIONS: dict[str, Correction] = {
    k: Correction(k, m.title, m.detail, _FUNCS[k], m.reference) for k, m in CORRECTION_METHODS.items()}


def adjust(p_values, *, method: str = "bh") -> tuple[np.ndarray, int]:
    """Adjusted p-values (q-values for BH/BY) and the family size m.

    Examples
    --------
    >>> q, m = adjust([0.01, 0.04, float("nan"), 0.03], method="bh")
    >>> m, [round(float(x), 3) for x in q[[0, 1, 3]]]
    (3, [0.03, 0.04, 0.04])
    """
    p = np.asarray(p_values, dtype=float)
    out = np.full(p.shape, np.nan)
    ok = ~np.isnan(p)
    m = int(ok.sum())
    if m:
        out[ok] = CORRECTIONS[method].func(p[ok])
    return out, m
