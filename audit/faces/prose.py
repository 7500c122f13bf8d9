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
from ..stats.methods import metric_for

CAUTION = ("A flag is a statistical signal that a slice's metric differs from the rest of the rows by more "
           "than chance would explain. It is not a finding of discrimination, unfairness or unlawful treatment, "
           "and it is not a legal conclusion. Obligations differ by jurisdiction and sector; decisions on what "
           "a flag means and what to do about it belong to the organisation's compliance function and "
           "qualified legal counsel, under applicable law.")


def limitations(result) -> list[tuple[str, str]]:
    """What this audit cannot show, as (title, text) pairs; the report and summary.json share them."""
    cfg = result.config
    corr = CORRECTIONS[cfg.correction].title
    out = [
        ("Small slices and power",
         f"A slice needs {cfg.min_support} rows to be tested; smaller slices are listed but not judged. A slice that "
         "is tested but not flagged may still be worse: with few rows a real gap can hide inside the interval. "
         "Absence of a flag is not evidence of equal performance."),
        ("Overlapping slices",
         "Single-attribute slices and pairs share rows, so one underlying problem can raise many flags (a pair and "
         "both of its parts). The audit folds such echoes under the finding that explains them, by tests at the "
         "chosen level: an echo is not shown to be free of a weakness of its own, only not shown to have one. "
         "Read flags as pointers to a region of the data."),
        ("What the correction covers",
         f"{corr} accounts for the {result.family_size} tests run here on one metric. It does not cover other "
         "metrics examined, other audits of the same model, "
         + ("slices of four or more attributes" if cfg.max_order >= 3 else "slices of three or more attributes")
         + ", or choices made after seeing the results."),
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
    if is_multiclass(result):
        out[-1] = ("Prediction rule and sample",
                   f"Results hold for this table and this way of making the prediction ({prediction_words(result)}); "
                   "another period, population or rule can give other results.")
    return out


def is_multiclass(result) -> bool:
    """Whether the audit's label has three or more classes."""
    return len(result.classes) >= 3


#: Formulas of a multi-class audit: per class c one-vs-rest, then the averages (scikit-learn's
#: ``precision_recall_fscore_support`` definitions: macro over the classes present in the slice).
MULTICLASS_FORMULAS = {
    "support_c": "rows whose true class is c",
    "predicted_c": "rows predicted c",
    "precision_c": "tp_c / (rows predicted c)",
    "recall_c": "tp_c / (rows of true class c)",
    "f1_c": "2 tp_c / (2 tp_c + fp_c + fn_c)",
    "jaccard_c": "tp_c / (tp_c + fp_c + fn_c)",
    "accuracy": "(sum of the diagonal of the K × K confusion matrix) / n",
    "error_rate": "1 − accuracy = (rows off the diagonal) / n",
    "macro_f1": "mean of f1_c over the classes present in the slice (in its truth or predictions)",
    "macro_precision": "mean of precision_c over the classes present (0 for a present class never predicted)",
    "macro_recall": "mean of recall_c over the classes present (0 for a present class with no true rows)",
    "micro_f1": "F1 of the pooled one-vs-rest counts; equals accuracy for single-label data",
    "weighted_f1": "mean of f1_c weighted by support_c",
    "log_loss": "-(1/n) Σ ln p_i(true class of row i), p clipped to [1e-15, 1 - 1e-15]",
    "brier": "(1/n) Σ_i Σ_c (p_ic − y_ic)², y_ic = 1 when row i's true class is c",
}


def prediction_words(result) -> str:
    """How the prediction was made, in one sentence fragment (the report and summary.json say it)."""
    cfg = result.config
    src = result.prediction_source
    if src == "column":
        return f"the predicted-label column '{cfg.pred}'"
    if src == "threshold":
        return f"probability column '{cfg.score}' ≥ threshold {cfg.threshold:g}"
    cols = ", ".join(f"{c}: '{cfg.score[c]}'" for c in result.classes) if isinstance(cfg.score, dict) else str(cfg.score)
    return (f"the most probable class of each row from its probability columns ({cols}); a tie goes to the class "
            f"that sorts first ({', '.join(str(c) for c in result.classes)})")


def method_notes(result) -> dict[str, Any]:
    cfg = result.config
    m = metric_for(cfg.metric)
    if m.kind == "mean":
        test = TESTS["welch"].title + " from n, Σx, Σx²"
    elif m.kind == "macro_f1":
        test = ("z test of slice − rest with standard errors from the multinomial delta method applied to each "
                "side's K × K cell shares (validated by simulation for interval coverage and test size)")
    elif m.kind == "f1":
        test = (f"{TESTS['z'].title} on the Jaccard index tp/(tp+fp+fn) (F1 = 2J/(1+J) is increasing in J); "
                f"{TESTS['fisher'].title} when an expected count is below {MIN_EXPECTED:g}")
    else:
        test = f"{TESTS['z'].title}; {TESTS['fisher'].title} when an expected count is below {MIN_EXPECTED:g}"
    notes = {
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
                       "family": "tested slices of orders 1 to " + str(cfg.max_order) if cfg.max_order > 1
                                 else "tested slices of order 1", "family_size": result.family_size},
        "support": {"min_rows": cfg.min_support, "min_metric_rows": cfg.min_metric_support,
                    "metric_denominator": m.denominator},
        "ranking": "worst first by the conservative end of the interval of (slice − rest) in the bad direction",
        "findings": _findings_note(result),
        "flag_rule": f"adjusted p-value ≤ {cfg.alpha:g} and worse than the rest",
        "undefined": "a ratio with a zero denominator is NaN (empty in CSV); such slices are not tested or ranked",
        "log_loss_clipping": f"probabilities clipped to [{EPS:g}, 1 − {EPS:g}]; natural logarithm",
        **reading_notes(result),
    }
    if is_multiclass(result):
        notes.update(_multiclass_notes(result, m))
    return notes


