"""Slices of three attributes on the page (AppTest, the real engine): the table, the slice-kind
filter and the triples' counts are those of ``audit.run(..., max_order=3)`` with the settings the
widgets show."""
import pandas as pd

import audit
from test_page import RANKED, app, ranked_table, submit, w


def test_three_attributes_on_the_page_equal_the_engines_triples(demo_df):
    at = app().run()
    assert not at.exception, at.exception
    w(at, "selectbox", "max_order").set_value(3)
    submit(at)
    exp_res = audit.run(demo_df, label="delinquent", score="p_delinquent", max_order=3)
    got = ranked_table(at)
    exp = exp_res.ranked()[RANKED].rename(columns={"metric_value": "error_rate"})
    pd.testing.assert_frame_equal(got.reset_index(drop=True), exp.reset_index(drop=True), check_dtype=False)
    assert (got["order"] == 3).any()
    # the slice-kind filter offers three attributes and keeps only them
    kind = next(r for r in at.radio if r.key == "filter_order")
    assert "three attributes" in kind.options
    kind.set_value("three attributes").run()
    assert not at.exception, at.exception
    only = ranked_table(at)
    assert len(only) == int((exp["order"] == 3).sum()) and (only["order"] == 3).all()
    # the page says how many triples were considered, pruned and tested, as the engine counted them
    tri = exp_res.method["triples"]
    text = " ".join(x.value for x in list(at.caption) + list(at.markdown) + list(at.info))
    assert f"{tri['possible']:,}" in text and f"{tri['tested']:,}" in text, tri
