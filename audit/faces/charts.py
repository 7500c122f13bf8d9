"""Chart builders: pure functions from an audit result to a Plotly figure.

The page and the report call the same builders. Meaning is carried by position, text and
marker shape as well as colour; the palette is our own and avoids red/green pairs.
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


def _layout(fig: go.Figure, *, title: str, width: int | None, height: int) -> go.Figure:
    fig.update_layout(
        title={"text": title, "x": 0.0, "xanchor": "left", "font": {"size": 15}},
        template="plotly_white", height=height, width=width, margin={"l": 10, "r": 20, "t": 60, "b": 40},
        font={"family": "DejaVu Sans, Arial, sans-serif", "size": 12, "color": PALETTE["ink"]},
        legend={"orientation": "h", "y": -0.15, "x": 0},
    )
    return fig


def _metric_title(result) -> str:
    return result.metric.title


def top_slices(result, *, k: int = 15, width: int | None = None) -> go.Figure:
    """The ``k`` worst-ranked slices: metric with interval bars, and the rest's value beside it."""
    t = result.ranked().head(k).iloc[::-1]
    lvl = int(round(result.config.level * 100))
    names = [f"#{int(r)} {s}" for r, s in zip(t["rank"], t["slice"])]
    err_plus = (t["metric_high"] - t["metric_value"]).to_numpy()
    err_minus = (t["metric_value"] - t["metric_low"]).to_numpy()
    flagged = t["flagged"].to_numpy(dtype=bool)
    fig = go.Figure()
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
    return _layout(fig, title=f"Worst {len(t)} slices by {_metric_title(result)}", width=width,
                   height=max(260, 34 * len(t) + 120))


def confusion(counts: dict, classes: tuple[str, str], *, title: str = "Confusion matrix",
              width: int | None = None, height: int = 300) -> go.Figure:
    """A 2 × 2 grid: rows actual class, columns predicted class; each cell shows count and share."""
    neg, pos = (str(c) for c in classes)
    z = np.array([[counts["tn"], counts["fp"]], [counts["fn"], counts["tp"]]], dtype=float)
    total = z.sum()
    names = [["true negative", "false positive"], ["false negative", "true positive"]]
    text = [[f"{names[i][j]}<br><b>{int(z[i, j]):,}</b><br>{(z[i, j] / total if total else 0):.1%}"
             for j in range(2)] for i in range(2)]
    fig = go.Figure(go.Heatmap(
        z=z, x=[f"predicted {neg}", f"predicted {pos}"], y=[f"actual {neg}", f"actual {pos}"], text=text,
        texttemplate="%{text}", colorscale=HEAT_SCALE, showscale=False, hoverinfo="skip", xgap=3, ygap=3))
    fig.update_yaxes(autorange="reversed")
    return _layout(fig, title=title, width=width, height=height)


def pair_heatmap(result, attr_a: str, attr_b: str, *, width: int | None = None) -> go.Figure:
    """Metric over the cells of two attributes; every cell states its support, and cells
    below support say so in text as well as being greyed."""
    sl = result.slices
    names = [a.name for a in result.attributes]
    if names.index(attr_a) > names.index(attr_b):
        attr_a, attr_b = attr_b, attr_a
    levels = {a.name: list(a.levels) for a in result.attributes}
    cells = sl[(sl["attribute_1"] == attr_a) & (sl["attribute_2"] == attr_b)]
    la, lb = levels[attr_a], levels[attr_b]
    z = np.full((len(la), len(lb)), np.nan)
    text = [["no rows" for _ in lb] for _ in la]
    for _, r in cells.iterrows():
        i, j = la.index(r["value_1"]), lb.index(r["value_2"])
        v = r["metric_value"]
        if r["status"] == "below_support":
            text[i][j] = f"below support<br>n={int(r['n'])}"
        else:
            z[i, j] = v
            mark = "⚑ " if r["flagged"] else ""
            text[i][j] = f"{mark}{v:.3f}<br>n={int(r['n'])}" if v == v else f"undefined<br>n={int(r['n'])}"
    fig = go.Figure(go.Heatmap(
        z=z, x=lb, y=la, text=text, texttemplate="%{text}", colorscale=HEAT_SCALE, xgap=2, ygap=2,
        colorbar={"title": {"text": result.config.metric}}, hoverongaps=False,
        hovertemplate=f"{attr_a}=%{{y}}<br>{attr_b}=%{{x}}<br>%{{text}}<extra></extra>"))
    fig.update_layout(plot_bgcolor=PALETTE["absent"])
    fig.update_xaxes(title=attr_b, type="category")
    fig.update_yaxes(title=attr_a, type="category", autorange="reversed")
    return _layout(fig, title=f"{_metric_title(result)} by {attr_a} × {attr_b} (⚑ flagged; grey: below support "
                              f"or no rows)", width=width, height=max(300, 38 * len(la) + 150))


