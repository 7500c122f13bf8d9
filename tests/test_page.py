"""The page through Streamlit's AppTest, driving the real engine.

Every test checks that what a widget shows is what the numbers below it were computed from:
the expected numbers come from a direct ``audit.run`` call with the settings the widgets show.
"""
import os
import re

import numpy as np
import pandas as pd
import pytest
from streamlit.testing.v1 import AppTest

import audit
from conftest import ROOT, random_table
from ui.wording import md

APP = os.path.join(ROOT, "ui", "app.py")
RANKED = ["rank", "slice", "order", "n", "metric_value", "metric_low", "metric_high", "rest_value", "diff",
          "diff_low", "diff_high", "p_value", "q_value", "flagged"]


def app():
    return AppTest.from_file(APP, default_timeout=180)


def w(at, kind: str, name: str):
    """The one widget of ``kind`` whose key is ``name`` or starts with ``name-`` (keys carry what they depend on)."""
    hits = [x for x in getattr(at, kind) if x.key == name or (x.key or "").startswith(name + "-")]
    assert len(hits) == 1, (name, [x.key for x in getattr(at, kind)])
    return hits[0]


def submit(at):
    next(b for b in at.button if b.label == "Run the audit").click().run()
    assert not at.exception, at.exception
    return at


def ranked_table(at):
    frames = [d.value for d in at.dataframe]
    return next(f for f in frames if "rank" in f.columns and "slice" in f.columns)


def metric_box(at, label):
    return next(m.value for m in at.metric if m.label == label)


def open_charts(at):
    """Open every chart section (as a click on each would), then rerun."""
    from ui.sections import CHART_KEYS

    for k in CHART_KEYS:
        at.session_state[k] = True
    at.run()
    assert not at.exception, at.exception
    return at


def open_findings(at):
    """Open every finding's box (as a click on each would), then rerun."""
    for e in at.expander:
        if e.label.startswith("Finding "):
            at.session_state[e.proto.id.split("-", 2)[2]] = True   # the id ends with the box's key
    at.run()
    assert not at.exception, at.exception
    return at


def charts_by_key(at) -> dict:
    import json

    return {c.key: json.loads(c.proto.spec) for c in at.get("plotly_chart")}


def confusion_counts(at, title: str) -> list[list[int]]:
    """The counts of the confusion table shown under ``title``."""
    from ui.sections import table_counts

    heads = [m.value for m in at.markdown]
    assert f"**{title}**" in heads, heads
    # Each confusion table follows its bold title; tables appear in page order.
    titles = [h for h in heads if h.startswith("**Confusion matrix") or h.startswith("**In the ")]
    return table_counts(at.table[titles.index(f"**{title}**")].value)


def upload(at, name, df):
    at.file_uploader(key="upload").set_value((name, df.to_csv(index=False).encode(), "text/csv")).run()
    assert not at.exception, at.exception
    return at


def churn_table(n=3000, seed=14):
    """Seeded noise shaped like a churn model's test predictions: an identifier, a two-valued
    attribute (sex) before the label, a predicted-label column, and the probability."""
    rng = np.random.default_rng(seed)
    sex = rng.choice(["female", "male"], n)
    senior = rng.choice(["no", "yes"], n, p=[0.8, 0.2])
    contract = rng.choice(["Month-to-month", "One year", "Two year"], n, p=[0.5, 0.25, 0.25])
    tenure = rng.integers(0, 72, n)
    y = (rng.random(n) < np.where(contract == "Month-to-month", 0.4, 0.1)).astype(int)
    p = np.clip(np.where(y == 1, rng.beta(4, 3, n), rng.beta(2, 5, n)), 0, 1).round(4)
    flip = (senior == "yes") & (rng.random(n) < 0.3)
    p = np.where(flip, 1 - p, p).round(4)
    return pd.DataFrame({"customer_id": [f"C{i:05d}" for i in rng.permutation(n)], "sex": sex,
                         "senior_citizen": senior, "contract": contract, "tenure": tenure,
                         "churned": np.where(y == 1, "yes", "no"), "churn_pred": np.where(p >= 0.5, "yes", "no"),
                         "p_churn": p})


# ----------------------------------------------------------------------------- demo
def test_demo_runs_and_table_equals_engine(demo_df):
    at = app().run()
    assert not at.exception
    assert any("not a finding of discrimination" in i.value for i in at.info)
    got = ranked_table(at)
    # The engine itself skips applicant_id as an identifier: the page's preselection is the same set.
    exp_res = audit.run(demo_df, label="delinquent", score="p_delinquent")
    exp = exp_res.ranked()[RANKED].rename(columns={"metric_value": "error_rate"})
    pd.testing.assert_frame_equal(got.reset_index(drop=True), exp.reset_index(drop=True), check_dtype=False)
    assert w(at, "multiselect", "attributes").value == [a.name for a in exp_res.attributes]
    labels = [b.label for b in at.get("download_button")]
    assert {"slices.csv", "summary.json", "report.html"} <= set(labels)
    # The findings' selection-adjusted level, 1 - R*alpha/m (Benjamini & Yekutieli 2005, JASA 100:71-81),
    # printed as the terminal and the report print it.
    tested = exp_res.ranked()
    r = int((tested["q_value"] <= 0.05).sum())
    assert any(f"widened to {1 - r * 0.05 / len(tested):.2%} to allow" in x.value for x in at.markdown)
    # The first view draws no chart (the browser's heaviest work); the confusion matrices are tables
    # with the engine's counts, and each chart section, once opened, draws its chart.
    assert len(at.get("plotly_chart")) == 0
    o = exp_res.overall
    assert confusion_counts(at, "Confusion matrix, all rows") == [[o["tn"], o["fp"]], [o["fn"], o["tp"]]]
    picked = w(at, "selectbox", "slice_pick").value
    s, rest = exp_res.slice(picked), exp_res.rest_counts(picked)
    n = int(s["n"])
    assert confusion_counts(at, f"In the slice (n={n:,})") == [[s["tn"], s["fp"]], [s["fn"], s["tp"]]]
    assert confusion_counts(at, f"In the rest (n={rest['n']:,})") == [[rest["tn"], rest["fp"]],
                                                                      [rest["fn"], rest["tp"]]]
    open_charts(at)
    assert {"top_chart", "heatmap", "noise"} <= set(charts_by_key(at))
    assert any("applicant\\_id" in c.value and "identifier" in c.value for c in at.caption)
    assert any("150 MB" in c.value and "refused" in c.value for c in at.caption)  # the upload limit, said in the page


