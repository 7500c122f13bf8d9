"""Chart builders: pure functions from an audit result to a Plotly figure.

The page and the report call the same builders. Meaning is carried by position, text and
marker shape as well as colour; the palette is our own and avoids red/green pairs.

Plotly reads a little HTML in every label (``<b>``, ``<a href>``, ``<br>``). Every string that
comes from the user's file (column names, values, slice names) goes through :func:`text`, so a
value such as ``<b>x</b>`` is drawn as those characters, exactly as the tables show it.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from ..stats.intervals import chance_band


#: Fissure's palette (blue/orange contrast stays distinct under the common colour-vision deficiencies).
PALETTE = {
    "ink": "#1d3557",      # text, axes, tested slices
    "flag": "#d1651f",     # flagged slices
    "calm": "#4f86c6",     # unremarkable slices
    "rest": "#7a7a7a",     # the rest of the population
    "band": "rgba(79, 134, 198, 0.16)",
    "grid": "#e6e9ef",
    "absent": "#f2f2f2",
}
# Sequential scale for heatmaps: pale sand to deep blue (monotone in lightness).
HEAT_SCALE = [[0.0, "#f7f4ea"], [0.35, "#c9d8e6"], [0.7, "#6a9bc7"], [1.0, "#1d3557"]]


def text(value) -> str:
    """A user's string made safe for a Plotly label, title, tick or hover: ``<``, ``>``, ``&`` as entities."""
    return str(value).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def _texts(values) -> list[str]:
    return [text(v) for v in values]


def log_ticks(lo: float, hi: float) -> tuple[list[float], list[str]]:
    """Ticks 1-2-5 per decade between ``lo`` and ``hi`` with thousands separators (``1``, ``2``, ``5``, ``10``,
    ... ``1,000``): readable on a log axis, unlike Plotly's default minor labels."""
    lo, hi = max(float(lo), 1.0), max(float(hi), 1.0)
    vals = []
    for e in range(int(np.floor(np.log10(lo))), int(np.ceil(np.log10(hi))) + 1):
        for m in (1, 2, 5):
            v = m * 10.0 ** e
            if lo / 1.5 <= v <= hi * 1.5:
                vals.append(v)
    if len(vals) > 9:  # wide ranges: decades only
        vals = [v for v in vals if str(int(v)).startswith("1")]
    return vals, [f"{v:,.0f}" for v in vals]


#: Fissure's own light chart style (white ground, pale grid, no zero line), given as a small template
#: instead of Plotly's named "plotly_white": loading and copying a named template costs about 0.1 s
#: of a command line's run.
_TEMPLATE = {"layout": {"paper_bgcolor": "white", "plot_bgcolor": "white",
                        "xaxis": {"gridcolor": PALETTE["grid"], "linecolor": PALETTE["grid"], "ticks": "",
                                  "zeroline": False, "automargin": True, "showgrid": True},
                        "yaxis": {"gridcolor": PALETTE["grid"], "linecolor": PALETTE["grid"], "ticks": "",
                                  "zeroline": False, "automargin": True, "showgrid": True},
                        "hoverlabel": {"align": "left"}, "title": {"x": 0.0}}}


def _figure(*args, **kwargs) -> go.Figure:
    """A figure that starts from Fissure's template (Plotly's default template is never loaded)."""
    layout = dict(kwargs.pop("layout", None) or {})
    layout.setdefault("template", _TEMPLATE)
    return go.Figure(*args, layout=layout, **kwargs)


def _layout(fig: go.Figure, *, title: str, width: int | None, height: int) -> go.Figure:
    fig.update_layout(
        title={"text": title, "x": 0.0, "xanchor": "left", "font": {"size": 15}},
        template=_TEMPLATE, height=height, width=width, margin={"l": 10, "r": 20, "t": 60, "b": 40},
        font={"family": "DejaVu Sans, Arial, sans-serif", "size": 12, "color": PALETTE["ink"]},
        # below the x-axis title, not over it: anchored by its top, under the axis's own margin
        legend={"orientation": "h", "yanchor": "top", "y": -0.22, "x": 0},
    )
    return fig


def _metric_title(result) -> str:
    return result.metric.title


