"""The registries of method families, as plain data: metrics, interval methods, slice-versus-rest
tests and multiple-testing corrections. The command line's choices and help, the page's select
boxes, the report's method section and the dispatch tables of ``measure``, ``intervals``,
``compare`` and ``correct`` all read these tables (the numeric modules key their
implementations by the same names, checked by a test).

This module imports nothing beyond the standard library, so a command line can list the
choices without loading numpy.
"""
from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Metric:
    """One auditable metric.

    ``kind`` is ``"rate"`` (a proportion ``numerator / denominator`` of counts), ``"f1"``
    or ``"mean"`` (a mean per-row loss); ``denominator`` names the count a slice needs enough
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

#: Metrics of a multi-class audit besides error rate, log loss and Brier score.
MULTICLASS_ONLY: dict[str, Metric] = {
    "macro_f1": Metric("macro_f1", "macro-averaged F1", "macro_f1", False, None, "n",
                       "mean over the classes present in the slice of 2 tp_c / (2 tp_c + fp_c + fn_c)"),
}
#: Per-class rates of a multi-class audit, written ``NAME:CLASS`` (``recall:refer``).
CLASS_METRICS = {"recall": ("tp", "actual", "recall (true-positive rate) of class"),
                 "precision": ("tp", "pred", "precision of class"),
                 "f1": ("tp", "tp_fp_fn", "F1 of class")}


def metric_for(name: str) -> Metric:
    """The registry entry of an audited metric, including ``NAME:CLASS`` per-class rates."""
    if name in METRICS:
        return METRICS[name]
    if name in MULTICLASS_ONLY:
        return MULTICLASS_ONLY[name]
    base, _, cls = name.partition(":")
    num, den, title = CLASS_METRICS[base]
    formula = {"recall": "tp_c / (rows of true class c)", "precision": "tp_c / (rows predicted c)",
               "f1": "2 tp_c / (2 tp_c + fp_c + fn_c)"}[base]
    return Metric(name, f"{title} '{cls}'", "f1" if base == "f1" else "rate", False, f"{num}:{cls}",
                  f"{den}:{cls}", formula)


#: Every rate reported (with an interval) for every slice, in output order: name -> (numerator,
#: denominator), both named counts of ``measure.count_frame``.
RATES: dict[str, tuple[str, str]] = {
    "accuracy": ("correct", "n"), "error_rate": ("errors", "n"), "precision": ("tp", "pred_pos"),
    "recall": ("tp", "actual_pos"), "specificity": ("tn", "actual_neg"), "fpr": ("fp", "actual_neg"),
    "fnr": ("fn", "actual_pos"), "npv": ("tn", "pred_neg"), "selection_rate": ("pred_pos", "n"),
    "base_rate": ("actual_pos", "n"),
}

EXTRA_FORMULAS = {
    "selection_rate": "(tp + fp) / n  (share predicted positive)",
    "base_rate": "(tp + fn) / n  (share actually positive)",
    "f1_neg": "2 tn / (2 tn + fn + fp)",
    "macro_f1": "(f1 + f1_neg) / 2",
    "jaccard": "tp / (tp + fp + fn)",
    "roc_auc": "P(score of a positive > score of a negative) + ½ P(tie), within the slice",
}

class _Words(dict):
    def __missing__(self, key: str) -> str:
        base, _, cls = str(key).partition(":")
        return {"actual": f"rows of true class '{cls}'", "pred": f"rows predicted '{cls}'",
                "tp_fp_fn": f"rows of class '{cls}' in truth or prediction"}.get(base, str(key))


#: Plain words for the named counts a metric's support is measured in.
COUNT_WORDS = _Words({"n": "rows", "actual_pos": "actual positives", "actual_neg": "actual negatives",
               "pred_pos": "predicted positives", "pred_neg": "predicted negatives",
               "tp_fp_fn": "rows positive in truth or prediction", "errors": "errors", "correct": "correct rows",
               "tp": "true positives", "fp": "false positives", "fn": "false negatives", "tn": "true negatives"})


@dataclass(frozen=True)
class Method:
    """A named method of one family (interval, test, correction) with its title and source."""

    name: str
    title: str
    reference: str
    detail: str = ""


#: Interval methods for proportions (``--interval``).
INTERVAL_METHODS: dict[str, Method] = {
    "wilson": Method("wilson", "Wilson score", "Wilson (1927); Newcombe (1998)"),
    "clopper-pearson": Method("clopper-pearson", "Clopper-Pearson exact", "Clopper & Pearson (1934)"),
}

#: Slice-versus-rest tests; which one runs follows from the metric's kind (see ``compare``).
TEST_METHODS: dict[str, Method] = {
    "z": Method("z", "two-proportion z test (pooled)",
                "equivalent to Pearson's chi-square without continuity correction", "rate f1"),
    "fisher": Method("fisher", "Fisher's exact test, two-sided", "Fisher (1935); used when an expected count is below 5",
                     "rate f1"),
    "welch": Method("welch", "Welch's t test", "Welch (1947)", "mean"),
}

#: Multiple-testing corrections (``--correction``); ``detail`` says what each controls.
CORRECTION_METHODS: dict[str, Method] = {
    "bh": Method("bh", "Benjamini-Hochberg", "Benjamini & Hochberg (1995), JRSS B 57:289-300",
                 "false discovery rate (independent or positively dependent tests)"),
    "by": Method("by", "Benjamini-Yekutieli", "Benjamini & Yekutieli (2001), Ann. Statist. 29:1165-1188",
                 "false discovery rate under any dependence"),
    "holm": Method("holm", "Holm", "Holm (1979), Scand. J. Statist. 6:65-70", "family-wise error rate"),
    "bonferroni": Method("bonferroni", "Bonferroni", "Bonferroni (1936); Dunn (1961)", "family-wise error rate"),
    "none": Method("none", "no correction", "-", "per-test error rate only"),
}
