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


def test_numbers_that_are_codes_are_sliced_as_categories_on_the_page():
    # A branch code column (whole numbers, 40 values) is binned by default; chosen as codes, every
    # code is a slice, exactly as audit.run(categorical=[...]) makes them. A row number is skipped
    # as an identifier with the page's widget named, not the API's syntax.
    import numpy as np

    from test_page import upload

    rng = np.random.default_rng(5)
    n = 4000
    y = rng.integers(0, 2, n)
    df = pd.DataFrame({"row_no": np.arange(1, n + 1), "branch_code": rng.integers(100, 140, n),
                       "segment": rng.choice(["retail", "business"], n), "defaulted": y,
                       "p_defaulted": np.clip(np.where(y == 1, rng.beta(4, 3, n), rng.beta(2, 5, n)), 0, 1).round(4)})
    at = upload(app().run(), "branches.csv", df)
    attrs = w(at, "multiselect", "attributes")
    assert "row_no" not in attrs.value and "branch_code" in attrs.value
    skipped = " ".join(c.value for c in at.caption)
    assert "row\\_no" in skipped and "Numbers that are codes" in skipped and "categorical=" not in skipped
    codes = w(at, "multiselect", "categorical")
    assert set(codes.options) >= {"branch_code", "row_no"}
    codes.set_value(["branch_code"])
    submit(at)
    exp = audit.run(df, label="defaulted", score="p_defaulted", attributes=["branch_code", "segment"],
                    categorical=["branch_code"])
    got = ranked_table(at)
    assert len(got) == len(exp.ranked())
    assert set(got["slice"]) == set(exp.ranked()["slice"])
    assert "branch_code=117" in set(got["slice"])  # a code, not a bin