def top_slices(result, *, k: int = 15, width: int | None = None, ranked: pd.DataFrame | None = None) -> go.Figure:
    """The ``k`` worst-ranked slices: metric with interval bars, and the rest's value beside it.

    ``ranked`` is a subset of ``result.ranked()`` (the page's filters); default: all of it.
    """
    t = (result.ranked() if ranked is None else ranked).head(k).iloc[::-1]
    lvl = int(round(result.config.level * 100))
    names = [f"#{int(r)} {text(s)}" for r, s in zip(t["rank"], t["slice"])]
    err_plus = (t["metric_high"] - t["metric_value"]).to_numpy()
    err_minus = (t["metric_value"] - t["metric_low"]).to_numpy()
    flagged = t["flagged"].to_numpy(dtype=bool)
    fig = _figure()
    fig.add_trace(go.Scatter(
        x=t["rest_value"], y=names, mode="markers", name="rest of the rows",
        marker={"symbol": "line-ns-open", "size": 14, "color": PALETTE["rest"], "line": {"width": 2}},
        hovertemplate="rest: %{x:.4f}<extra></extra>"))
    for mask, label, colour, symbol in ((flagged, "flagged slice", PALETTE["flag"], "diamond"),
                                         (~flagged, "not flagged", PALETTE["calm"], "circle")):
        if mask.any():
            fig.add_trace(go.Scatter(
                x=t["metric_value"][mask], y=np.asarray(names)[mask], mode="markers", name=label,
                marker={"symbol": symbol, "size": 10, "color": colour},
                error_x={"type": "data", "array": err_plus[mask], "arrayminus": err_minus[mask],
                         "color": colour, "thickness": 1.5, "width": 4},
                customdata=np.stack([t["n"][mask], t["q_value"][mask]], axis=1),
                hovertemplate="%{y}<br>value %{x:.4f}<br>n=%{customdata[0]}<br>adjusted p=%{customdata[1]:.2g}"
                              "<extra></extra>"))
    overall = result.overall.get(result.config.metric)
    if overall is not None:
        fig.add_vline(x=overall, line={"color": PALETTE["ink"], "dash": "dot", "width": 1},
                      annotation_text="whole table", annotation_position="top")
    fig.update_xaxes(title=f"{_metric_title(result)} ({lvl}% interval)", gridcolor=PALETTE["grid"])
    fig.update_yaxes(automargin=True)
    shown = "slices" if ranked is None else "slices shown"
    return _layout(fig, title=f"Worst {len(t)} {shown} by {_metric_title(result)}", width=width,
                   height=max(260, 34 * len(t) + 120))


def confusion(counts: dict, classes: tuple[str, str], *, title: str = "Confusion matrix",
              width: int | None = None, height: int = 300) -> go.Figure:
    """A 2 × 2 grid: rows actual class, columns predicted class; each cell shows count and share."""
    neg, pos = (text(c) for c in classes)
    z = np.array([[counts["tn"], counts["fp"]], [counts["fn"], counts["tp"]]], dtype=float)
    total = z.sum()
    names = [["true negative", "false positive"], ["false negative", "true positive"]]
    cells = [[f"{names[i][j]}<br><b>{int(z[i, j]):,}</b><br>{(z[i, j] / total if total else 0):.1%}"
             for j in range(2)] for i in range(2)]
    fig = _figure(go.Heatmap(
        z=z, x=[f"predicted {neg}", f"predicted {pos}"], y=[f"actual {neg}", f"actual {pos}"], text=cells,
        texttemplate="%{text}", colorscale=HEAT_SCALE, showscale=False, hoverinfo="skip", xgap=3, ygap=3))
    fig.update_yaxes(autorange="reversed")
    return _layout(fig, title=text(title), width=width, height=height)


