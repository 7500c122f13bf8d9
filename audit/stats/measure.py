"""Step 4: every metric of a slice, derived from its confusion counts and loss sums.

Undefined-value policy: a ratio whose denominator is zero (precision with no predicted
positives, recall with no actual positives, ...) is NaN, never 0. Such a slice is not
tested on that metric and drops out of ranking with status ``undefined``.

Cell layout (binary): ``cell = y * 2 + yhat`` so ``tn, fp, fn, tp = counts[:, 0..3]``.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Metric:
    """One auditable metric.

    ``kind`` is ``"rate"`` (a proportion ``numerator / denominator`` of counts), ``"f1"``
    or ``"mean"`` (a mean per-row loss); ``support`` names the count a slice needs enough
    of for the metric to be tested; ``higher_is_worse`` fixes the bad direction.
    """

    name: str
    title: str
    kind: str
    higher_is_worse: bool
    numerator: str | None
    denominator: str
    formula: str
    needs_score: bool = False


def _m(*a, **k):
    return Metric(*a, **k)


#: The metrics a slice can be audited on (``--metric``). Error rate is the default: it is
#: defined on every row, so every slice with enough rows can be tested, and it counts both
#: kinds of mistake.
METRICS: dict[str, Metric] = {m.name: m for m in [
    _m("error_rate", "error rate", "rate", True, "errors", "n", "(fp + fn) / n"),
    _m("accuracy", "accuracy", "rate", False, "correct", "n", "(tp + tn) / n"),
    _m("recall", "recall (true-positive rate)", "rate", False, "tp", "actual_pos", "tp / (tp + fn)"),
    _m("precision", "precision (positive predictive value)", "rate", False, "tp", "pred_pos", "tp / (tp + fp)"),
    _m("specificity", "specificity (true-negative rate)", "rate", False, "tn", "actual_neg", "tn / (tn + fp)"),
    _m("fpr", "false-positive rate", "rate", True, "fp", "actual_neg", "fp / (fp + tn)"),
    _m("fnr", "false-negative rate", "rate", True, "fn", "actual_pos", "fn / (fn + tp)"),
    _m("npv", "negative predictive value", "rate", False, "tn", "pred_neg", "tn / (tn + fn)"),
    _m("f1", "F1 of the positive class", "f1", False, "tp", "tp_fp_fn", "2 tp / (2 tp + fp + fn)"),
    _m("log_loss", "mean log loss", "mean", True, None, "n",
       "-(1/n) Σ [y ln p + (1 - y) ln(1 - p)], p clipped to [1e-15, 1 - 1e-15]", True),
    _m("brier", "Brier score", "mean", True, None, "n", "(1/n) Σ (p - y)²", True),
]}

#: Every rate reported (with an interval) for every slice, in output order: name -> (numerator,
#: denominator), both named counts of ``count_frame``.
RATES: dict[str, tuple[str, str]] = {
    "accuracy": ("correct", "n"), "error_rate": ("errors", "n"), "precision": ("tp", "pred_pos"),
    "recall": ("tp", "actual_pos"), "specificity": ("tn", "actual_neg"), "fpr": ("fp", "actual_neg"),
    "fnr": ("fn", "actual_pos"), "npv": ("tn", "pred_neg"), "selection_rate": ("pred_pos", "n"),
    "base_rate": ("actual_pos", "n"),
}
RATE_COLUMNS = list(RATES)

EXTRA_FORMULAS = {
    "selection_rate": "(tp + fp) / n  (share predicted positive)",
    "base_rate": "(tp + fn) / n  (share actually positive)",
    "f1_neg": "2 tn / (2 tn + fn + fp)",
    "macro_f1": "(f1 + f1_neg) / 2",
    "jaccard": "tp / (tp + fp + fn)",
    "roc_auc": "P(score of a positive > score of a negative) + ½ P(tie), within the slice",
}


def ratio(num, den) -> np.ndarray:
    num = np.asarray(num, dtype=float)
    den = np.asarray(den, dtype=float)
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