def test_overall_table_shows_auc_and_brier_to_four_decimals(demo_df):
    at = app().run()
    overall = at.dataframe[0]
    assert set(overall.value["metric"]) >= {"roc_auc", "brier", "log_loss"}
    spec = overall.proto.columns  # the column configuration sent to the browser, as JSON
    assert '"%.4f"' in spec and "value" in spec


# ----------------------------------------------------------------------------- a new file (issue 14, 1)
def test_upload_shows_the_new_files_guesses_on_first_render():
    df = churn_table()
    at = upload(app().run(), "churn.csv", df)
    # The first render after the upload already shows the new file's guesses (no demo columns).
    assert w(at, "selectbox", "label").value == "churned"      # from p_churn's name, not the first 2-valued column
    assert w(at, "selectbox", "score").value == "p_churn"
    assert w(at, "selectbox", "pred").value == "(none)"
    attrs = w(at, "multiselect", "attributes").value
    assert attrs == ["sex", "senior_citizen", "contract", "tenure"]   # no identifier, no predicted label
    assert "churn_pred" in w(at, "multiselect", "attributes").options
    assert any("churn\\_pred" in c.value and "predicted label" in c.value for c in at.caption)
    assert w(at, "selectbox", "positive").options == ["(infer)", "no", "yes"]
    # ... and the numbers below were computed from exactly those settings.
    exp = audit.run(df, label="churned", score="p_churn", attributes=attrs)
    assert metric_box(at, "Slices tested") == f"{exp.status_counts()['tested']:,}"
    got = ranked_table(at)
    pd.testing.assert_frame_equal(got.reset_index(drop=True),
                                  exp.ranked()[RANKED].rename(columns={"metric_value": "error_rate"})
                                  .reset_index(drop=True), check_dtype=False)


def test_second_upload_replaces_every_choice():
    at = upload(app().run(), "churn.csv", churn_table())
    w(at, "selectbox", "metric").set_value("recall")
    submit(at)
    other = random_table(n=1500, seed=3)
    upload(at, "other.csv", other)
    assert w(at, "selectbox", "label").value == "y" and w(at, "selectbox", "score").value == "p"
    assert w(at, "multiselect", "attributes").value == ["region", "plan", "age"]
    assert w(at, "selectbox", "metric").value == "error_rate"   # settings of the old file are forgotten
    exp = audit.run(other, label="y", score="p", attributes=["region", "plan", "age"])
    pd.testing.assert_frame_equal(ranked_table(at).reset_index(drop=True),
                                  exp.ranked()[RANKED].rename(columns={"metric_value": "error_rate"})
                                  .reset_index(drop=True), check_dtype=False)


def test_statistical_settings_carry_over_to_a_new_file_and_drive_its_audit():
    # Support, test level, correction and interval name no column: they keep their value from file to
    # file, and the new file's numbers are computed with the values shown (checked against the engine).
    at = upload(app().run(), "churn.csv", churn_table())
    w(at, "number_input", "min_support").set_value(50)
    w(at, "number_input", "alpha").set_value(0.01)
    w(at, "selectbox", "correction").set_value("holm")
    w(at, "selectbox", "level").set_value(0.9)
    submit(at)
    other = random_table(n=1500, seed=3)
    upload(at, "other.csv", other)
    shown = {k: w(at, kind, k).value for kind, k in [("number_input", "min_support"), ("number_input", "alpha"),
                                                     ("selectbox", "correction"), ("selectbox", "level")]}
    assert shown == {"min_support": 50, "alpha": 0.01, "correction": "holm", "level": 0.9}
    exp = audit.run(other, label="y", score="p", attributes=["region", "plan", "age"], min_support=50, alpha=0.01,
                    correction="holm", level=0.9)
    pd.testing.assert_frame_equal(ranked_table(at).reset_index(drop=True),
                                  exp.ranked()[RANKED].rename(columns={"metric_value": "error_rate"})
                                  .reset_index(drop=True), check_dtype=False)
    assert metric_box(at, "Flagged") == f"{exp.status_counts().get('flagged', 0):,}"
    # The settings sit in a closed box; the line under the overview states the ones the numbers used.
    assert {"Support, slices, test level, correction, intervals and bins",
            "Group fairness (optional): protected attributes and the favourable outcome"} <= {e.label for e in at.expander}
    used = next(c.value for c in at.caption if c.value.startswith("Audited with:"))
    assert "at least 50 rows per slice and 10 in the metric's denominator" in used
    assert "adjusted p ≤ 0.01 (Holm" in used and "intervals at 90%" in used and "5 quantile bins" in used


def test_label_change_refreshes_the_positive_class_and_attributes():
    df = churn_table()
    df["retained"] = np.where(df["churned"] == "yes", "gone", "kept")
    at = upload(app().run(), "churn.csv", df)
    w(at, "selectbox", "label").set_value("retained").run()
    assert not at.exception
    # Without another run: the positive class offers the new label's values, and the old label is an attribute choice.
    assert w(at, "selectbox", "positive").options == ["(infer)", "gone", "kept"]
    assert "churned" in w(at, "multiselect", "attributes").options
    assert "retained" not in w(at, "multiselect", "attributes").options
    assert any("Positive class" in e.value for e in at.error)  # gone/kept cannot be inferred: the page says where
    w(at, "selectbox", "positive").set_value("gone")
    w(at, "multiselect", "attributes").set_value(["sex", "contract"])
    submit(at)
    assert not at.error
    exp = audit.run(df, label="retained", score="p_churn", positive="gone", attributes=["sex", "contract"])
    assert metric_box(at, "Slices tested") == f"{exp.status_counts()['tested']:,}"
    assert any("positive class: **gone**" in c.value for c in at.caption)


def test_predicted_label_column_can_be_chosen():
    df = churn_table()
    at = upload(app().run(), "churn.csv", df)
    w(at, "selectbox", "pred").set_value("churn_pred").run()
    assert not at.exception and not at.error
    assert "churn_pred" not in w(at, "multiselect", "attributes").options
    exp = audit.run(df, label="churned", score="p_churn", pred="churn_pred",
                    attributes=["sex", "senior_citizen", "contract", "tenure"])
    assert exp.prediction_source != "threshold"
    assert metric_box(at, "Flagged") == f"{exp.status_counts()['flagged']:,}"
    assert any("Prediction: the column **churn\\_pred**" in c.value for c in at.caption)


