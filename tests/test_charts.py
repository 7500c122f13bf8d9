"""Chart builders are pure functions of the result: check what they draw without a browser."""
import html

import numpy as np
import pytest

import audit
from audit.faces import charts
from conftest import random_table, slice_mask


@pytest.fixture(scope="module")
def res():
    return audit.run(random_table(n=2500, seed=21, effect=0.35), label="y", score="p", min_support=130,
                     protected=["region"], favorable="1")


def test_top_slices_draws_intervals_and_rest(res):
    fig = charts.top_slices(res, k=8)
    top = res.ranked().head(8)
    pts = {tr.name: tr for tr in fig.data}
    assert "rest of the rows" in pts
    drawn = sum(len(tr.x) for tr in fig.data if tr.name in ("flagged slice", "not flagged"))
    assert drawn == len(top)
    for tr in fig.data:
        if tr.name in ("flagged slice", "not flagged"):
            names = [html.unescape(y.split(" ", 1)[1]) for y in tr.y]
            sub = top.set_index("slice").loc[names]
            np.testing.assert_allclose(tr.error_x.array, sub["metric_high"] - sub["metric_value"])
            np.testing.assert_allclose(tr.error_x.arrayminus, sub["metric_value"] - sub["metric_low"])
    assert "flagged slice" in pts  # the planted slice is flagged and drawn as such


def test_confusion_grid_shows_counts_and_shares(res):
    o = res.overall
    fig = charts.confusion(o, res.classes)
    z = np.array(fig.data[0].z)
    assert z.tolist() == [[o["tn"], o["fp"]], [o["fn"], o["tp"]]]
    assert f"{o['tp']:,}" in fig.data[0].text[1][1] and "%" in fig.data[0].text[1][1]


def test_pair_heatmap_labels_support_and_small_cells(res):
    fig = charts.pair_heatmap(res, "region", "plan")
    assert fig.data[0].colorbar.title.text == res.metric.title.split(" (")[0]  # the metric in words, as the axes
    assert fig.layout.legend.yanchor == "top" and fig.layout.legend.y < -0.15  # legends sit under the x-axis title
    text = np.array(fig.data[0].text)
    cells = res.slices[(res.slices["attribute_1"] == "region") & (res.slices["attribute_2"] == "plan")]
    small = cells[cells["status"] == "below_support"]
    assert len(small) > 0
    assert sum("below support" in t for t in text.ravel()) == len(small)
    assert all("n=" in t for t in text.ravel() if t != "no rows")
    z = np.array(fig.data[0].z, dtype=float)
    assert np.isnan(z).sum() >= len(small)  # greyed, not coloured like data


def test_noise_band_marks_every_flagged_slice(res):
    fig = charts.noise_band(res)
    flagged = [tr for tr in fig.data if tr.name == "flagged"]
    assert flagged and len(flagged[0].x) == int(res.tested()["flagged"].sum())
    band = fig.data[0]
    assert band.fill == "toself"


def test_fairness_charts(res):
    g = res.fairness.groups
    fig = charts.selection_rates(g, "region")
    ref = g[(g["attribute"] == "region") & g["is_reference"]]["selection_rate"].iloc[0]
    lines = [s for s in fig.layout.shapes if s.type == "line"]
    assert lines and lines[0].y0 == pytest.approx(0.8 * ref)
    eo = charts.error_rate_balance(g, "region")
    assert len(eo.data[0].x) == int((g["attribute"] == "region").sum())


def test_compare_matches_rows_outside_the_slice(res):
    from sklearn.metrics import precision_score, recall_score

    df = random_table(n=2500, seed=21, effect=0.35)
    row = res.slice("region=r2")
    rest = ~slice_mask(df, row)
    y, yhat = df["y"].to_numpy(), (df["p"].to_numpy() >= 0.5).astype(int)
    t = res.compare("region=r2").set_index("metric")
    # reference: scikit-learn on the rows outside the slice
    assert t.loc["recall", "rest"] == pytest.approx(recall_score(y[rest], yhat[rest]))
    assert t.loc["precision", "rest"] == pytest.approx(precision_score(y[rest], yhat[rest]))
    assert t.loc["error_rate", "slice"] == pytest.approx(row["error_rate"])
    assert t.loc["error_rate", "rest_low"] <= t.loc["error_rate", "rest"] <= t.loc["error_rate", "rest_high"]


