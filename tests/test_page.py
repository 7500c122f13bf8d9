"""The page through Streamlit's AppTest, driving the real engine."""
import os

import pandas as pd
from streamlit.testing.v1 import AppTest

import audit
from conftest import ROOT, random_table

APP = os.path.join(ROOT, "ui", "app.py")
RANKED = ["rank", "slice", "order", "n", "metric_value", "metric_low", "metric_high", "rest_value", "diff",
          "diff_low", "diff_high", "p_value", "q_value", "flagged"]


def app():
    return AppTest.from_file(APP, default_timeout=180)


def ranked_table(at):
    frames = [d.value for d in at.dataframe]
    return next(f for f in frames if "rank" in f.columns and "slice" in f.columns)


def test_demo_runs_and_table_equals_engine(demo_df):
    at = app().run()
    assert not at.exception
    assert any("not a finding of discrimination" in i.value for i in at.info)
    got = ranked_table(at)
    exp = audit.run(demo_df, label="delinquent", score="p_delinquent").ranked()[RANKED]
    exp = exp.rename(columns={"metric_value": "error_rate"})
    pd.testing.assert_frame_equal(got.reset_index(drop=True), exp.reset_index(drop=True), check_dtype=False)
    labels = [b.label for b in at.get("download_button")]
    assert {"slices.csv", "summary.json", "report.html"} <= set(labels)
    charts = at.get("plotly_chart")
    assert len(charts) >= 5


def test_upload_settings_and_filters_drive_the_engine(tmp_path):
    df = random_table(n=3000, seed=12, effect=0.3)
    at = app().run()
    at.file_uploader(key="upload").set_value(("mine.csv", df.to_csv(index=False).encode(), "text/csv")).run()
    assert not at.exception
    assert at.selectbox(key="label").value == "y" and at.selectbox(key="score").value == "p"
    at.selectbox(key="metric").set_value("recall")
    at.number_input(key="min_support").set_value(50)
    at.selectbox(key="correction").set_value("holm")
    at.button[0].click().run()
    assert not at.exception
    exp = audit.run(df, label="y", score="p", metric="recall", min_support=50, correction="holm",
                    attributes=["region", "plan", "age"]).ranked()[RANKED].rename(columns={"metric_value": "recall"})
    got = ranked_table(at)
    pd.testing.assert_frame_equal(got.reset_index(drop=True), exp.reset_index(drop=True), check_dtype=False)
    at.checkbox(key="filter_flagged").check().run()
    assert ranked_table(at)["flagged"].all()
    at.radio(key="filter_order").set_value("pair").run()
    assert (ranked_table(at)["order"] == 2).all()
    at.multiselect(key="filter_attrs").set_value(["plan"]).run()
    t = ranked_table(at)
    assert t["slice"].str.contains("plan=").all()


def test_bad_file_shows_a_message_not_an_exception():
    at = app().run()
    at.file_uploader(key="upload").set_value(("bad.csv", b"y,p,p\n0,0.1,0.2\n", "text/csv")).run()
    assert not at.exception
    assert any("column name 'p' more than once" in e.value for e in at.error)
    at.file_uploader(key="upload").set_value(("three.csv", b"y,p,g\n0,0.1,a\n1,0.2,b\n2,0.3,c\n", "text/csv")).run()
    assert not at.exception
    assert any("label column 'y' has 3 distinct values" in e.value for e in at.error)


def test_fairness_view(demo_df):
    at = app().run()
    at.multiselect(key="protected").set_value(["sex", "age_band"])
    at.selectbox(key="favorable").set_value("0")
    at.button[0].click().run()
    assert not at.exception
    assert any(h.value.endswith("Group fairness") for h in at.header)
    labels = [b.label for b in at.get("download_button")]
    assert "fairness.csv" in labels
    frames = [d.value for d in at.dataframe]
    assert any("impact_ratio" in f.columns for f in frames)