def test_a_predicted_label_chosen_as_an_attribute_is_sliced_as_the_page_says():
    df = churn_table()
    at = upload(app().run(), "churn.csv", df)
    note = next(c.value for c in at.caption if c.value.startswith("Not preselected: "))
    assert "**churn\\_pred**" in note and "the audit slices a predicted-label column you choose" in note
    box = w(at, "multiselect", "attributes")
    attrs = box.value + ["churn_pred"]
    box.set_value(attrs)
    at.number_input(key="threshold").set_value(0.3)   # churn_pred is p_churn >= 0.5: at 0.5 it restates the prediction
    submit(at)
    exp = audit.run(df, label="churned", score="p_churn", attributes=attrs, threshold=0.3)
    assert "churn_pred" not in exp.skipped and exp.slices["slice"].str.startswith("churn_pred=").any()
    assert ranked_table(at)["slice"].tolist() == exp.ranked()["slice"].tolist()


# ----------------------------------------------------------------------------- a changed metric and filters
def _panel_n(at) -> int:
    line = next(m.value for m in at.markdown if " · n = **" in m.value)
    return int(re.search(r"n = \*\*([\d,]+)\*\*", line).group(1).replace(",", ""))


def test_a_slice_the_user_never_picked_follows_the_new_run(demo_df):
    # The picker shows the page's guess, the top finding; after a run with other settings it shows
    # the new run's top finding, not the old one's (found by a trial: an echo of the new run shown first).
    at = app().run()
    first = audit.run(demo_df, label="delinquent", score="p_delinquent")
    assert w(at, "selectbox", "slice_pick").value == first.findings()["slice"].iloc[0]
    w(at, "selectbox", "metric").set_value("recall")
    submit(at)
    exp = audit.run(demo_df, label="delinquent", score="p_delinquent", metric="recall")
    assert exp.findings()["slice"].iloc[0] != first.findings()["slice"].iloc[0]   # the guess moved
    pick = w(at, "selectbox", "slice_pick")
    assert pick.value == exp.findings()["slice"].iloc[0]
    assert _panel_n(at) == int(exp.slice(pick.value)["n"])


def test_metric_change_keeps_the_slice_picker_and_its_panel_in_step(demo_df):
    at = app().run()
    pick = w(at, "selectbox", "slice_pick")
    chosen = pick.options[3]
    pick.set_value(chosen).run()
    w(at, "selectbox", "metric").set_value("recall")
    submit(at)
    exp = audit.run(demo_df, label="delinquent", score="p_delinquent", metric="recall")
    pick = w(at, "selectbox", "slice_pick")
    assert pick.value == chosen                       # the user's slice is kept while it exists
    assert pick.options[: len(exp.ranked())] == exp.ranked()["slice"].tolist()
    assert _panel_n(at) == int(exp.slice(pick.value)["n"])
    # Heatmap pickers and the chart they drive agree (the chart section opened).
    open_charts(at)
    ha, hb = w(at, "selectbox", "heat_a").value, w(at, "selectbox", "heat_b").value
    import json

    heat = next(json.loads(c.proto.spec) for c in at.get("plotly_chart") if c.key == "heatmap")
    assert {heat["layout"]["xaxis"]["title"]["text"], heat["layout"]["yaxis"]["title"]["text"]} == {ha, hb}
    w(at, "selectbox", "heat_a").set_value("channel").run()
    heat = next(json.loads(c.proto.spec) for c in at.get("plotly_chart") if c.key == "heatmap")
    hb = w(at, "selectbox", "heat_b").value
    assert hb != "channel"
    assert {heat["layout"]["xaxis"]["title"]["text"], heat["layout"]["yaxis"]["title"]["text"]} == {"channel", hb}


def test_filters_drive_the_table_the_chart_and_the_picker():
    import json

    df = random_table(n=3000, seed=12, effect=0.3)
    at = upload(app().run(), "mine.csv", df)
    w(at, "selectbox", "metric").set_value("recall")
    w(at, "number_input", "min_support").set_value(50)
    w(at, "selectbox", "correction").set_value("holm")
    submit(at)
    exp = audit.run(df, label="y", score="p", metric="recall", min_support=50, correction="holm",
                    attributes=["region", "plan", "age"]).ranked()[RANKED].rename(columns={"metric_value": "recall"})
    pd.testing.assert_frame_equal(ranked_table(at).reset_index(drop=True), exp.reset_index(drop=True),
                                  check_dtype=False)
    at.checkbox(key="filter_flagged").check().run()
    assert ranked_table(at)["flagged"].all()
    at.checkbox(key="filter_flagged").uncheck().run()
    at.radio(key="filter_order").set_value("pair").run()
    assert (ranked_table(at)["order"] == 2).all()
    w(at, "multiselect", "filter_attrs").set_value(["plan"]).run()
    t = ranked_table(at)
    assert len(t) and t["slice"].str.contains("plan=").all()
    open_charts(at)
    top = next(json.loads(c.proto.spec) for c in at.get("plotly_chart") if c.key == "top_chart")
    drawn = [y for tr in top["data"] if tr["name"] in ("flagged slice", "not flagged") for y in tr["y"]]
    assert drawn and all("plan=" in y and " &amp; " in y for y in drawn)
    pick = w(at, "selectbox", "slice_pick")
    assert all("plan=" in o and " & " in o for o in pick.options)
    assert _panel_n(at) == int(t.set_index("slice").loc[pick.value, "n"]) if pick.value in set(t["slice"]) else True


# ----------------------------------------------------------------------------- what the page says (issue 14, 2)
def test_errors_name_the_widget_to_change():
    at = upload(app().run(), "churn.csv", churn_table())
    w(at, "selectbox", "score").set_value("(none)").run()
    assert not at.exception
    # The prediction column was the page's guess (none while a probability was given): without a
    # probability it follows the new guess, the predicted-label column.
    assert w(at, "selectbox", "pred").value == "churn_pred" and not at.error
    w(at, "selectbox", "pred").set_value("(none)").run()
    msg = " ".join(e.value for e in at.error)
    assert "Predicted probability" in msg and "Predicted label column" in msg
    assert "--" not in msg and "=..." not in msg


