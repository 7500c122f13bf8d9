"""The page's views of a label with three or more classes: the averages beside a per-class table,
the K × K confusion matrix of the whole table and of a slice, and the classes that drive a slice.

Numbers come from the result (``result.overall["per_class"]``, the slice's ``true_<t>_pred_<p>``
counts); charts from ``audit.faces.charts``; the drivers from ``audit.faces.prose.class_drivers``.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from audit.engine import ALL
from audit.faces.prose import class_drivers, prediction_words
from ui.sections import chart_section, class_confusion_table, show_confusion
from ui.wording import fmt, md

AVERAGES = ["accuracy", "error_rate", "macro_f1", "micro_f1", "weighted_f1", "macro_precision", "macro_recall",
            "log_loss", "brier"]


def averages_table(result, lvl: int) -> pd.DataFrame:
    o = result.overall
    rows = []
    for k in AVERAGES:
        if o.get(k) is None:
            continue
        # interval ends as text: the browser's grid writes a missing number as "None"; here it is a dash
        rows.append({"metric": k, "value": o[k], f"{lvl}% low": fmt(o.get(k + "_low")),
                     f"{lvl}% high": fmt(o.get(k + "_high"))})
    return pd.DataFrame(rows)


def per_class_table(result) -> pd.DataFrame:
    """One row per class: support, predicted, precision, recall, F1 (one-vs-rest), whole table."""
    pc = result.overall.get("per_class") or {}
    rows = [{"class": str(c), "support": int(v.get("support", 0)), "predicted": int(v.get("predicted", 0)),
             "precision": v.get("precision"), "recall": v.get("recall"), "f1": v.get("f1")}
            for c, v in pc.items()]
    return pd.DataFrame(rows, columns=["class", "support", "predicted", "precision", "recall", "f1"])


def overview(result, st, *, lvl: int) -> None:
    """The whole model: averages, the per-class table beside them, and the K × K confusion matrix."""
    classes = [str(c) for c in result.classes]
    st.caption(f"Label **{md(result.config.label)}** with {len(classes)} classes: "
               + ", ".join(f"**{md(c)}**" for c in classes) + f". Prediction: {md(prediction_words(result))}.")
    num = st.column_config.NumberColumn
    left, right = st.columns([3, 2])
    avg = averages_table(result, lvl)
    left.dataframe(avg, hide_index=True, width="stretch", height=35 * (len(avg) + 1) + 3,
                   column_config={"value": num(format="%.4f")})
    pc = per_class_table(result)
    left.dataframe(pc, hide_index=True, width="stretch", height=35 * (len(pc) + 1) + 3,
                   column_config={"support": num(format="%d"), "predicted": num(format="%d"),
                                  "precision": num(format="%.4f"), "recall": num(format="%.4f"),
                                  "f1": num("F1", format="%.4f")})
    left.caption("Averages (macro: mean over classes; micro: pooled counts; weighted: by support) and, below them, "
                 "each class one-vs-rest.")
    show_confusion(right, class_confusion_table(result.overall["confusion"], classes), "Confusion matrix, all rows")
    right.caption("Rows: true class; columns: predicted class; each cell's share is of its row.")


def rest_confusion(result, name: str) -> list[list[int]]:
    from audit.faces import charts

    whole = np.asarray(charts.slice_confusion(result, ALL))
    return (whole - np.asarray(charts.slice_confusion(result, name))).tolist()


def slice_panel(result, name: str, st) -> None:
    """One slice of a multi-class audit: its K × K counts beside the rest's, per-class bars and drivers."""
    s = result.slice(name)
    classes = [str(c) for c in result.classes]
    st.markdown(f"**{md(name)}** · n = **{int(s['n']):,}** rows · errors {int(s['errors']):,} · "
                + " · ".join(f"{md(c)} {int(s['support_' + c]):,}" for c in classes))
    from audit.faces import charts

    a, b = st.columns(2)
    show_confusion(a, class_confusion_table(charts.slice_confusion(result, name), classes),
                   f"In the slice (n={int(s['n']):,})")
    rest = rest_confusion(result, name)
    show_confusion(b, class_confusion_table(rest, classes), f"In the rest (n={int(np.sum(rest)):,})")
    d = class_drivers(result, name)
    if len(d):
        st.markdown("Classes that drive this slice (recall and precision below the rest's, largest gap first):")
        st.dataframe(d, hide_index=True, width="stretch",
                     column_config={c: st.column_config.NumberColumn(format="%.4f")
                                    for c in ("slice_value", "rest_value", "gap")})
    else:
        st.caption("No class's recall or precision is lower in this slice than in the rest of the rows.")
    box = chart_section(st, "Chart: each class's precision, recall and F1 in the slice", "chart_classes")
    if box is not None:
        box.plotly_chart(charts.per_class_bars(result, slice_name=name), key="class_bars")