def reading_notes(result) -> dict[str, Any]:
    """How the table was read and how exact ROC AUC is, from the engine's own method entries
    (``result.method``): ``reading`` ("in memory" or "in chunks"), ``roc_auc`` in words and
    ``roc_auc_error_bound`` (the largest bound on a slice's ROC AUC error after a read in chunks;
    None when every AUC is exact or none was computed)."""
    cfg = result.config
    engine = result.method or {}
    reading = engine.get("reading", "in memory")
    bound = engine.get("roc_auc_error_bound")
    if is_multiclass(result):
        auc = "not computed for three or more classes"
    elif cfg.auc_max_order < 0 or engine.get("roc_auc") == "not computed":
        auc = "not computed"
    else:
        auc = f"computed for slices of order ≤ {cfg.auc_max_order}; " + engine.get("roc_auc", "exact")
        if bound is not None:
            auc += " (an approximation: each slice's ROC AUC is within that bound of the exact value)"
    return {"reading": reading, "roc_auc": auc, "roc_auc_error_bound": None if bound is None else float(bound)}


def _multiclass_notes(result, m) -> dict[str, Any]:
    """What differs in the method notes of a label with three or more classes."""
    cfg = result.config
    notes: dict[str, Any] = {
        "classes": [str(c) for c in result.classes],
        "prediction": prediction_words(result),
        "formulas": dict(MULTICLASS_FORMULAS),
        "per_class": "each class c one-vs-rest: tp_c rows of true class c predicted c, fp_c rows predicted c of "
                     "another true class, fn_c rows of true class c predicted another class",
        "undefined": "a per-class ratio with a zero denominator is NaN (empty in CSV); the averages follow "
                     "scikit-learn (classes present in the slice, zero_division=0); a slice whose audited metric "
                     "is undefined is not tested or ranked",
    }
    notes["interval"] = {
        "method": cfg.interval, "title": INTERVALS[cfg.interval].title, "level": cfg.level,
        "reference": INTERVALS[cfg.interval].reference,
        "rates": "accuracy, error rate and per-class precision and recall are proportions: "
                 f"{INTERVALS[cfg.interval].title} interval",
        "f1": "per-class F1: interval for its Jaccard index mapped through F1 = 2J/(1+J)",
        "macro_f1": "normal interval, macro-F1 ± z·SE, SE from the multinomial delta method, clipped to [0, 1]",
        "means": "Student t interval from n, Σx, Σx²",
        "differences": "Newcombe's hybrid score interval for rates; MOVER (Zou & Donner 2008) for per-class F1; "
                       "normal interval with the two delta-method variances added for macro-F1; Welch interval "
                       "for mean losses",
    }
    if m.kind == "macro_f1":
        notes["effect_size"] = "Cohen's h = 2 asin √(macro-F1 slice) − 2 asin √(macro-F1 rest)"
    return notes