def test_a_probability_column_out_of_range_is_named_before_any_run():
    # A trial found the page silently passing over such a column and slicing by it instead.
    df = churn_table()
    df.loc[41, "p_churn"] = 1.7          # data row 42, as the engine counts rows
    at = upload(app().run(), "churn.csv", df)
    assert not at.exception
    said = [c.value for c in at.caption if "Named like a probability" in c.value]
    assert len(said) == 1 and "p\\_churn" in said[0] and "1\\.7 at data row 42" in said[0]
    assert w(at, "selectbox", "score").value == "(none)"
    assert "p_churn" not in w(at, "multiselect", "attributes").value
    # The engine names the same value and row when the column is chosen.
    with pytest.raises(audit.AuditInputError, match="value 1.7 at data row 42"):
        audit.run(df, label="churned", score="p_churn")


def test_bad_files_show_a_message_not_an_exception():
    at = app().run()
    at.file_uploader(key="upload").set_value(("bad.csv", b"y,p,p\n0,0.1,0.2\n", "text/csv")).run()
    assert not at.exception
    assert any("column name 'p' more than once" in e.value for e in at.error)
    at.file_uploader(key="upload").set_value(("three.csv", b"y,p,g\n" + b"0,0.1,a\n1,0.2,b\n2,0.3,c\n" * 20,
                                              "text/csv")).run()
    assert not at.exception
    msg = " ".join(e.value for e in at.error)
    # Three classes and one probability column: the page asks for one per class, naming the widgets.
    assert "Probability of class 0" in msg and "How the model's prediction is given" in msg
    assert "--" not in msg and "=" not in msg.replace("\\", "")
    many = "y,p,g\n" + "".join(f"{i % 25},0.{i % 9},{'ab'[i % 2]}\n" for i in range(200))
    at.file_uploader(key="upload").set_value(("many.csv", many.encode(), "text/csv")).run()
    w(at, "selectbox", "label").set_value("y").run()
    w(at, "multiselect", "attributes").set_value(["g"])
    submit(at)
    msg = " ".join(e.value for e in at.error)
    assert "label column 'y' has 25 distinct values" in msg.replace("\\", "").lower() and "True label column" in msg
    assert "--" not in msg and "score=" not in msg.replace("\\", "")


def test_reference_group_on_a_missing_attribute_is_reported(demo_df):
    at = app().run()
    w(at, "multiselect", "protected").set_value(["sex"])
    w(at, "selectbox", "favorable").set_value("0")
    w(at, "text_input", "reference").input("sexx=female")
    submit(at)
    assert any("Reference groups" in e.value and "sexx" in e.value and "not a protected attribute" in e.value
               for e in at.error)


def test_fairness_view_table_is_formatted(demo_df):
    at = app().run()
    w(at, "multiselect", "protected").set_value(["sex", "age_band"])
    w(at, "selectbox", "favorable").set_value("0")
    submit(at)
    assert any(h.value.endswith("Group fairness") for h in at.header)
    assert "fairness.csv" in [b.label for b in at.get("download_button")]
    fair = next(d for d in at.dataframe if "impact_ratio" in d.value.columns)
    t = fair.value
    assert pd.api.types.is_float_dtype(t["selection_q"])           # numbers, shown with a format, not text
    assert not t["exclusion_reason"].astype(str).isin(["None", "nan"]).any()
    assert '"%.2e"' in fair.proto.columns and '"%.4f"' in fair.proto.columns
    exp = audit.run(demo_df, label="delinquent", score="p_delinquent", protected=["sex", "age_band"], favorable="0")
    # Predicted 0 (not delinquent) is favourable, and 1 is the positive class: the page says which it is.
    assert exp.fairness.favorable_is_positive is False
    assert any("Favourable outcome: predicted" in m.value and "(the negative prediction)" in m.value
               for m in at.markdown)
    g = exp.fairness.groups
    np.testing.assert_allclose(t["selection_rate"].to_numpy(), g.loc[g["attribute"] == "sex", "selection_rate"])


def _strings(node):
    if isinstance(node, str):
        yield node
    elif isinstance(node, dict):
        for v in node.values():
            yield from _strings(v)
    elif isinstance(node, list):
        for v in node:
            yield from _strings(v)


def test_markup_in_values_is_shown_as_text():
    import json

    df = random_table(n=2000, seed=8, effect=0.4)
    df["region"] = df["region"].replace({"r2": "<b>bold</b>", "r1": '<a href="javascript:alert(1)">click</a>'})
    at = open_charts(upload(app().run(), "markup.csv", df))
    assert {"top_chart", "heatmap", "noise"} <= set(charts_by_key(at))
    seen = []
    for c in at.get("plotly_chart"):
        texts = list(_strings(json.loads(c.proto.spec)))
        assert not any("<b>bold" in x or "<a href" in x for x in texts), c.key
        seen += [x for x in texts if "&lt;b&gt;bold&lt;/b&gt;" in x]
    assert seen  # Plotly draws the entities as the characters < and >, as the tables show them


# ----------------------------------------------------------------------------- several sessions (issue 14, 3)
def _arr(v):
    """A Plotly array from a figure's JSON (plain list, or typed array sent as base64)."""
    import base64

    if isinstance(v, dict) and "bdata" in v:
        return np.frombuffer(base64.b64decode(v["bdata"]), dtype=v["dtype"])
    return np.asarray(v)


def test_first_view_draws_no_chart_and_opened_charts_follow_the_result(demo_df):
    """Charts are drawn only in opened sections; once open, they are built from the result the
    tables around them show, and follow it when the settings change."""
    from audit.faces.charts import text

    at = app().run()
    assert len(at.get("plotly_chart")) == 0
    assert {e.label for e in at.expander} >= {"Chart: the worst slices shown, with their intervals and the rest's value",
                                              "Chart: the metric for every pair of values of two attributes",
                                              "Chart: each tested slice against the band of chance"}
    assert not [c for c in at.code]                     # the command line too waits for its section
    open_charts(at)
    w(at, "selectbox", "metric").set_value("recall")
    submit(at)                                          # sections stay open; their charts follow the new result
    exp = audit.run(demo_df, label="delinquent", score="p_delinquent", metric="recall")
    drawn = charts_by_key(at)
    shown = ranked_table(at)
    want = {f"#{int(r)} {text(sl)}": v for r, sl, v in shown[["rank", "slice", "recall"]].head(15).itertuples(index=False)}
    got = {y: x for tr in drawn["top_chart"]["data"] if tr["name"] in ("flagged slice", "not flagged")
           for y, x in zip(tr["y"], _arr(tr["x"]))}
    assert got == pytest.approx(want)
    noise = [tr for tr in drawn["noise"]["data"] if tr["name"] in ("flagged", "not flagged")]
    tested = exp.tested()
    assert sum(len(tr["text"]) for tr in noise) == len(tested)
    flagged = next(tr for tr in noise if tr["name"] == "flagged")
    assert sorted(_arr(flagged["y"])) == pytest.approx(sorted(tested.loc[tested["flagged"], "metric_value"]))
    assert "recall" in drawn["noise"]["layout"]["title"]["text"]
    ha, hb = w(at, "selectbox", "heat_a").value, w(at, "selectbox", "heat_b").value
    heat = drawn["heatmap"]["layout"]
    assert {heat["xaxis"]["title"]["text"], heat["yaxis"]["title"]["text"]} == {ha, hb}
    assert any(c.language == "bash" and "fissure audit" in c.value and "--metric recall" in c.value
               for c in (open_cli(at).code))


