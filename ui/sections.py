"""What keeps the page's first view light: charts drawn on request, confusion counts as tables.

A Plotly chart costs the browser far more than the server: the chart library (about 4.7 MB of
JavaScript) is fetched and compiled in every new tab, and each chart is laid out and drawn on
the tab's main thread. So the first view draws no chart: each chart sits in a section that
runs only while it is open (:func:`chart_section`), and the small confusion matrices are
tables. A chart in an open section is built in the same script run, from the same result
object, as the tables around it, so it always shows what they show.
"""
from __future__ import annotations

import pandas as pd

from ui.wording import md

#: The chart sections' keys: their open or closed state is kept in the session, per browser tab.
CHART_KEYS = ("chart_top", "chart_pair", "chart_noise", "chart_fairness", "chart_classes")


def chart_section(where, label: str, key: str):
    """An expander whose body runs only while it is open: the container to draw in, or None (closed)."""
    box = where.expander(label, key=key, on_change="rerun")
    return box if box.open else None


def confusion_table(counts, classes) -> pd.DataFrame:
    """A 2 × 2 confusion matrix as a table: rows actual class, columns predicted class; each cell
    names its kind and gives its count and its share of the rows counted (the chart's layout)."""
    neg, pos = (md(c) for c in classes)
    cells = [[("true negative", counts["tn"]), ("false positive", counts["fp"])],
             [("false negative", counts["fn"]), ("true positive", counts["tp"])]]
    total = sum(int(n) for row in cells for _, n in row)
    body = [[f"{kind}: **{int(n):,}** · {(int(n) / total if total else 0):.1%}" for kind, n in row] for row in cells]
    return pd.DataFrame(body, index=[f"actual {neg}", f"actual {pos}"], columns=[f"predicted {neg}", f"predicted {pos}"])


def class_confusion_table(matrix, classes) -> pd.DataFrame:
    """A K × K confusion matrix as a table: rows true class, columns predicted class; each cell gives
    its count and its share of the row (of that true class), as the chart does."""
    names = [md(c) for c in classes]
    body = []
    for row in matrix:
        tot = sum(int(n) for n in row)
        body.append([f"**{int(n):,}** · {int(n) / tot:.1%}" if tot else f"**{int(n):,}**" for n in row])
    return pd.DataFrame(body, index=[f"actual {c}" for c in names], columns=[f"predicted {c}" for c in names])


def table_counts(frame: pd.DataFrame) -> list[list[int]]:
    """The counts back out of a confusion table (its bold numbers), for tests and checks."""
    return [[int(str(cell).split("**")[1].replace(",", "")) for cell in row] for row in frame.to_numpy()]


def show_confusion(where, frame: pd.DataFrame, title: str) -> None:
    where.markdown(f"**{title}**")
    where.table(frame)