def selection_level(result) -> float | None:
    """The level of the selection-adjusted intervals (1 − R·alpha/m), or None when no slice was selected."""
    lvl = ((result.method or {}).get("explanations") or {}).get("selection_level")
    try:
        lvl = float(lvl)
    except (TypeError, ValueError):
        return None
    return None if lvl != lvl else lvl


def level_pct(lvl: float) -> str:
    """A selection-adjusted level as every face prints it (two decimals: 1 − 1·0.05/476 is 99.99%, not 100.0%).

    >>> level_pct(0.98953), level_pct(0.9998949)
    ('98.95%', '99.99%')
    """
    return f"{lvl:.2%}"


def fmt_p(x) -> str:
    """A p-value or adjusted p-value to two significant digits (8e-38 stays 8e-38, never 0.0).

    >>> fmt_p(8e-38), fmt_p(0.0123), fmt_p(0.5), fmt_p(0.0), fmt_p(float("nan"))
    ('8e-38', '0.012', '0.5', '< 1e-300', '—')
    """
    try:
        xf = float(x)
    except (TypeError, ValueError):
        return "—"
    if xf != xf:
        return "—"
    if xf == 0.0:
        return "< 1e-300"  # below the smallest double the tests can return
    return f"{xf:.2g}"


#: The four group-fairness criteria tested against the reference group: key, title, rate column.
FAIRNESS_CRITERIA = (
    ("selection", "selection rate", "selection_rate"),
    ("tpr", "true-positive rate", "tpr"),
    ("fpr", "false-positive rate", "fpr"),
    ("ppv", "positive predictive value", "ppv"),
)


def disadvantage_when_higher(criterion: str, favorable_is_positive: bool | None) -> bool:
    """Whether a group is at a disadvantage when its rate is *higher* than the reference's.

    The rule, stated from the person's side: a group is at a disadvantage when its members are
    given the favourable prediction less often than the reference group's members with the same
    true outcome (selection rate: all rows; TPR: actual positives; FPR: actual negatives), or when
    its favourable predictions are held to a higher bar / its unfavourable predictions are less
    often borne out (PPV). So with the positive class favourable: lower selection rate, lower TPR,
    lower FPR, higher PPV; with the negative class favourable (e.g. a delinquency model, where
    "not delinquent" is favourable): lower selection rate, higher TPR, higher FPR, lower PPV.
    With three or more classes (``favorable_is_positive`` None) the rates are one versus the rest
    for the favourable set, which is their "positive" side: the first case.

    >>> [disadvantage_when_higher(c, True) for c in ("selection", "tpr", "fpr", "ppv")]
    [False, False, False, True]
    >>> [disadvantage_when_higher(c, False) for c in ("selection", "tpr", "fpr", "ppv")]
    [False, True, True, False]
    >>> [disadvantage_when_higher(c, None) for c in ("selection", "tpr", "fpr", "ppv")]
    [False, False, False, True]
    """
    fav_is_pos = favorable_is_positive is None or bool(favorable_is_positive)
    if criterion == "selection":
        return False
    if criterion in ("tpr", "fpr"):
        return not fav_is_pos
    if criterion == "ppv":
        return fav_is_pos
    raise KeyError(criterion)


def _meaning(criterion: str, higher: bool, fav: str, unfav: str, pos: str, neg: str, fav_is_pos: bool) -> str:
    if criterion == "selection":
        return f"predicted '{fav}' (favourable) {'more' if higher else 'less'} often"
    if criterion in ("tpr", "fpr"):
        actual = pos if criterion == "tpr" else neg
        gets_fav_more = higher == fav_is_pos
        return f"among actual '{actual}', given the favourable '{fav}' {'more' if gets_fav_more else 'less'} often"
    # ppv: share of predicted positives that are actual positives
    if fav_is_pos:
        return (f"its '{pos}' (favourable) predictions are {'more' if higher else 'less'} often borne out"
                + (" (a higher bar)" if higher else " (a lower bar)"))
    return f"its '{pos}' (unfavourable) predictions are {'more' if higher else 'less'} often borne out"