def open_cli(at):
    at.session_state["cli_open"] = True
    at.run()
    assert not at.exception
    return at


def test_interval_level_box_drives_the_audit(demo_df):
    at = app().run()
    box = w(at, "selectbox", "level")
    assert box.value == 0.95 and box.options == ["80%", "90%", "95%", "99%"]
    box.set_value(0.9)
    submit(at)
    assert w(at, "selectbox", "level").value == 0.9
    exp = audit.run(demo_df, label="delinquent", score="p_delinquent", level=0.9)
    pd.testing.assert_frame_equal(ranked_table(at).reset_index(drop=True),
                                  exp.ranked()[RANKED].rename(columns={"metric_value": "error_rate"})
                                  .reset_index(drop=True), check_dtype=False)
    overall = at.dataframe[0].value
    assert {"90% low", "90% high"} <= set(overall.columns)


def test_fairness_chart_section_draws_the_groups_in_the_table(demo_df):
    at = app().run()
    w(at, "multiselect", "protected").set_value(["sex", "age_band"])
    w(at, "selectbox", "favorable").set_value("0")
    submit(at)
    assert not [c for c in at.get("plotly_chart") if c.key in ("fair_sel", "fair_eo")]
    open_charts(at)
    w(at, "selectbox", "fair_attr").set_value("age_band").run()
    t = next(d for d in at.dataframe if "impact_ratio" in d.value.columns).value
    drawn = charts_by_key(at)
    bars = drawn["fair_sel"]["data"][0]
    np.testing.assert_allclose(_arr(bars["y"]), t["selection_rate"].to_numpy())
    assert [x.split(" (")[0] for x in bars["x"]] == t["group"].tolist()
    exp = audit.run(demo_df, label="delinquent", score="p_delinquent", protected=["sex", "age_band"], favorable="0")
    # Predicted 0 (not delinquent) is favourable, and 1 is the positive class: the page says which it is.
    assert exp.fairness.favorable_is_positive is False
    assert any("Favourable outcome: predicted" in m.value and "(the negative prediction)" in m.value
               for m in at.markdown)
    g = exp.fairness.groups
    np.testing.assert_allclose(_arr(drawn["fair_eo"]["data"][0]["y"]), g.loc[g["attribute"] == "age_band", "tpr"])


def test_upload_parsed_once_and_report_built_only_on_request():
    from ui import memo

    df = churn_table(n=1500, seed=2)
    memo.TABLES.clear()
    memo.REPORTS.clear()
    before = memo.TABLES.misses
    at = upload(app().run(), "churn.csv", df)
    w(at, "selectbox", "metric").set_value("recall")
    submit(at)
    at.checkbox(key="filter_flagged").check().run()
    # demo + the upload: two reads however many reruns
    assert memo.TABLES.misses - before == 2
    assert len(memo.REPORTS) == 0                      # nothing built until a download is clicked
    assert "report.html" in [b.label for b in at.get("download_button")]
    assert memo.TABLES.bytes <= memo.TABLES.max_bytes


def test_the_byte_limit_evicts_least_recently_used():
    from ui.memo import SizedCache

    c = SizedCache("t", 3000)
    c.put("a", b"x" * 1000)
    c.put("b", b"x" * 1000)
    c.get("a")
    c.put("c", b"x" * 1500)
    assert c.get("b") is None and c.get("a") is not None and c.get("c") is not None
    c.put("huge", b"x" * 5000)                          # larger than the whole limit: not kept
    assert c.get("huge") is None and c.bytes <= 3000
    made = []
    assert c.get_or_make("k", lambda: made.append(1) or b"v") == b"v"
    assert c.get_or_make("k", lambda: made.append(1) or b"v") == b"v" and made == [1]


def test_guesses_from_names_before_position():
    from ui import intake

    df = pd.DataFrame({"sex": ["f", "m"] * 50, "Exited": [0, 1] * 50, "prob_exited": np.linspace(0.01, 0.99, 100),
                       "model_decision": [0, 1] * 50, "region": list("abcd") * 25})
    t = intake.Table(df=df, source=None, columns=intake._profile(df, fast=False))
    assert intake.guess_score(t) == "prob_exited"
    assert intake.guess_label(t, "prob_exited") == "Exited"
    assert intake.pred_like_columns(t, "Exited") == ["model_decision"]
    keep, skip = intake.screen(t, ["sex", "model_decision", "region"], label="Exited")
    assert keep == ["sex", "region"] and "predicted label" in skip["model_decision"]
    df2 = pd.DataFrame({"sex": ["f", "m"] * 50, "outcome": ["no", "yes"] * 50, "p": np.linspace(0, 1, 100)})
    t2 = intake.Table(df=df2, source=None, columns=intake._profile(df2, fast=False))
    assert intake.guess_label(t2) == "outcome"


def test_fast_reader_gives_the_engines_table(demo_csv, tmp_path):
    """The page's pyarrow reader and the engine's reader give the same audit."""
    from audit.core.read import read_table
    from ui import intake

    data = open(demo_csv, "rb").read()
    t = intake._read(data, "predictions.csv", intake.digest(data))
    assert t.reader == "pyarrow"
    ref, _ = read_table(data, name="predictions.csv")
    a = audit.run(t.df, label="delinquent", score="p_delinquent")
    b = audit.run(ref, label="delinquent", score="p_delinquent")
    pd.testing.assert_frame_equal(a.slices, b.slices)
    odd = b"when,y,p,g\n2024-01-05,0,0.1,a\n2024-01-06,1,0.9,b\n,1,0.4,a\n"  # dates stay text, empty is missing
    t = intake._read(odd, "odd.csv", "x")
    ref, _ = read_table(odd, name="odd.csv")
    assert t.df["when"].astype(object).where(t.df["when"].notna(), None).tolist() == \
        ref["when"].astype(object).where(ref["when"].notna(), None).tolist()


