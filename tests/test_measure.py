"""Metrics of whole-table and slice rows against scikit-learn on the same rows."""
import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn import metrics as skm
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

import audit
from conftest import slice_mask
from audit.stats.measure import count_frame, metric_values


def test_every_metric_matches_sklearn_for_random_slices(demo_df, demo_result):
    res = demo_result
    sl = res.slices
    y = demo_df["delinquent"].to_numpy()
    p = demo_df["p_delinquent"].to_numpy()
    yhat = (p >= 0.5).astype(int)
    rng = np.random.default_rng(5)
    picks = [0] + rng.choice(np.flatnonzero(sl["order"] >= 1), 40, replace=False).tolist()
    for i in picks:
        row = sl.iloc[i]
        mask = slice_mask(demo_df, row)
        yt, yp, ps = y[mask], yhat[mask], p[mask]
        assert row["n"] == mask.sum()
        tn, fp, fn, tp = skm.confusion_matrix(yt, yp, labels=[0, 1]).ravel()
        assert (row["tn"], row["fp"], row["fn"], row["tp"]) == (tn, fp, fn, tp)
        pr, rc, f1, _ = skm.precision_recall_fscore_support(yt, yp, labels=[1], zero_division=np.nan)
        np.testing.assert_allclose([row["precision"], row["recall"], row["f1"]], [pr[0], rc[0], f1[0]], rtol=1e-12)
        f1n = skm.f1_score(yt, yp, pos_label=0, zero_division=np.nan)
        assert row["f1_neg"] == pytest.approx(f1n, rel=1e-12, nan_ok=True)
        assert row["macro_f1"] == pytest.approx(skm.f1_score(yt, yp, average="macro"), rel=1e-12)
        assert row["jaccard"] == pytest.approx(skm.jaccard_score(yt, yp), rel=1e-12)
        assert row["accuracy"] == pytest.approx(skm.accuracy_score(yt, yp), rel=1e-12)
        assert row["log_loss"] == pytest.approx(skm.log_loss(yt, ps, labels=[0, 1]), rel=1e-9)
        assert row["brier"] == pytest.approx(skm.brier_score_loss(yt, ps), rel=1e-9)
        if row["order"] <= 1:
            assert row["roc_auc"] == pytest.approx(skm.roc_auc_score(yt, ps), rel=1e-12)
        # scikit-learn references for the negative-class rates (pos_label=0) and their complements
        spec = skm.recall_score(yt, yp, pos_label=0, zero_division=np.nan)
        assert row["specificity"] == pytest.approx(spec, rel=1e-12, nan_ok=True)
        assert row["fpr"] == pytest.approx(1 - spec, rel=1e-12, abs=1e-15, nan_ok=True)
        assert row["npv"] == pytest.approx(skm.precision_score(yt, yp, pos_label=0, zero_division=np.nan), rel=1e-12,
                                           nan_ok=True)
        assert row["fnr"] == pytest.approx(1 - rc[0], rel=1e-12, abs=1e-15, nan_ok=True)
        assert row["error_rate"] == pytest.approx(skm.zero_one_loss(yt, yp), rel=1e-12, abs=1e-15)
        assert row["selection_rate"] == pytest.approx(yp.mean(), rel=1e-12, abs=1e-15)  # numpy on the raw rows
        assert row["base_rate"] == pytest.approx(yt.mean(), rel=1e-12, abs=1e-15)
        # statsmodels' Wilson interval on the counts the engine reported for each rate
        for name, k, den in [("error_rate", fp + fn, len(yt)), ("recall", tp, tp + fn), ("precision", tp, tp + fp)]:
            if den:
                lo, hi = proportion_confint(k, den, alpha=0.05, method="wilson")
                assert (row[f"{name}_low"], row[f"{name}_high"]) == pytest.approx((lo, hi), abs=1e-12), name
        if row["status"] == "tested":
            rest = ~mask
            k2, n2 = int((yhat[rest] != y[rest]).sum()), int(rest.sum())
            k1, n1 = int(fp + fn), int(mask.sum())
            # statsmodels' Newcombe hybrid score interval for slice minus rest
            lo, hi = confint_proportions_2indep(k1, n1, k2, n2, method="newcomb", compare="diff", alpha=0.05)
            assert (row["diff_low"], row["diff_high"]) == pytest.approx((lo, hi), abs=1e-12)
            # scipy: Pearson chi-square without continuity correction (= pooled z) or Fisher's exact test
            table = [[k1, n1 - k1], [k2, n2 - k2]]
            ref = (stats.chi2_contingency(table, correction=False).pvalue if row["test"] == "z"
                   else stats.fisher_exact(table).pvalue)
            assert row["p_value"] == pytest.approx(ref, rel=1e-9), row["test"]
    # statsmodels' multipletests (Benjamini-Hochberg) over the whole tested family
    tested = sl[sl["status"] == "tested"]
    assert len(tested) == res.family_size
    np.testing.assert_allclose(tested["q_value"], multipletests(tested["p_value"], method="fdr_bh")[1], rtol=1e-12)


def test_undefined_ratios_are_nan_not_zero():
    # Policy (audit.measure): a zero denominator gives NaN. Rows: no predicted positives.
    c = count_frame(np.array([[5, 0, 3, 0]]))  # tn, fp, fn, tp
    v = metric_values(c, None)
    assert np.isnan(v["precision"][0])
    assert v["recall"][0] == 0.0 and v["f1"][0] == 0.0 and v["accuracy"][0] == 5 / 8
    # No positive in truth or prediction: recall, F1 and the macro average are undefined.
    v = metric_values(count_frame(np.array([[7, 0, 0, 0]])), None)
    assert np.isnan(v["recall"][0]) and np.isnan(v["f1"][0]) and np.isnan(v["macro_f1"][0])


def test_auc_with_ties_matches_sklearn():
    y = np.array([0, 1, 0, 1, 1, 0, 0, 1, 0, 1] * 6)
    p = np.array([0.2, 0.2, 0.5, 0.5, 0.9, 0.1, 0.5, 0.7, 0.3, 0.3] * 6)
    g = np.repeat(["a", "b", "c"], 20)
    res = audit.run(pd.DataFrame({"y": y, "p": p, "g": g}), label="y", score="p", min_support=5)
    for v in ["a", "b", "c"]:
        m = g == v
        # reference: sklearn.metrics.roc_auc_score (ties count one half)
        assert res.slice(f"g={v}")["roc_auc"] == pytest.approx(skm.roc_auc_score(y[m], p[m]), rel=1e-12)
    assert res.overall["roc_auc"] == pytest.approx(skm.roc_auc_score(y, p), rel=1e-12)