def fairness_findings(result) -> "pd.DataFrame":
    """Every fairness flag as one row per criterion, with its direction in words.

    A group's ``fairness_flag`` is raised by any criterion whose adjusted p-value is at most
    alpha, or by the four-fifths check; this lists each such criterion. Columns: ``attribute``,
    ``group``, ``reference``, ``criterion`` (``selection``, ``tpr``, ``fpr``, ``ppv``,
    ``four_fifths``), ``title``, ``value``, ``reference_value``, ``q_value`` (NaN for the
    four-fifths check), ``higher`` (the group's rate is above the reference's),
    ``disadvantaged`` (see :func:`disadvantage_when_higher`), ``direction`` (e.g. "lower
    selection rate than 'female'"), ``meaning`` and ``reading`` ("at a disadvantage" or "in
    the group's favour"). Empty without protected attributes.
    """
    import pandas as pd

    cols = ["attribute", "group", "reference", "criterion", "title", "value", "reference_value", "q_value",
            "higher", "disadvantaged", "direction", "meaning", "reading"]
    fr = result.fairness
    if fr is None:
        return pd.DataFrame(columns=cols)
    if fr.favorable_is_positive is None:
        # Three or more classes: one versus rest for the favourable set; "positive" means a class of the set.
        pos, neg = str(fr.favorable), f"other than {fr.favorable}"
        fav_is_pos = True
    else:
        neg, pos = (str(c) for c in result.classes)
        fav_is_pos = bool(fr.favorable_is_positive)
    fav, unfav = (pos, neg) if fav_is_pos else (neg, pos)
    alpha = result.config.alpha
    g = fr.groups
    rows = []
    for _, r in g[g["fairness_flag"].astype(bool)].iterrows():
        attr = r["attribute"]
        ref = fr.references.get(attr, "")
        ref_row = g[(g["attribute"] == attr) & g["is_reference"].astype(bool)]
        for key, title, col in FAIRNESS_CRITERIA:
            q = r.get(f"{key}_q")
            if q is None or not (float(q) <= alpha):
                continue
            v = float(r[col])
            rv = float(ref_row[col].iloc[0]) if len(ref_row) else float("nan")
            higher = bool(float(r[f"{key}_diff"]) > 0)
            bad = higher == disadvantage_when_higher(key, fav_is_pos)
            rows.append([attr, r["group"], ref, key, title, v, rv, float(q), higher, bad,
                         f"{'higher' if higher else 'lower'} {title} than '{ref}'",
                         _meaning(key, higher, fav, unfav, pos, neg, fav_is_pos),
                         "at a disadvantage" if bad else "in the group's favour"])
        if bool(r["below_four_fifths"]):
            rv = float(ref_row["selection_rate"].iloc[0]) if len(ref_row) else float("nan")
            rows.append([attr, r["group"], ref, "four_fifths", "impact ratio", float(r["impact_ratio"]), 1.0,
                         float("nan"), False, True,
                         f"selection rate under four-fifths of the reference '{ref}'",
                         f"impact ratio {float(r['impact_ratio']):.3f} < 0.8 (predicted '{fav}' "
                         f"{float(r['selection_rate']):.1%} vs {rv:.1%})",
                         "at a disadvantage"])
    return pd.DataFrame(rows, columns=cols)


def finding_text(row) -> str:
    """One line for a fairness finding: 'sex=male: lower selection rate than 'female' (0.61 vs 0.80, adjusted p
    0.0012): predicted '0' (favourable) less often — at a disadvantage'."""
    if row["criterion"] == "four_fifths":
        nums = ""
    else:
        nums = f" ({row['value']:.3f} vs {row['reference_value']:.3f}, adjusted p {fmt_p(row['q_value'])})"
    from ..stats.fairness import group_slice_name

    return (f"{group_slice_name(str(row['attribute']), str(row['group']))}: {row['direction']}{nums}: "
            f"{row['meaning']} — {row['reading']}")


def _num(x, digits=4) -> str:
    try:
        xf = float(x)
    except (TypeError, ValueError):
        return str(x)
    return "—" if xf != xf else f"{xf:.{digits}f}"


def terminal_summary(result, top: int = 10, *, gate=None) -> str:
    """The few lines the command line prints: overall metrics, slice counts (and triples), the
    findings with their echoes folded under each, the worst tested slices, fairness flags with
    their direction, the gate and the caution."""
    st = result.status_counts()
    lines = _multiclass_head(result) if is_multiclass(result) else _binary_head(result)
    n_find = int(result.slices["finding"].sum()) if "finding" in result.slices else 0
    roles = f" ({n_find} finding(s), {st['flagged'] - n_find} echo(es))" if st["flagged"] else ""
    lines.append(f"slices: {st.get('tested', 0)} tested (m = {result.family_size}), {st.get('below_support', 0)} "
                 f"below support, {st['flagged']} flagged at {result.config.correction} {result.config.alpha:g}"
                 + roles)
    tri = triples_words(result)
    if tri:
        lines.append("triples: " + tri)
    return _summary_tail(result, lines, top, gate)