# ----------------------------------------------------------------------------- findings first (issue 10, 3)
def test_findings_lead_with_their_echoes_folded_under_them():
    df = churn_table()
    at = upload(app().run(), "churn.csv", df)
    exp = audit.run(df, label="churned", score="p_churn", attributes=["sex", "senior_citizen", "contract", "tenure"])
    want = exp.findings()
    assert len(want) >= 2 and want["echoes"].sum() > 0
    tabs = [t.label for t in at.tabs]
    assert tabs[:2] == ["Findings and their echoes", "Every tested slice, ranked"]
    got = next(d.value for d in at.dataframe if "finding_rank" in d.value.columns)
    assert got["slice"].tolist() == want["slice"].tolist()
    assert got["echoes"].tolist() == want["echoes"].tolist()
    np.testing.assert_allclose(got["diff_low_adj"], want["diff_low_adj"])
    # One expander per finding, saying how many echoes are folded under it, holding exactly those slices.
    labels = [e.label for e in at.expander if e.label.startswith("Finding ")]
    assert len(labels) == len(want)
    for lab, (_, r) in zip(labels, want.iterrows()):
        assert f"{int(r['echoes'])} echo" in lab
    first = want.iloc[0]
    assert not [d for d in at.dataframe if "flag_rank" in d.value.columns]   # filled only when opened
    open_findings(at)
    assert [e.label for e in at.expander if e.label.startswith("Finding ")] == labels
    echo_tables = [d.value for d in at.dataframe if "flag_rank" in d.value.columns]
    assert echo_tables[0]["slice"].tolist() == exp.echoes(first["slice"])["slice"].tolist()
    assert set(echo_tables[0]["slice"]).isdisjoint(want["slice"])   # echoes are not findings
    # The full ranked list is one click away (the second tab) and is the engine's ranking.
    pd.testing.assert_frame_equal(ranked_table(at).reset_index(drop=True),
                                  exp.ranked()[RANKED].rename(columns={"metric_value": "error_rate"})
                                  .reset_index(drop=True), check_dtype=False)


# ----------------------------------------------------------------------------- fairness (issue 11, 1 and 3)
def test_favourable_outcome_must_be_chosen_before_fairness_runs():
    df = churn_table()
    at = upload(app().run(), "churn.csv", df)
    assert w(at, "selectbox", "favorable").value == "(choose)"       # no silent default
    w(at, "multiselect", "protected").set_value(["senior_citizen"])
    submit(at)
    msg = " ".join(e.value for e in at.error)
    assert "Favourable predicted outcome for the person" in msg and "no default" in msg
    assert not any(h.value.endswith("Group fairness") for h in at.header)
    assert not at.metric                                              # nothing was computed with protected attributes
    w(at, "selectbox", "favorable").set_value("no")
    submit(at)
    assert not at.error
    assert any(h.value.endswith("Group fairness") for h in at.header)


def test_fairness_flags_show_criterion_and_direction_in_the_reports_words():
    from audit.faces.prose import fairness_findings, finding_text
    from ui.wording import md

    df = churn_table()
    at = upload(app().run(), "churn.csv", df)
    w(at, "multiselect", "protected").set_value(["senior_citizen", "contract"])
    w(at, "selectbox", "favorable").set_value("no")
    submit(at)
    exp = audit.run(df, label="churned", score="p_churn", attributes=["sex", "senior_citizen", "contract", "tenure"],
                    protected=["senior_citizen", "contract"], favorable="no")
    found = fairness_findings(exp)
    assert len(found) and found["disadvantaged"].any() and not found["disadvantaged"].all()
    text = "\n".join(m.value for m in at.markdown)
    assert f"**{len(found)} fairness flags**" in text
    for _, r in found.iterrows():                    # the same sentence as report.html, with its direction
        assert md(finding_text(r)) in text
    assert "lower selection rate than 'no'" in finding_text(found.iloc[0])


# ----------------------------------------------------------------------------- three or more classes (issue 12)
def _routing(n=20_000):
    from demo.routing import generate

    return generate(rows=n)  # the multi-class demo, its own seed