def noise_band(result, *, width: int | None = None) -> go.Figure:
    """Every tested slice's metric against its size, with the band a slice of that size
    would fall in by chance if it were like the whole table; flagged slices stand out."""
    t = result.tested()
    fig = go.Figure()
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
                x=part["n"], y=part["metric_value"], mode="markers", name=label, text=part["slice"],
                marker={"symbol": symbol, "size": size, "color": colour, "opacity": 0.8},
                hovertemplate="%{text}<br>n=%{x}<br>value %{y:.4f}<extra></extra>"))
    fig.update_xaxes(type="log", title="slice size (rows, log scale)", gridcolor=PALETTE["grid"])
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
    fig = go.Figure()
    excluded = g["excluded"].to_numpy(dtype=bool)
    below = g["below_four_fifths"].to_numpy(dtype=bool)
    colours = np.where(below, PALETTE["flag"], np.where(excluded, PALETTE["rest"], PALETTE["calm"]))
    labels = [f"{grp}{' (reference)' if ref else ''}{' (left out: small)' if ex else ''}"
              for grp, ref, ex in zip(g["group"], g["is_reference"], excluded)]
    fig.add_trace(go.Bar(
        x=labels, y=g["selection_rate"], marker={"color": colours},
        error_y={"type": "data", "array": g["selection_rate_high"] - g["selection_rate"],
                 "arrayminus": g["selection_rate"] - g["selection_rate_low"], "color": PALETTE["ink"]},
        text=[f"{v:.1%}" + (" ▼ below 4/5" if b else "") for v, b in zip(g["selection_rate"], below)],
        textposition="inside", insidetextanchor="middle", textfont={"color": "white"},
        hovertemplate="%{x}<br>selection rate %{y:.3f}<extra></extra>", showlegend=False))
    ref = g[g["is_reference"]]
    if len(ref):
        r = float(ref["selection_rate"].iloc[0])
        fig.add_hline(y=0.8 * r, line={"color": PALETTE["flag"], "dash": "dash"},
                      annotation_text=f"four-fifths of reference ({0.8 * r:.1%})", annotation_position="top left")
    fig.update_yaxes(title="selection rate (favourable outcome)", tickformat=".0%", gridcolor=PALETTE["grid"])
    fig.update_xaxes(type="category")
    return _layout(fig, title=f"Selection rate by {attribute}", width=width, height=380)


def error_rate_balance(fair_groups: pd.DataFrame, attribute: str, *, width: int | None = None) -> go.Figure:
    """True-positive rate against false-positive rate per group, with intervals on both axes."""
    g = fair_groups[(fair_groups["attribute"] == attribute)]
    fig = go.Figure(go.Scatter(
        x=g["fpr"], y=g["tpr"], mode="markers+text", text=g["group"], textposition="top center",
        marker={"size": 11, "color": PALETTE["ink"], "symbol": "circle"},
        error_x={"type": "data", "array": g["fpr_high"] - g["fpr"], "arrayminus": g["fpr"] - g["fpr_low"],
                 "color": PALETTE["calm"]},
        error_y={"type": "data", "array": g["tpr_high"] - g["tpr"], "arrayminus": g["tpr"] - g["tpr_low"],
                 "color": PALETTE["calm"]},
        hovertemplate="%{text}<br>FPR %{x:.3f}<br>TPR %{y:.3f}<extra></extra>"))
    fig.update_xaxes(title="false-positive rate", gridcolor=PALETTE["grid"])
    fig.update_yaxes(title="true-positive rate", gridcolor=PALETTE["grid"])
    return _layout(fig, title=f"Error-rate balance by {attribute}", width=width, height=380)


__all__ = ["PALETTE", "top_slices", "confusion", "pair_heatmap", "noise_band", "worst_pair", "selection_rates",
           "error_rate_balance"]
