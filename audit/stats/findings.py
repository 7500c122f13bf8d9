"""Step 8: findings and their echoes; intervals of the flagged slices adjusted for the selection.

One weakness raises many flags: a bad single value flags most pairs that contain it, and a bad
pair flags the single values it lies in. This module gives every flagged slice one of two roles.

Echoes (:func:`explain`)
    For every two flagged slices where one lies inside the other (``inner`` has every condition
    of ``outer`` and more), two tests of the audited metric, with the same test as the flags
    (two-proportion z or Fisher's exact for rates and F1, Welch's t from n, Σx, Σx² for mean
    losses), on counts taken from the tally by subtraction:

    * *inner against the rest of outer*: ``inner`` versus ``outer − inner``;
    * *outer without inner against the rest of the table*: ``outer − inner`` versus
      ``whole − outer``.

    Each kind of test, over every such couple, is one family, corrected by Holm's step-down
    method (``EXPLANATION_CORRECTION``; whatever the flags' correction). "Significantly worse"
    means adjusted p ≤ alpha and worse, as for the flags. Then:

    * ``inner`` is explained by ``outer`` when it is not significantly worse than the rest of
      ``outer`` (a pair that only carries its parent's weakness);
    * ``outer`` is explained by ``inner`` when ``inner`` is significantly worse than the rest
      of ``outer`` and ``outer − inner`` is not significantly worse than the rest of the table
      (a single value flagged only because a bad pair lies inside it).

    A comparison that cannot be tested (a part with fewer rows than the support rules ask)
    shows no significant difference. Of several explaining slices the one with the largest
    severity is named (``explained_by``); following those names ends at a flagged slice
    that nothing explains: a **finding** (``echo_of`` names it; a loop, possible only in
    principle, is broken at its best-ranked member, which becomes a finding).

Adjusted intervals (:func:`selection_level`)
    For the R flagged slices of m tested, the interval of the difference (slice − rest) at
    level 1 − R·alpha/m: false coverage-statement rate intervals (Benjamini & Yekutieli 2005),
    whose expected share of non-covering intervals among the selected is at most alpha.
    Findings are ranked by the conservative end of that interval.

References
----------
1. Benjamini, Y. & Yekutieli, D. (2005). False discovery rate-adjusted multiple confidence
   intervals for selected parameters. JASA 100:71-81.
2. Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate. JRSS B 57:289-300.
"""
from __future__ import annotations

from itertools import combinations
from typing import Callable, Sequence

import numpy as np

from .correct import adjust

#: Correction of each family of explanation tests: Holm (1979), step-down, controlling the chance
#: of any false claim that a slice is worse than the slice it lies in or around. Most tests of
#: a family reject overwhelmingly (a bad value without one of its pairs is still bad), which
#: would make a false-discovery-rate threshold lenient for the few close calls that decide
#: whether a slice is a finding of its own.
EXPLANATION_CORRECTION = "holm"

#: contrast(counts_a, counts_b, sums_a, sums_b) -> {"diff", "p_value", "_support", "_rsupport"}
Contrast = Callable[..., dict]


def slice_keys(families: Sequence[tuple[int, ...]], fam_of_row: np.ndarray, pos_of_row: np.ndarray,
               cards: Sequence[int], rows: np.ndarray) -> dict[int, frozenset]:
    """Each listed row's conditions as a set of (attribute index, value code), for ``rows``."""
    out = {}
    for r in rows:
        fam = families[int(fam_of_row[r])]
        pos = int(pos_of_row[r])
        codes = []
        for a in reversed(fam):  # mixed radix, first attribute most significant
            codes.append(pos % cards[a])
            pos //= cards[a]
        out[int(r)] = frozenset(zip(fam, reversed(codes)))
    return out


def selection_level(n_selected: int, n_tested: int, alpha: float) -> float:
    """Benjamini & Yekutieli (2005): marginal level 1 − R·alpha/m for the R selected of m."""
    if n_selected <= 0 or n_tested <= 0:
        return float("nan")
    return 1.0 - n_selected * alpha / n_tested