def test_three_classes_end_to_end():
    import json

    from audit.faces.prose import class_drivers

    df = _routing()
    at = upload(app().run(), "routing.csv", df)
    assert w(at, "selectbox", "label").value == "desk"
    assert w(at, "selectbox", "how").value == "one probability column per class"
    boxes = {b.label: b.value for b in at.selectbox if (b.key or "").startswith("class_score_")}
    assert boxes == {"Probability of class approve": "p_approve", "Probability of class decline": "p_decline",
                     "Probability of class refer": "p_refer"}
    assert not [b for b in at.selectbox if (b.key or "").startswith("positive")]     # no positive class
    opts = w(at, "selectbox", "metric").options
    assert [o.split(" — ")[0] for o in opts] == ["error_rate", "accuracy", "macro_f1", "log_loss", "brier"] + [
        f"{b}:{k}" for k in ("approve", "decline", "refer") for b in ("recall", "precision", "f1")]
    assert w(at, "multiselect", "favorable_set").options == ["approve", "decline", "refer"]
    w(at, "selectbox", "metric").set_value("recall:refer")
    w(at, "multiselect", "protected").set_value(["age_band"])
    w(at, "multiselect", "favorable_set").set_value(["approve"])
    submit(at)
    assert not at.error
    score = {"approve": "p_approve", "decline": "p_decline", "refer": "p_refer"}
    attrs = w(at, "multiselect", "attributes").value
    assert attrs == ["channel", "region", "product", "age_band"]
    exp = audit.run(df, label="desk", score=score, attributes=attrs, metric="recall:refer", protected=["age_band"],
                    favorable=["approve"])
    assert exp.fairness.favorable_is_positive is None  # three classes: the favourable set, one versus the rest
    assert any("Favourable outcome: predicted" in m.value and "one versus the rest for this set" in m.value
               for m in at.markdown)
    pd.testing.assert_frame_equal(ranked_table(at).reset_index(drop=True),
                                  exp.ranked()[RANKED].rename(columns={"metric_value": "recall:refer"})
                                  .reset_index(drop=True), check_dtype=False)
    # Per-class table beside the averages: the engine's per-class figures.
    pc = next(d.value for d in at.dataframe if "support" in d.value.columns and "class" in d.value.columns)
    for _, r in pc.iterrows():
        want = exp.overall["per_class"][r["class"]]
        assert r["support"] == want["support"] and r["predicted"] == want["predicted"]
        assert r["recall"] == pytest.approx(want["recall"])
    avg = next(d.value for d in at.dataframe if "metric" in d.value.columns and "value" in d.value.columns)
    assert {"macro_f1", "micro_f1", "weighted_f1", "log_loss", "brier"} <= set(avg["metric"])
    # K x K confusion of the whole table: counts from scikit-learn's confusion_matrix on the same rows.
    from sklearn.metrics import confusion_matrix

    pred = df[["p_approve", "p_decline", "p_refer"]].to_numpy().argmax(axis=1)
    cm = confusion_matrix(df["desk"], np.array(["approve", "decline", "refer"])[pred],
                          labels=["approve", "decline", "refer"])
    assert confusion_counts(at, "Confusion matrix, all rows") == cm.tolist()
    # The planted slice: pick it, see its K x K counts and the classes that drive it.
    w(at, "selectbox", "slice_pick").set_value("channel=partner").run()
    assert not at.exception
    part = df[df["channel"] == "partner"]
    cm_s = confusion_matrix(part["desk"], np.array(["approve", "decline", "refer"])[pred[df["channel"] == "partner"]],
                            labels=["approve", "decline", "refer"])
    assert confusion_counts(at, f"In the slice (n={len(part):,})") == cm_s.tolist()
    assert confusion_counts(at, f"In the rest (n={len(df) - len(part):,})") == (cm - cm_s).tolist()
    # The per-class chart, once its section is opened, is drawn for the picked slice.
    open_charts(at)
    bars = charts_by_key(at)["class_bars"]
    assert "channel=partner" in json.dumps(bars)
    drivers = next(d.value for d in at.dataframe if "gap" in d.value.columns)
    pd.testing.assert_frame_equal(drivers.reset_index(drop=True), class_drivers(exp, "channel=partner"),
                                  check_dtype=False)
    assert drivers.iloc[0]["class"] == "refer" and drivers.iloc[0]["rate"] == "recall"   # the planted weakness
    open_findings(at)
    assert any("Driven by: recall of 'refer'" in m.value for m in at.markdown)      # under its finding too
    assert any("approve" in m.value and "Favourable outcome" in m.value for m in at.markdown)


def test_three_classes_from_a_predicted_label_column():
    df = _routing(3000)
    probs = df[["p_approve", "p_decline", "p_refer"]].to_numpy()
    df["desk_pred"] = np.array(["approve", "decline", "refer"])[probs.argmax(axis=1)]
    df = df.drop(columns=["p_approve", "p_decline", "p_refer"])
    at = upload(app().run(), "routing.csv", df)
    w(at, "selectbox", "label").set_value("desk").run()
    assert w(at, "selectbox", "how").value == "a predicted-label column"
    assert w(at, "selectbox", "pred_multi").value == "desk_pred"
    opts = [o.split(" — ")[0] for o in w(at, "selectbox", "metric").options]
    assert "log_loss" not in opts and "macro_f1" in opts and "f1:refer" in opts
    submit(at)
    assert not at.error
    exp = audit.run(df, label="desk", pred="desk_pred", attributes=w(at, "multiselect", "attributes").value)
    assert metric_box(at, "Flagged") == f"{exp.status_counts()['flagged']:,}"
    from ui.wording import md

    assert any("Prediction: " + md("the predicted-label column 'desk_pred'") in c.value for c in at.caption)


# ----------------------------------------------------------------------------- a finished run's folder (issue 13)
def test_output_folder_is_browsed_without_recomputing(tmp_path, monkeypatch):
    from audit.faces.export import save

    df = churn_table()
    res = audit.run(df, label="churned", score="p_churn", attributes=["sex", "senior_citizen", "contract", "tenure"],
                    protected=["senior_citizen"], favorable="no")
    save(res, str(tmp_path / "run1"), report=False)
    at = app().run()
    calls = []
    monkeypatch.setattr(audit.engine, "run", lambda *a, **k: calls.append(1))
    at.text_input(key="run_folder").input(str(tmp_path / "run1")).run()
    assert not at.exception and not at.error
    assert any(h.value == "A finished run, read from its folder" for h in at.header)
    got = next(d.value for d in at.dataframe if "finding_rank" in d.value.columns)
    assert got["slice"].tolist() == res.findings()["slice"].tolist()
    assert got["echoes"].tolist() == res.findings()["echoes"].tolist()
    ranked = ranked_table(at)
    assert ranked["slice"].tolist() == res.ranked()["slice"].tolist()
    np.testing.assert_allclose(ranked["q_value"], res.ranked()["q_value"], rtol=1e-9)
    from audit.faces.prose import fairness_findings, finding_text
    from ui.wording import md

    text = "\n".join(m.value for m in at.markdown)
    for _, r in fairness_findings(res).iterrows():
        assert md(finding_text(r)) in text
    assert metric_box(at, "Findings") == f"{len(res.findings()):,}"
    assert calls == []


def test_output_folder_of_a_chunked_run_states_the_auc_bound(tmp_path, credit):
    from audit.faces.export import save

    src = tmp_path / "credit.csv"
    credit.to_csv(src, index=False)
    res = audit.run(str(src), label="Status", score="p_bad", positive="bad", chunk_rows=1000)
    bound = res.method["roc_auc_error_bound"]
    assert bound is not None and bound > 0
    save(res, str(tmp_path / "run1"), report=False)
    at = app().run()
    at.text_input(key="run_folder").input(str(tmp_path / "run1")).run()
    assert not at.exception and not at.error
    assert any("ROC AUC is approximate" in c.value and f"within {bound:.2g}" in c.value for c in at.caption)