def triples_words(result) -> str:
    """How many triples of values were considered, pruned and tested, in one line ("" below order 3)."""
    tri = (result.method or {}).get("triples")
    if not tri:
        return ""
    empty = tri["kept"] - tri["listed"]  # kept, but no row holds all three values
    return (f"{tri['possible']:,} considered, {tri['pruned']:,} pruned (one of their pairs has fewer than "
            f"{tri['min_rows']} rows), " + (f"{empty:,} kept but held by no row, " if empty else "")
            + f"{tri['listed']:,} listed, {tri['tested']:,} tested, {tri['flagged']:,} flagged")


def finding_groups(result) -> list[tuple[Any, Any]]:
    """Each finding (worst first, by ``finding_rank``) with its echoes (by ``flag_rank``):
    a list of (finding row, echoes frame). The terminal, the report and summary.json read it."""
    if "finding" not in result.slices:
        return []
    return [(r, result.echoes(r["slice"])) for _, r in result.findings().iterrows()]


def role_words(row, finding_rank: dict[str, int]) -> str:
    """A flagged slice's role in words: 'finding 1' or 'echo of finding 2 (explained by X)'."""
    if not bool(row.get("flagged", False)):
        return ""
    if bool(row["finding"]):
        return f"finding {int(row['finding_rank'])}"
    of = row["echo_of"]
    via = row["explained_by"]
    return (f"echo of finding {finding_rank.get(of, '?')}" + (f" (explained by {via})" if via and via != of else ""))


def _binary_head(result) -> list[str]:
    m = result.metric
    o = result.overall
    shown = [(m.name, m.name)] + [(k, t) for k, t in (("accuracy", "accuracy"), ("recall", "recall"),
                                                      ("precision", "precision"), ("f1", "F1"),
                                                      ("log_loss", "log loss")) if k != m.name]
    overall = "  ".join(f"{t} {_num(o.get(k))}" for k, t in shown if o.get(k) is not None)
    return [
        f"fissure {result.version}: {result.n_rows} rows, positive class '{result.classes[1]}'"
        + (" (inferred)" if result.positive_inferred else ""),
        f"overall {overall}",
    ]


def _cut(name: str, width: int) -> str:
    return name if len(name) <= width else name[: width - 1] + "…"


def _multiclass_head(result) -> list[str]:
    """Header of a multi-class terminal summary: classes and prediction rule, the averages, the
    K × K confusion matrix of the whole table and one line per class (recall only per class)."""
    m = result.metric
    o = result.overall
    classes = [str(c) for c in result.classes]
    how = ("most probable class" if result.prediction_source == "most probable class"
           else f"column '{result.config.pred}'")
    shown = [(m.name, m.name)] + [(k, t) for k, t in (("accuracy", "accuracy"), ("macro_f1", "macro F1"),
                                                      ("micro_f1", "micro F1"), ("weighted_f1", "weighted F1"),
                                                      ("log_loss", "log loss"), ("brier", "Brier"))
                                  if k != m.name]
    overall = "  ".join(f"{t} {_num(o.get(k))}" for k, t in shown if o.get(k) is not None)
    lines = [f"fissure {result.version}: {result.n_rows} rows, {len(classes)} classes "
             f"({', '.join(_cut(c, 20) for c in classes)}); prediction: {how}",
             f"overall {overall}"]
    w = max(8, min(16, max(len(c) for c in classes)))
    conf = o.get("confusion") or []
    cw = max(8, max((len(f"{int(x):,}") for row in conf for x in row), default=1) + 1)
    lines.append("confusion matrix, whole table (rows: true class, columns: predicted):")
    lines.append("  " + " " * w + "".join(f"{_cut(c, cw - 1):>{cw}}" for c in classes))
    for c, row in zip(classes, conf):
        lines.append(f"  {_cut(c, w):<{w}}" + "".join(f"{int(x):>{cw},}" for x in row))
    lines.append(f"per class: {'class':<{w}} {'support':>8} {'predicted':>9} {'precision':>9} {'recall':>7} "
                 f"{'F1':>7}")
    for c in classes:
        pc = (o.get("per_class") or {}).get(c, {})
        lines.append(f"           {_cut(c, w):<{w}} {int(pc.get('support', 0)):>8,} {int(pc.get('predicted', 0)):>9,} "
                     f"{_num(pc.get('precision')):>9} {_num(pc.get('recall')):>7} {_num(pc.get('f1')):>7}")
    return lines