def explain(keys: dict[int, frozenset], counts: np.ndarray, sums: np.ndarray | None, *, whole: np.ndarray,
            whole_sums: np.ndarray | None, severity: np.ndarray,
            rank: np.ndarray, contrast: Contrast, alpha: float, correction: str, higher_is_worse: bool,
            min_rows: int, min_metric_rows: int) -> dict:
    """Roles of the flagged slices ``keys`` (row -> conditions); see the module docstring.

    Returns ``finding`` (rows that are findings), ``explained_by`` and ``echo_of`` (row ->
    row) and ``tests`` (how many explanation tests were run and corrected together).
    """
    flagged = sorted(keys)
    by_key = {keys[r]: r for r in flagged}
    inner, outer = [], []
    for r in flagged:
        k = keys[r]
        for size in range(1, len(k)):
            for sub in combinations(sorted(k), size):
                o = by_key.get(frozenset(sub))
                if o is not None:
                    inner.append(r)
                    outer.append(o)
    info = {"couples": len(inner), "tests": 0}
    expl: dict[int, list[int]] = {r: [] for r in flagged}
    if inner:
        i, o = np.asarray(inner), np.asarray(outer)
        part = counts[o] - counts[i]
        rest = whole[None, :] - counts[o]
        s_i = s_part = s_rest = None
        if sums is not None:
            s_i, s_part, s_rest = sums[i], sums[o] - sums[i], whole_sums[None, :] - sums[o]
        up = contrast(counts[i], part, s_i, s_part)
        down = contrast(part, rest, s_part, s_rest)
        p_up, ok_up = _testable(up, min_rows, min_metric_rows, counts[i], part)
        p_dn, ok_dn = _testable(down, min_rows, min_metric_rows, part, rest)
        q_up, m_up = adjust(p_up, method=EXPLANATION_CORRECTION)
        q_dn, m_dn = adjust(p_dn, method=EXPLANATION_CORRECTION)
        info["tests"] = m_up + m_dn
        info["tests_inner"], info["tests_outer"] = m_up, m_dn
        worse_up = up["diff"] > 0 if higher_is_worse else up["diff"] < 0
        worse_dn = down["diff"] > 0 if higher_is_worse else down["diff"] < 0
        sig_up = ok_up & worse_up & (q_up <= alpha)
        sig_dn = ok_dn & worse_dn & (q_dn <= alpha)
        for x in range(len(i)):
            if not sig_up[x]:
                expl[int(i[x])].append(int(o[x]))       # the inner slice carries the outer's weakness
            elif not sig_dn[x]:
                expl[int(o[x])].append(int(i[x]))       # the outer slice is bad only through the inner one
    chosen: dict[int, int] = {}
    for r, cands in expl.items():
        if cands:
            chosen[r] = min(cands, key=lambda c: (-_num(severity[c]), _num(rank[c], np.inf), c))
    _break_loops(chosen, rank)
    echo_of = {}
    for r in chosen:
        x = r
        while x in chosen:
            x = chosen[x]
        echo_of[r] = x
    findings = [r for r in flagged if r not in chosen]
    return {"finding": findings, "explained_by": chosen, "echo_of": echo_of, "info": info}


def _testable(res: dict, min_rows: int, min_metric_rows: int, ca: np.ndarray, cb: np.ndarray):
    """Raw p-values (NaN where the comparison cannot be tested) and the testable mask."""
    p = np.asarray(res["p_value"], dtype=float)
    ok = ((ca.sum(axis=1) >= min_rows) & (cb.sum(axis=1) >= min_rows)
          & (np.asarray(res["_support"]) >= min_metric_rows) & (np.asarray(res["_rsupport"]) >= min_metric_rows)
          & np.isfinite(p) & np.isfinite(np.asarray(res["diff"], dtype=float)))
    return np.where(ok, p, np.nan), ok


def _break_loops(chosen: dict[int, int], rank: np.ndarray) -> None:
    """Remove the explanation of the best-ranked member of any loop of explanations."""
    done: set[int] = set()
    for start in list(chosen):
        path, seen = [], set()
        x = start
        while x in chosen and x not in seen and x not in done:
            seen.add(x)
            path.append(x)
            x = chosen[x]
        if x in seen:  # a loop: from x back to x
            loop = path[path.index(x):]
            best = min(loop, key=lambda r: (_num(rank[r], np.inf), r))
            del chosen[best]
        done.update(path)


def _num(x, default: float = -np.inf) -> float:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return default
    return default if v != v else v
