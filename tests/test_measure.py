"""Metrics of whole-table and slice rows against scikit-learn on the same rows."""
import numpy as np
import pandas as pd
import pytest
from sklearn import metrics as skm

import audit
from conftest import slice_mask
from audit.stats.measure import count_frame, metric_values


def test_every_metric_matches_sklearn_for_random_slices(demo_df):
    res = audit.run(demo_df, label="delinquent", score="p_delinquent")
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
        assert row["specificity"] == pytest.approx(tn / (tn + fp), rel=1e-12)


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
