"""Step 4: every metric of a slice, derived from its confusion counts and loss sums.

Undefined-value policy: a ratio whose denominator is zero (precision with no predicted
positives, recall with no actual positives, ...) is NaN, never 0. Such a slice is not
tested on that metric and drops out of ranking with status ``undefined``.

Cell layout (binary): ``cell = y * 2 + yhat`` so ``tn, fp, fn, tp = counts[:, 0..3]``.
"""
from __future__ import annotations

import numpy as np


from .methods import EXTRA_FORMULAS, METRICS, RATES, Metric  # noqa: F401  (re-exported)

RATE_COLUMNS = list(RATES)


def same_text(n: int, text: str) -> np.ndarray:
    """An object array of ``n`` references to one string (``np.full(n, text, dtype=object)`` makes
    ``n`` separate copies of it, forty times slower for a table of 125,000 slices)."""
    out = np.empty(n, dtype=object)
    out.fill(text)
    return out


def ratio(num, den) -> np.ndarray:
    # Integer counts are divided as they are (numpy converts them in its loop, no float copies).
    num = np.asarray(num)
    den = np.asarray(den)
    out = np.full(np.broadcast(num, den).shape, np.nan)
    np.divide(num, den, out=out, where=den > 0)
    return out


def count_frame(counts: np.ndarray) -> dict[str, np.ndarray]:
    """Named counts (and derived count columns) from a (slices × 4) binary cell array."""
    tn, fp, fn, tp = (counts[:, i].astype(np.int64) for i in range(4))
    n = tn + fp + fn + tp
    return {
        "n": n, "tp": tp, "fp": fp, "fn": fn, "tn": tn,
        "actual_pos": tp + fn, "actual_neg": tn + fp, "pred_pos": tp + fp, "pred_neg": tn + fn,
        "errors": fp + fn, "correct": tp + tn, "tp_fp_fn": tp + fp + fn,
    }


def metric_value(c: dict[str, np.ndarray], sums: np.ndarray | None, name: str) -> np.ndarray:
    """One metric of ``metric_values`` (the same numbers), computed alone."""
    if name in RATES:
        num, den = RATES[name]
        return ratio(c[num], c[den])
    if name == "f1":
        return ratio(2 * c["tp"], 2 * c["tp"] + c["fp"] + c["fn"])
    if name in ("log_loss", "brier") and sums is not None:
        return ratio(sums[:, 0 if name == "log_loss" else 2], c["n"])
    return metric_values(c, sums)[name]


def metric_values(c: dict[str, np.ndarray], sums: np.ndarray | None) -> dict[str, np.ndarray]:
    """Every metric for every slice; NaN where undefined (see module docstring)."""
    v = {name: ratio(c[num], c[den]) for name, (num, den) in RATES.items()}
    v.update({
        "f1": ratio(2 * c["tp"], 2 * c["tp"] + c["fp"] + c["fn"]),
        "f1_neg": ratio(2 * c["tn"], 2 * c["tn"] + c["fp"] + c["fn"]),
        "jaccard": ratio(c["tp"], c["tp_fp_fn"]),
    })
    v["macro_f1"] = (v["f1"] + v["f1_neg"]) / 2.0  # NaN if either class's F1 is undefined
    if sums is not None:
        v["log_loss"] = ratio(sums[:, 0], c["n"])
        v["brier"] = ratio(sums[:, 2], c["n"])
    else:
        v["log_loss"] = np.full(len(c["n"]), np.nan)
        v["brier"] = np.full(len(c["n"]), np.nan)
    return v
