"""Step 8: the files an audit leaves behind — ``slices.csv`` and ``summary.json`` — written
so that nothing is ever half-written: every file is built in memory first, written under a
temporary name and renamed into place.
"""
from __future__ import annotations

import datetime as _dt
import io
import json
import os
import tempfile
from typing import Any

import numpy as np
import pandas as pd

from .compare import MIN_EXPECTED, TESTS
from .correct import CORRECTIONS
from .intervals import INTERVALS
from .measure import EXTRA_FORMULAS, METRICS
from .tally import EPS

_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")

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


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def neutralise(value: Any) -> Any:
    """Make a text cell safe to open in a spreadsheet (OWASP CSV injection guidance).

    Text beginning with ``= + - @``, tab or carriage return gets a leading apostrophe,
    unless the whole cell is a plain number (so ``-0.25`` stays a number).

    >>> neutralise("=HYPERLINK(1)"), neutralise("-0.25"), neutralise("north")
    ("'=HYPERLINK(1)", '-0.25', 'north')
    """
    if isinstance(value, str) and value.startswith(_FORMULA_START) and not _is_number(value):
        return "'" + value
    return value


def slices_csv(result) -> bytes:
    """``slices.csv`` as bytes: one row per slice."""
    return frame_csv(result.slices)


def frame_csv(frame: pd.DataFrame) -> bytes:
    """A table as CSV bytes the way every Fissure export writes it: booleans as true/false, NaN as
    empty, text cells neutralised against spreadsheet formulas, floats to 10 significant digits."""
    df = frame.copy()
    for col in df.columns:
        s = df[col]
        if pd.api.types.is_bool_dtype(s):
            df[col] = np.where(s.to_numpy(), "true", "false")
        elif pd.api.types.is_object_dtype(s) or pd.api.types.is_string_dtype(s):
            df[col] = [neutralise(x) for x in s.tolist()]
    buf = io.StringIO()
    df.to_csv(buf, index=False, na_rep="", lineterminator="\n", float_format="%.10g")
    return buf.getvalue().encode("utf-8")


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


def summary(result, *, created: str | None = None) -> dict[str, Any]:
    """The machine-readable summary (schema: ``audit/summary.schema.json``)."""
    cfg = result.config
    counts = result.status_counts()
    flagged = result.flagged()
    top = [
        {"rank": int(r["rank"]), "slice": r["slice"], "n": int(r["n"]), "metric_value": _f(r["metric_value"]),
         "metric_low": _f(r["metric_low"]), "metric_high": _f(r["metric_high"]), "rest_value": _f(r["rest_value"]),
         "diff": _f(r["diff"]), "diff_low": _f(r["diff_low"]), "diff_high": _f(r["diff_high"]),
         "p_value": _f(r["p_value"]), "q_value": _f(r["q_value"])}
        for _, r in flagged.iterrows()
    ]
    out: dict[str, Any] = {
        "tool": {"name": "fissure", "version": result.version},
        "created": created or _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat(),
        "model": {"name": cfg.model_name, "version": cfg.model_version, "intended_use": cfg.intended_use},
        "input": {"name": result.source.name, "sha256": result.source.sha256, "bytes": result.source.n_bytes,
                  "rows": result.n_rows},
        "columns": {
            "label": cfg.label, "prediction": cfg.pred, "probability": cfg.score,
            "attributes": [a.name for a in result.attributes],
            "skipped": [{"column": k, "reason": v} for k, v in result.skipped.items()],
        },
        "label_definition": {"classes": list(result.classes), "positive": result.classes[1],
                             "positive_inferred": result.positive_inferred,
                             "prediction_source": result.prediction_source,
                             "threshold": cfg.threshold if result.prediction_source == "threshold" else None},
        "attributes": [{"name": a.name, "kind": a.kind, "levels": list(a.levels),
                        "bin_edges": None if a.edges is None else list(a.edges), "missing_rows": a.n_missing}
                       for a in result.attributes],
        "configuration": cfg.as_dict(),
        "configuration_sha256": cfg.digest(),
        "method": method_notes(result),
        "overall": result.overall,
        "slices": {"total": int((result.slices["order"] > 0).sum()), "tested": counts.get("tested", 0),
                   "below_support": counts.get("below_support", 0), "no_rest": counts.get("no_rest", 0),
                   "undefined": counts.get("undefined", 0), "flagged": counts["flagged"],
                   "family_size": result.family_size},
        "flagged": top,
        "limitations": [{"title": t, "text": x} for t, x in limitations(result)],
        "cautions": CAUTION,
        "environment": result.environment,
    }
    if result.fairness is not None:
        out["fairness"] = result.fairness.to_summary()
    return out


def _f(x) -> float | None:
    x = float(x)
    return None if np.isnan(x) else x


def summary_json(result, **kw) -> bytes:
    return (json.dumps(summary(result, **kw), indent=2, ensure_ascii=False, allow_nan=False) + "\n").encode("utf-8")


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_files(out_dir: str, files: dict[str, bytes]) -> list[str]:
    """Write every file under a temporary name in ``out_dir``, then rename them into place."""
    os.makedirs(out_dir, exist_ok=True)
    temps: list[tuple[str, str]] = []
    try:
        for name, data in files.items():
            fd, tmp = tempfile.mkstemp(prefix=f".{name}.", suffix=".part", dir=out_dir)
            temps.append((tmp, os.path.join(out_dir, name)))
            with os.fdopen(fd, "wb") as fh:
                fh.write(data)
            os.chmod(tmp, 0o666 & ~_umask())
    except BaseException:
        for tmp, _ in temps:
            if os.path.exists(tmp):
                os.unlink(tmp)
        raise
    for tmp, final in temps:
        os.replace(tmp, final)
    return [final for _, final in temps]