def _strings(node):
    if isinstance(node, str):
        yield node
    elif isinstance(node, dict):
        for v in node.values():
            yield from _strings(v)
    elif isinstance(node, (list, tuple)):
        for v in node:
            yield from _strings(v)


def test_every_user_string_is_drawn_as_text():
    """Plotly reads <b>, <a href>, <br> in labels; values from the file must not become markup."""
    df = random_table(n=2500, seed=21, effect=0.35)
    hostile = {"r2": "<b>bold</b>", "r1": '<a href="javascript:alert(1)">click</a>', "r0": "A&B"}
    df["region"] = df["region"].replace(hostile)
    df = df.rename(columns={"plan": "<i>plan</i>"})
    r = audit.run(df, label="y", score="p", min_support=130, protected=["region"], favorable="1")
    figs = [charts.top_slices(r, k=30), charts.pair_heatmap(r, "region", "<i>plan</i>"), charts.noise_band(r),
            charts.confusion(r.overall, ("<b>no</b>", "yes")), charts.selection_rates(r.fairness.groups, "region"),
            charts.error_rate_balance(r.fairness.groups, "region")]
    for fig in figs:
        texts = list(_strings(fig.to_plotly_json()))
        for raw in list(hostile.values()) + ["<i>plan</i>", "<b>no</b>"]:
            assert not any(raw in t for t in texts), (fig.layout.title.text, raw)
    joined = " ".join(t for f in figs for t in _strings(f.to_plotly_json()))
    assert "&lt;b&gt;bold&lt;/b&gt;" in joined and "A&amp;B" in joined and "&lt;i&gt;plan&lt;/i&gt;" in joined
    # the page and the report unescape nothing: html.unescape gives back the value exactly
    assert html.unescape(charts.text('<a href="x">&amp;</a>')) == '<a href="x">&amp;</a>'


def test_log_axis_ticks_are_readable(res):
    vals, labels = charts.log_ticks(35, 2400)
    assert vals == [50, 100, 200, 500, 1000, 2000]
    assert labels == ["50", "100", "200", "500", "1,000", "2,000"]
    fig = charts.noise_band(res)
    assert list(fig.layout.xaxis.ticktext) and all(t.replace(",", "").isdigit() for t in fig.layout.xaxis.ticktext)
    assert min(fig.layout.xaxis.tickvals) <= res.tested()["n"].min() * 1.5


def test_heatmap_names_a_shortfall_in_the_metrics_denominator():
    df = random_table(n=2500, seed=21, effect=0.35)
    r = audit.run(df, label="y", score="p", metric="recall", min_support=20, min_metric_support=70)
    fig = charts.pair_heatmap(r, "region", "plan")
    cells = r.slices[(r.slices["attribute_1"] == "region") & (r.slices["attribute_2"] == "plan")]
    den_short = cells[(cells["status"] == "below_support") & (cells["n"] >= 20)]
    assert len(den_short)
    text = [t for row in fig.data[0].text for t in row]
    for _, c in den_short.iterrows():
        assert f"below support<br>n={int(c['n']):,}, {int(c['actual_pos']):,} actual positives" in text
    assert "actual positives" in fig.layout.title.text


def test_top_slices_follows_a_filtered_table(res):
    sub = res.ranked()
    sub = sub[sub["attribute_1"].eq("plan") | sub["attribute_2"].eq("plan")]
    fig = charts.top_slices(res, k=10, ranked=sub)
    drawn = [html.unescape(y.split(" ", 1)[1]) for tr in fig.data if tr.name in ("flagged slice", "not flagged")
             for y in tr.y]
    assert sorted(drawn) == sorted(sub.head(10)["slice"])
