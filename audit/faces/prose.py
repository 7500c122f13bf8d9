"""The words every output shares: the caution on reading flags, the limits of an audit and
the method notes. ``summary.json``, the report, the terminal summary and the page read them
from here so they never drift apart."""
from __future__ import annotations

from typing import Any

from ..core.tally import EPS
from ..stats.compare import MIN_EXPECTED, TESTS
from ..stats.correct import CORRECTIONS
from ..stats.intervals import INTERVALS
from ..stats.measure import EXTRA_FORMULAS, METRICS

CAUTION = ("A flag is a statistical signal that a slice's metric differs from the rest of the rows by more "
           "than chance would explain. It is not a finding of discrimination, unfairness or unlawful treatment, "
           "and it is not a legal conclusion. Obligations differ by jurisdiction and sector; decisions on what "
           "a flag means and what to do about it belong to the organisation's compliance function and "
           "qualified legal counsel, under applicable law.")


def limitations(result) -> list[tuple[str, str]]:
    """What this audit cannot show, as (title, text) pairs; the report and summary.json share them."""
    cfg = result.config
    corr = CORRECTIONS[cfg.correction].title
    return [
        ("Small slices and power",
         f"A slice needs {cfg.min_support} rows to be tested; smaller slices are listed but not judged. A slice that "
         "is tested but not flagged may still be worse: with few rows a real gap can hide inside the interval. "
         "Absence of a flag is not evidence of equal performance."),
        ("Overlapping slices",
         "Single-attribute slices and pairs share rows, so one underlying problem can raise many flags (a pair and "
         "both of its parts). Read flags as pointers to a region of the data, not as separate findings."),
        ("What the correction covers",
         f"{corr} accounts for the {result.family_size} tests run here on one metric. It does not cover other "
         "metrics examined, other audits of the same model, slices of three or more attributes, or choices made "
         "after seeing the results."),
        ("Label quality",
         "Every metric assumes the recorded outcome is correct. If outcomes are missing, delayed or recorded "
         "differently for some groups, the audit measures that difference as well."),
        ("Proxies",
         "Attributes not in the table can still act through the ones that are (for instance location standing in "
         "for an unrecorded characteristic). An attribute's absence from the flags does not show it had no "
         "influence."),
        ("Association, not causation",
         "A flag shows that the model performs differently on a slice; it does not show why, and it does not show "
         "that the attribute causes the difference."),
        ("Threshold and sample",
         "Results hold for this table and this decision threshold; another period, population or threshold can "
         "give other results."),
    ]


def method_notes(result) -> dict[str, Any]:
    cfg = result.config
    m = METRICS[cfg.metric]
    if m.kind == "mean":
        test = TESTS["welch"].title + " from n, Σx, Σx²"
    elif m.kind == "f1":
        test = (f"{TESTS['z'].title} on the Jaccard index tp/(tp+fp+fn) (F1 = 2J/(1+J) is increasing in J); "
                f"{TESTS['fisher'].title} when an expected count is below {MIN_EXPECTED:g}")
    else:
        test = f"{TESTS['z'].title}; {TESTS['fisher'].title} when an expected count is below {MIN_EXPECTED:g}"
    return {
        "metric": cfg.metric,
        "metric_title": m.title,
        "metric_formula": m.formula,
        "higher_is_worse": m.higher_is_worse,
        "formulas": {**{k: v.formula for k, v in METRICS.items()}, **EXTRA_FORMULAS},
        "interval": {"method": cfg.interval, "title": INTERVALS[cfg.interval].title, "level": cfg.level,
                     "reference": INTERVALS[cfg.interval].reference,
                     "f1": "interval for the Jaccard index mapped through F1 = 2J/(1+J)",
                     "means": "Student t interval from n, Σx, Σx²",
                     "differences": "MOVER (Zou & Donner 2008); Newcombe's hybrid score interval for rates; "
                                    "Welch interval for mean losses"},
        "test": test,
        "effect_size": "Cohen's d (average of the two variances)" if m.kind == "mean"
                       else "Cohen's h = 2 asin √p_slice − 2 asin √p_rest",
        "correction": {"method": cfg.correction, "title": CORRECTIONS[cfg.correction].title,
                       "controls": CORRECTIONS[cfg.correction].controls,
                       "reference": CORRECTIONS[cfg.correction].reference,
                       "family": "tested slices of orders 1 and 2", "family_size": result.family_size},
        "support": {"min_rows": cfg.min_support, "min_metric_rows": cfg.min_metric_support,
                    "metric_denominator": m.denominator},
        "ranking": "worst first by the conservative end of the interval of (slice − rest) in the bad direction",
        "flag_rule": f"adjusted p-value ≤ {cfg.alpha:g} and worse than the rest",
        "undefined": "a ratio with a zero denominator is NaN (empty in CSV); such slices are not tested or ranked",
        "log_loss_clipping": f"probabilities clipped to [{EPS:g}, 1 − {EPS:g}]; natural logarithm",
        "roc_auc": (f"computed for slices of order ≤ {cfg.auc_max_order}" if cfg.auc_max_order >= 0
                    else "not computed"),
    }