def pair_heatmap(result, attr_a: str, attr_b: str, *, width: int | None = None) -> go.Figure:
    """Metric over the cells of two attributes; every cell states its support, and cells
    below support say so in text as well as being greyed, naming the shortfall: too few rows,
    or too few rows in the metric's denominator (actual positives for recall...)."""
    sl = result.slices
    names = [a.name for a in result.attributes]
    if names.index(attr_a) > names.index(attr_b):
        attr_a, attr_b = attr_b, attr_a
    levels = {a.name: list(a.levels) for a in result.attributes}
    cells = sl[(sl["order"] == 2) & (sl["attribute_1"] == attr_a) & (sl["attribute_2"] == attr_b)]
    la, lb = levels[attr_a], levels[attr_b]
    z = np.full((len(la), len(lb)), np.nan)
    cell_text = [["no rows" for _ in lb] for _ in la]
    den_name, den_title = _denominator(result)
    min_rows, min_den = result.config.min_support, result.config.min_metric_support
    pos = {v: i for i, v in enumerate(la)}, {v: j for j, v in enumerate(lb)}
    for r in cells.to_dict("records"):
        i, j = pos[0][r["value_1"]], pos[1][r["value_2"]]
        v, n = r["metric_value"], int(r["n"])
        if r["status"] == "below_support":
            den = _denominator_count(r, den_name)
            if n >= min_rows and den_name != "n" and den < min_den:
                cell_text[i][j] = f"below support<br>n={n:,}, {den:,} {den_title}"
            else:
                cell_text[i][j] = f"below support<br>n={n:,}"
        else:
            z[i, j] = v
            mark = "⚑ " if r["flagged"] else ""
            cell_text[i][j] = f"{mark}{v:.3f}<br>n={n:,}" if v == v else f"undefined<br>n={n:,}"
    fig = _figure(go.Heatmap(
        z=z, x=_texts(lb), y=_texts(la), text=cell_text, texttemplate="%{text}", colorscale=HEAT_SCALE, xgap=2,
        ygap=2, colorbar={"title": {"text": _metric_title(result).split(" (")[0]}}, hoverongaps=False,
        hovertemplate=f"{text(attr_a)}=%{{y}}<br>{text(attr_b)}=%{{x}}<br>%{{text}}<extra></extra>"))
    fig.update_layout(plot_bgcolor=PALETTE["absent"])
    fig.update_xaxes(title=text(attr_b), type="category")
    fig.update_yaxes(title=text(attr_a), type="category", autorange="reversed")
    support = (f"below support: fewer than {min_rows:,} rows" if den_name == "n" else
               f"below support: fewer than {min_rows:,} rows or {min_den:,} {den_title}")
    return _layout(fig, title=f"{_metric_title(result)} by {text(attr_a)} × {text(attr_b)} (⚑ flagged; grey: "
                              f"{support}, or no rows)", width=width, height=max(300, 38 * len(la) + 150))


#: Words for the rows a rate is computed over (its denominator).
DENOMINATORS = {"n": "rows", "actual_pos": "actual positives", "actual_neg": "actual negatives",
                "pred_pos": "predicted positives", "pred_neg": "predicted negatives",
                "tp_fp_fn": "rows positive in truth or prediction"}


def _denominator(result) -> tuple[str, str]:
    name = getattr(result.metric, "denominator", "n") or "n"
    return name, DENOMINATORS.get(name, name)


def _denominator_count(row, name: str) -> int:
    base, _, cls = name.partition(":")
    if cls:  # a per-class rate of a multi-class audit
        sup, pred = int(row[f"support_{cls}"]), int(row[f"predicted_{cls}"])
        return {"actual": sup, "pred": pred, "tp_fp_fn": sup + pred - int(row[f"true_{cls}_pred_{cls}"])}[base]
    if name == "actual_neg":
        return int(row["n"] - row["actual_pos"])
    if name == "pred_neg":
        return int(row["n"] - row["pred_pos"])
    if name == "tp_fp_fn":
        return int(row["tp"] + row["fp"] + row["fn"])
    return int(row[name])


def noise_band(result, *, width: int | None = None) -> go.Figure:
    """Every tested slice's metric against its size, with the band a slice of that size
    would fall in by chance if it were like the whole table; flagged slices stand out."""
    t = result.tested()
    fig = _figure()
    m = result.metric
    overall = result.overall.get(m.name)
    if len(t) and overall is not None:
        ns = np.unique(np.geomspace(max(2, t["n"].min()), t["n"].max(), 80).round())
        lo, hi = chance_band(result, ns)
        fig.add_trace(go.Scatter(x=np.r_[ns, ns[::-1]], y=np.r_[hi, lo[::-1]], fill="toself",
                                 fillcolor=PALETTE["band"], line={"width": 0}, hoverinfo="skip",
                                 name=f"{int(round(result.config.level * 100))}% range by chance alone"))
        fig.add_hline(y=overall, line={"color": PALETTE["ink"], "dash": "dot", "width": 1},
                      annotation_text="whole table")
    for mask, label, colour, symbol, size in ((~t["flagged"], "not flagged", PALETTE["calm"], "circle", 6),
                                               (t["flagged"], "flagged", PALETTE["flag"], "diamond", 9)):
        part = t[mask.to_numpy(dtype=bool)]
        if len(part):
            fig.add_trace(go.Scatter(
                x=part["n"], y=part["metric_value"], mode="markers", name=label, text=_texts(part["slice"]),
                marker={"symbol": symbol, "size": size, "color": colour, "opacity": 0.8},
                hovertemplate="%{text}<br>n=%{x}<br>value %{y:.4f}<extra></extra>"))
    fig.update_xaxes(type="log", title="slice size (rows, log scale)", gridcolor=PALETTE["grid"])
    if len(t):
        vals, labels = log_ticks(t["n"].min(), t["n"].max())
        fig.update_xaxes(tickvals=vals, ticktext=labels)
    fig.update_yaxes(title=_metric_title(result), gridcolor=PALETTE["grid"])
    return _layout(fig, title=f"Where noise ends: {_metric_title(result)} against slice size", width=width,
                   height=420)