def _summary_tail(result, lines: list[str], top: int, gate) -> str:
    m = result.metric
    if result.skipped:
        lines.append("skipped: " + "; ".join(f"{k} ({v})" for k, v in result.skipped.items()))
    groups = finding_groups(result)
    if groups:
        lvl = selection_level(result)
        lvl_words = (level_pct(lvl) + " " if lvl else "") + "interval adjusted for the selection"
        lines.append(f"findings by {m.name}, worst first (slice − rest, {lvl_words}); each echo is folded under the "
                     f"finding that explains it:")
        for r, ech in groups[:top]:
            lines.append(f"  {int(r['finding_rank'])}. {r['slice']}  [flag rank {int(r['flag_rank'])}, "
                         f"{len(ech)} echo(es)]")
            lines.append(f"     n={int(r['n']):,}  {m.name} {_num(r['metric_value'])} vs rest {_num(r['rest_value'])}"
                         f"  diff {_num(r['diff'], 3)} [{_num(r['diff_low_adj'], 3)}, {_num(r['diff_high_adj'], 3)}]"
                         f"  q={fmt_p(r['q_value'])}")
            if len(ech):
                shown: list[str] = []
                for name in ech["slice"]:  # by flag rank, as many as fit one line of about 100 characters
                    if shown and sum(len(x) + 2 for x in shown) + len(name) > 100:
                        break
                    shown.append(name)
                more = f", … and {len(ech) - len(shown)} more" if len(ech) > len(shown) else ""
                lines.append("     echoes: " + ", ".join(shown) + more)
        if len(groups) > top:
            lines.append(f"  … {len(groups) - top} more finding(s) in report.html and slices.csv")
    ranked = result.ranked().head(top)
    if len(ranked):
        finding_rank = {r["slice"]: int(r["finding_rank"]) for r, _ in groups}
        lines.append(f"worst tested slices by {m.name} (slice − rest, {int(round(result.config.level * 100))}% "
                     f"interval; every slice is in slices.csv):")
        w = min(90, max(len(s) for s in ranked["slice"]))
        for _, r in ranked.iterrows():
            if not r["flagged"]:
                flag = ""
            elif "finding" not in r.index:
                flag = "flagged"
            elif r["finding"]:
                flag = f"finding {int(r['finding_rank'])}"
            else:
                flag = f"echo of {finding_rank.get(r['echo_of'], '?')}"
            name = r["slice"] if len(r["slice"]) <= w else r["slice"][: w - 1] + "…"
            lines.append(f"  {int(r['rank']):>3} {flag:<12} {name:<{w}} n={int(r['n']):<7} {_num(r['metric_value'])} "
                         f"diff {_num(r['diff'], 3):>7} [{_num(r['diff_low'], 3)}, {_num(r['diff_high'], 3)}] "
                         f"q={fmt_p(r['q_value'])}")
    fr = result.fairness
    if fr is not None:
        found = fairness_findings(result)
        n_groups = len(found.drop_duplicates(["attribute", "group"])) if len(found) else 0
        lines.append(f"fairness ({', '.join(fr.references)}; favourable outcome: predicted '{fr.favorable}'): "
                     f"{n_groups} group(s) flagged, {len(found)} finding(s)")
        for _, r in found.head(top).iterrows():
            lines.append("  " + finding_text(r))
        if len(found) > top:
            lines.append(f"  … {len(found) - top} more in report.html and fairness.csv")
    if gate is not None and gate.checks:
        lines.append("release gate: " + ("BLOCKED — " + "; ".join(gate.reasons) if gate.blocked
                                         else f"passed ({', '.join(gate.checks)} checked)"))
    lines.append("Flags are statistical signals to investigate, not findings of discrimination or legal conclusions.")
    return "\n".join(lines)