def test_output_folder_path_is_guarded(tmp_path):
    from audit.faces.export import save

    df = churn_table(n=1500)
    save(audit.run(df, label="churned", score="p_churn", attributes=["sex", "contract"]), str(tmp_path / "ok"),
         report=False)
    (tmp_path / "linked").mkdir()
    (tmp_path / "linked" / "summary.json").write_bytes((tmp_path / "ok" / "summary.json").read_bytes())
    os.symlink("/etc/passwd", tmp_path / "linked" / "slices.csv")
    (tmp_path / "foreign").mkdir()
    (tmp_path / "foreign" / "slices.csv").write_text("slice,order,finding\n")
    (tmp_path / "foreign" / "summary.json").write_text('{"tool": {"name": "other"}}')
    at = app().run()
    for path, why in [("/etc", "no slices.csv"), (str(tmp_path / "linked"), "is a link"),
                      (str(tmp_path / "foreign"), "not written by Fissure"),
                      (str(tmp_path / "ok" / "slices.csv"), "is not a folder"),
                      (str(tmp_path / "nowhere"), "is not a folder")]:
        at.text_input(key="run_folder").input(path).run()
        assert not at.exception, path
        msg = " ".join(e.value for e in at.error).replace("\\", "")
        assert "Output folder of a finished run" in msg and why in msg, (path, msg)
        assert any(h.value.endswith("The whole model first") for h in at.header)   # the page goes on with the demo
    from ui import folder_view

    with pytest.raises(folder_view.Refused, match="runs folder"):
        folder_view.check_folder(str(tmp_path / "ok"), root=str(tmp_path / "elsewhere"))
    assert folder_view.check_folder(str(tmp_path / "ok"), root=str(tmp_path)) == os.path.realpath(tmp_path / "ok")


def test_attribute_screen_is_the_engines_decision():
    """The page's preselection equals the attributes the engine keeps when given every candidate."""
    from ui import intake

    df = churn_table(n=2000)
    df["constant"] = "x"
    df["empty"] = np.nan
    df["row_no"] = np.arange(len(df))
    t = intake.Table(df=df, source=None, columns=intake._profile(df, fast=False))
    cands = [c for c in df.columns if c not in ("churned", "p_churn", "churn_pred")]
    keep, skip = intake.screen(t, cands, label="churned")
    res = audit.run(df, label="churned", score="p_churn", attributes=cands)
    assert keep == [a.name for a in res.attributes]
    assert skip == res.skipped
    # The same through the page's fast reader, where a column of many ids stays plain text.
    t = intake._read(df.to_csv(index=False).encode(), "t.csv", "x")
    assert t.reader == "pyarrow" and t.columns["customer_id"].distinct is None
    keep, skip = intake.screen(t, cands, label="churned")
    assert keep == [a.name for a in res.attributes] and skip == res.skipped


def test_screen_words_an_identifier_past_the_text_cap_as_the_engine_does():
    # Past TEXT_CAP distinct values the page counts exactly instead of keeping every value; the skip
    # reason is still the engine's, word for word.
    from audit.core.encoding import TEXT_CAP
    from ui import intake

    n = TEXT_CAP + 500
    df = pd.DataFrame({"ref": [f"R{i:07d}" for i in range(n)], "g": np.where(np.arange(n) % 3, "a", "b"),
                       "y": np.arange(n) % 2, "p": (np.arange(n) % 7) / 7})
    t = intake._read(df.to_csv(index=False).encode(), "t.csv", "x")
    keep, skip = intake.screen(t, ["ref", "g"], label="y")
    res = audit.run(df, label="y", score="p", attributes=["ref", "g"])
    assert keep == [a.name for a in res.attributes] == ["g"]
    assert skip == res.skipped and f"{n} distinct values in {n} rows" in skip["ref"]


def test_slice_verdict_says_why_a_worse_slice_is_not_flagged(demo_df):
    at = app().run()
    res = audit.run(demo_df, label="delinquent", score="p_delinquent")
    t = res.slices
    quiet = t[(t["status"] == "tested") & t["worse_than_rest"] & ~t["flagged"].astype(bool)]
    pick = quiet["slice"].iloc[0]
    w(at, "selectbox", "slice_pick").set_value(pick).run()
    line = next(m.value for m in at.markdown if m.value.startswith("Audited metric **"))
    assert line.endswith(f"— not flagged: adjusted p is above {res.config.alpha:g}.")
    assert float(quiet["q_value"].iloc[0]) > res.config.alpha   # the engine's own q-value, as the line says
    # Under the form, the page says when its choices take effect.
    assert any("take effect when you press **Run the audit**" in c.value for c in at.caption)


def test_a_slice_below_support_says_so_in_words_with_its_code():
    df = churn_table()
    at = upload(app().run(), "churn.csv", df)
    w(at, "selectbox", "metric").set_value("recall")
    submit(at)
    t = audit.run(df, label="churned", score="p_churn", metric="recall").slices
    small = t[t["status"] == "below_support"].iloc[0]
    w(at, "selectbox", "slice_pick").set_value(small["slice"]).run()
    line = next(m.value for m in at.markdown if m.value.startswith("Status: "))
    # the words, then the code and the reason the slice's row in slices.csv carries
    assert line.startswith("Status: **not tested: too little support** (`below_support` in slices.csv): "
                           + md(small["status_reason"]))


def test_a_reference_group_too_small_for_ratios_names_both_widgets(demo_df):
    at = app().run()
    w(at, "multiselect", "protected").set_value(["sex", "age_band"])
    w(at, "selectbox", "favorable").set_value("0")
    w(at, "number_input", "min_share").set_value(0.3)
    w(at, "text_input", "reference").set_value("age_band=65+")
    submit(at)
    rows = int((demo_df["age_band"] == "65+").sum())   # the group's rows, counted with pandas
    msg = " ".join(e.value for e in at.error)
    assert f"has {rows:,} rows" in msg and "minimum group share 0\\.3" in msg
    assert "**Reference groups**" in msg and "**Leave groups under this share out of ratios**" in msg


def test_reference_of_a_pair_follows_the_protected_order(demo_df):
    # The engine names a pair in the order the protected attributes were chosen; the page checks the same.
    at = app().run()
    w(at, "multiselect", "protected").set_value(["sex", "age_band"])
    w(at, "selectbox", "favorable").set_value("0")
    w(at, "text_input", "reference").input("age_band & sex=35-44 & female")
    submit(at)
    msg = " ".join(e.value for e in at.error)
    assert "not a protected attribute or a pair of them" in msg and "'sex & age\\_band'" in msg
    w(at, "text_input", "reference").input("sex & age_band=female & 35-44")
    submit(at)
    assert not at.error
    exp = audit.run(demo_df, label="delinquent", score="p_delinquent", protected=["sex", "age_band"], favorable="0",
                    reference={"sex & age_band": "female & 35-44"})
    assert exp.fairness.references["sex & age_band"] == "sex=female & age_band=35-44"