def worst_pair(result) -> tuple[str, str] | None:
    """The attribute pair that holds the worst-ranked pair slice (for the report's heatmap)."""
    r = result.ranked()
    r = r[r["order"] == 2]
    if not len(r):
        return None
    top = r.iloc[0]
    return top["attribute_1"], top["attribute_2"]


def selection_rates(fair_groups: pd.DataFrame, attribute: str, *, width: int | None = None) -> go.Figure:
    """Selection rate per group with intervals and a line at four-fifths of the reference rate."""
    g = fair_groups[fair_groups["attribute"] == attribute]
    fig = _figure()
    excluded = g["excluded"].to_numpy(dtype=bool)
    below = g["below_four_fifths"].to_numpy(dtype=bool)
    colours = np.where(below, PALETTE["flag"], np.where(excluded, PALETTE["rest"], PALETTE["calm"]))
    # A pair group breaks after each " & ", so long names stand level under their bars.
    labels = [f"{text(grp)}{' (reference)' if ref else ''}{' (left out: small)' if ex else ''}".replace(
        " &amp; ", " &amp;<br>") for grp, ref, ex in zip(g["group"], g["is_reference"], excluded)]
    fig.add_trace(go.Bar(
        x=labels, y=g["selection_rate"], marker={"color": colours},
        error_y={"type": "data", "array": g["selection_rate_high"] - g["selection_rate"],
                 "arrayminus": g["selection_rate"] - g["selection_rate_low"], "color": PALETTE["ink"]},
        text=[f"{v:.1%}" + ("<br>▼ below 4/5" if b else "") for v, b in zip(g["selection_rate"], below)],
        textposition="inside", insidetextanchor="middle", textangle=0, textfont={"color": "white"},
        hovertemplate="%{x}<br>selection rate %{y:.3f}<extra></extra>", showlegend=False))
    ref = g[g["is_reference"]]
    if len(ref):
        r = float(ref["selection_rate"].iloc[0])
        line = {"color": PALETTE["flag"], "dash": "dash"}
        fig.add_hline(y=0.8 * r, line=line)
        # Named in a legend above the plot area, not written on the plot: a label beside the line
        # sits over whichever bar is taller than the line, and one under the axis meets long
        # group names.
        fig.add_trace(go.Scatter(x=[None], y=[None], mode="lines", line=line, hoverinfo="skip",
                                 name=f"four-fifths of reference ({0.8 * r:.1%})", showlegend=True))
    fig.update_yaxes(title="selection rate (favourable outcome)", tickformat=".0%", gridcolor=PALETTE["grid"])
    fig.update_xaxes(type="category")
    fig = _layout(fig, title=f"Selection rate by {text(attribute)}", width=width, height=400)
    return fig.update_layout(
        title={"y": 1.0, "yref": "container", "yanchor": "top", "pad": {"t": 12}},
        legend={"orientation": "h", "xanchor": "left", "x": 0, "yanchor": "bottom", "y": 1.0},
        margin={"t": 78})


def error_rate_balance(fair_groups: pd.DataFrame, attribute: str, *, width: int | None = None) -> go.Figure:
    """True-positive rate against false-positive rate per group, with intervals on both axes."""
    g = fair_groups[(fair_groups["attribute"] == attribute)]
    fig = _figure(go.Scatter(
        x=g["fpr"], y=g["tpr"], mode="markers+text", text=_texts(g["group"]), textposition="top center",
        marker={"size": 11, "color": PALETTE["ink"], "symbol": "circle"},
        error_x={"type": "data", "array": g["fpr_high"] - g["fpr"], "arrayminus": g["fpr"] - g["fpr_low"],
                 "color": PALETTE["calm"]},
        error_y={"type": "data", "array": g["tpr_high"] - g["tpr"], "arrayminus": g["tpr"] - g["tpr_low"],
                 "color": PALETTE["calm"]},
        hovertemplate="%{text}<br>FPR %{x:.3f}<br>TPR %{y:.3f}<extra></extra>"))
    fig.update_xaxes(title="false-positive rate", gridcolor=PALETTE["grid"])
    fig.update_yaxes(title="true-positive rate", gridcolor=PALETTE["grid"])
    return _layout(fig, title=f"Error-rate balance by {text(attribute)}", width=width, height=380)