#: How :func:`class_drivers` works, in words (the report quotes it).
DRIVERS_RULE = ("For each class c, the slice's recall of c (share of its rows of true class c predicted c) and "
                "precision of c (share of its rows predicted c that are truly c) are set beside the same rates "
                "for the rest of the rows, whose counts are the whole table's minus the slice's. The classes "
                "listed are those whose rate falls furthest below the rest's (largest gap first); a rate with "
                "fewer than {min_rows} rows behind it in the slice is left out as too noisy to read.")


def class_drivers(result, slice_name: str, *, top: int = 3):
    """Which classes drive a slice: per-class recall and precision, slice against the rest.

    Computed from the slice's K × K counts and the whole table's (rest = whole − slice); no
    test is run. Rows: ``class``, ``rate`` ("recall" or "precision"), ``slice_value``,
    ``rest_value``, ``gap`` (slice − rest; negative is worse), ``slice_rows`` and ``rest_rows``
    (the rate's denominators), sorted worst first, only negative gaps, at most ``top`` rows.
    A rate with fewer than ``min_metric_support`` rows in the slice's denominator is left out.
    Empty for two classes.
    """
    import pandas as pd

    cols = ["class", "rate", "slice_value", "rest_value", "gap", "slice_rows", "rest_rows"]
    if not is_multiclass(result):
        return pd.DataFrame(columns=cols)
    from ..stats.result import ALL

    s, whole = result.slice(slice_name), result.slice(ALL)
    classes = [str(c) for c in result.classes]

    def cells(row):
        import numpy as np

        return np.array([[float(row[f"true_{t}_pred_{p}"]) for p in classes] for t in classes])

    cs, cw = cells(s), cells(whole)
    cr = cw - cs
    rows = []
    for i, c in enumerate(classes):
        for rate, axis in (("recall", 1), ("precision", 0)):
            den_s, den_r = cs.sum(axis=axis)[i], cr.sum(axis=axis)[i]
            if den_s < result.config.min_metric_support or den_r <= 0:
                continue
            vs, vr = cs[i, i] / den_s, cr[i, i] / den_r
            if vs < vr:
                rows.append([c, rate, vs, vr, vs - vr, int(den_s), int(den_r)])
    out = pd.DataFrame(rows, columns=cols)
    return out.sort_values("gap", kind="stable").head(top).reset_index(drop=True)


def _findings_note(result) -> dict[str, Any]:
    """How flagged slices become findings or echoes, and the adjusted intervals (audit.stats.findings)."""
    ex = (result.method or {}).get("explanations", {})
    lvl = ex.get("selection_level")
    out = {
        "roles": ("Every flagged slice is either a finding or an echo of another flagged slice. For each two flagged "
                  "slices where one lies inside the other, two tests of the audited metric, with the same test as the "
                  "flags and counts taken from the tally: the inner slice against the rest of the outer one, and the "
                  "outer slice without the inner one against the rest of the table. A slice is an echo of a flagged "
                  "slice it lies in when it is not significantly worse than that slice's other rows, and of a flagged "
                  "slice inside it when that slice is significantly worse than its surroundings and the rest of the "
                  "outer slice is not significantly worse than the rest of the table. A finding is a flagged slice no "
                  "other flagged slice explains; echoes are folded under the finding their explanations lead to."),
        "multiplicity": ("each kind of explanation test is one family, corrected by Holm's step-down method (Holm "
                         "1979); significantly worse = adjusted p ≤ alpha and worse"),
        "explanation_tests": ex.get("explanation_tests", 0),
        "findings": ex.get("findings", 0),
        "echoes": ex.get("echoes", 0),
        "adjusted_intervals": ("intervals of the difference for the flagged slices at level 1 − R·alpha/m, for the R "
                               "slices selected by the correction (q ≤ alpha, better or worse than the rest; only the "
                               "worse ones are flagged) among the m tested: false coverage-statement rate "
                               "intervals (Benjamini & Yekutieli 2005, JASA 100:71-81); findings are ranked by their "
                               "conservative end"),
        "adjusted_level": lvl,
    }
    tri = (result.method or {}).get("triples")
    if tri:
        out["triples"] = (f"{tri['possible']:,} triples of values considered; {tri['pruned']:,} pruned because one of "
                          f"their pairs has fewer than {tri['min_rows']} rows (so they could not reach the support "
                          f"rule; pruning looks at row counts only), {tri['listed']:,} listed, {tri['tested']:,} "
                          "tested" + ("" if tri.get("loss_sums") else "; log loss and Brier score of triples are "
                                      "not computed unless the audited metric is one of them"))
    return out