__all__ = ["PALETTE", "text", "log_ticks", "top_slices", "confusion", "pair_heatmap", "noise_band", "worst_pair", "selection_rates",
           "error_rate_balance"]


# ---- three or more classes ----------------------------------------------------------------


def class_confusion(confusion, classes, *, title: str = "Confusion matrix", width: int | None = None,
                    height: int | None = None) -> go.Figure:
    """A K × K grid for a label with three or more classes: rows the true class, columns the
    predicted class; each cell shows its count and its share of the row (the row's recall on
    the diagonal). ``confusion`` is a K × K list of counts (``result.overall["confusion"]``,
    or a slice's ``true_<t>_pred_<p>`` counts, see :func:`slice_confusion`)."""
    z = np.asarray(confusion, dtype=float)
    k = len(classes)
    names = _texts(classes)
    row_tot = z.sum(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(row_tot > 0, z / np.maximum(row_tot, 1), np.nan)
    cells = [[f"<b>{int(z[i, j]):,}</b><br>{share[i, j]:.1%}" if share[i, j] == share[i, j] else "0"
              for j in range(k)] for i in range(k)]
    fig = _figure(go.Heatmap(
        z=share, x=[f"predicted {c}" for c in names], y=[f"true {c}" for c in names], text=cells,
        texttemplate="%{text}", colorscale=HEAT_SCALE, zmin=0, zmax=1, showscale=False, xgap=3, ygap=3,
        hovertemplate="%{y}<br>%{x}<br>%{text}<extra></extra>"))
    fig.update_xaxes(type="category", side="top")
    fig.update_yaxes(type="category", autorange="reversed", automargin=True)
    return _layout(fig, title=text(title), width=width, height=height or max(300, 70 * k + 130))


def slice_confusion(result, slice_name: str) -> list[list[int]]:
    """The K × K counts of one slice (rows true class, columns predicted) from its columns."""
    row = result.slice(slice_name)
    cls = [str(c) for c in result.classes]
    return [[int(row[f"true_{t}_pred_{p}"]) for p in cls] for t in cls]


def per_class_bars(result, *, slice_name: str | None = None, width: int | None = None) -> go.Figure:
    """Per-class precision, recall and F1 (one-vs-rest) as grouped bars, with each class's
    support in its label; the whole table, or one slice with ``slice_name``. The macro average
    of F1 is drawn as a dotted line."""
    cls = [str(c) for c in result.classes]
    if slice_name is None:
        pc = result.overall["per_class"]
        vals = {m: [pc[c][m] for c in cls] for m in ("precision", "recall", "f1")}
        support = [pc[c]["support"] for c in cls]
        macro = result.overall.get("macro_f1")
        where = "whole table"
    else:
        row = result.slice(slice_name)
        vals = {m: [float(row[f"{m}_{c}"]) for c in cls] for m in ("precision", "recall", "f1")}
        support = [int(row[f"support_{c}"]) for c in cls]
        macro = float(row["macro_f1"])
        where = text(slice_name)
    labels = [f"{text(c)}<br>(n={s:,})" for c, s in zip(cls, support)]
    fig = _figure()
    for m, title, colour, pattern in (("precision", "precision", PALETTE["calm"], ""),
                                      ("recall", "recall", PALETTE["ink"], "/"),
                                      ("f1", "F1", PALETTE["flag"], ".")):
        v = [x if x == x else None for x in (float(x) if x is not None else float("nan") for x in vals[m])]
        fig.add_trace(go.Bar(x=labels, y=v, name=title, marker={"color": colour, "pattern": {"shape": pattern}},
                             text=[f"{x:.2f}" if x is not None else "—" for x in v], textposition="outside",
                             hovertemplate=f"%{{x}}<br>{title} %{{y:.4f}}<extra></extra>"))
    if macro is not None and macro == macro:
        fig.add_hline(y=macro, line={"color": PALETTE["rest"], "dash": "dot", "width": 1},
                      annotation_text=f"macro F1 {macro:.3f}", annotation_position="top right")
    fig.update_yaxes(range=[0, 1.08], title="one-vs-rest rate", gridcolor=PALETTE["grid"])
    fig.update_xaxes(type="category")
    fig.update_layout(barmode="group")
    return _layout(fig, title=f"Per-class precision, recall and F1 ({where})", width=width, height=400)


__all__ += ["class_confusion", "slice_confusion", "per_class_bars"]
