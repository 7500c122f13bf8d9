"""The faces of an audit with three or more classes: the command line end to end in this process
(files, summary.json against the shipped schema, report sections, terminal lines), the classes
that drive a flagged slice checked against scikit-learn's per-class recall and precision on the
slice's and the rest's rows, and class names that look like markup or spreadsheet formulas."""
import csv
import io
import json
import os

import numpy as np
import pandas as pd
import pytest
from sklearn import metrics as skm

import audit
from audit.faces import charts
from audit.faces.export import build_files
from audit.faces.prose import class_drivers, method_notes, terminal_summary
from audit.faces.report import build_html
from conftest import ROOT

CLASSES = ["approve", "decline", "refer"]
SCORE = {c: f"p_{c}" for c in CLASSES}


def routed(n=4000, seed=0, names=CLASSES):
    """A routing model (approve / decline / refer) with one planted weakness: in branch 'east',
    most true declines are routed to refer (seeded)."""
    rng = np.random.default_rng(seed)
    y = rng.choice(names, n, p=[0.5, 0.2, 0.3])
    logits = rng.normal(0, 1, (n, 3)) + 1.2 * (y[:, None] == np.array(names)[None, :])
    P = np.exp(logits) / np.exp(logits).sum(axis=1, keepdims=True)
    branch = rng.choice(["north", "south", "east"], n)
    weak = (branch == "east") & (y == names[1]) & (rng.random(n) < 0.6)
    P[weak] = [0.1, 0.1, 0.8]
    df = pd.DataFrame({"outcome": y, "branch": branch, "channel": rng.choice(["web", "broker"], n)})
    for i, c in enumerate(names):
        df[f"p_{i}"] = P[:, i]
    return df


def _score(names=CLASSES):
    return {c: f"p_{i}" for i, c in enumerate(names)}


def _pred(df, names=CLASSES):
    return np.array(names)[df[[f"p_{i}" for i in range(len(names))]].to_numpy().argmax(axis=1)]


@pytest.fixture(scope="module")
def routed_df():
    return routed()


def test_cli_end_to_end(fissure_main, routed_df, tmp_path):
    jsonschema = pytest.importorskip("jsonschema")
    path = tmp_path / "routed.csv"
    routed_df.to_csv(path, index=False)
    out = tmp_path / "out"
    run = fissure_main("audit", path, "--label", "outcome", "--score", "approve=p_0,decline=p_1,refer=p_2",
                       "--protected", "branch", "--favorable", "approve,refer", "--out", out)
    assert run.returncode == 0, run.stderr
    assert sorted(os.listdir(out)) == [".fissure-run", "fairness.csv", "fissure.toml", "report.html", "slices.csv",
                                       "summary.json"]
    summary = json.load(open(out / "summary.json"))
    jsonschema.validate(summary, json.load(open(os.path.join(ROOT, "audit", "faces", "summary.schema.json"))))
    ld = summary["label_definition"]
    assert ld["classes"] == CLASSES and ld["positive"] is None and ld["prediction_source"] == "most probable class"
    assert "tie goes to the class that sorts first" in ld["prediction"]
    yt, yp = routed_df["outcome"].to_numpy(), _pred(routed_df)
    # reference: scikit-learn's confusion_matrix and per-class precision/recall on the whole table
    assert summary["overall"]["confusion"] == skm.confusion_matrix(yt, yp, labels=CLASSES).tolist()
    pr, rc, _, sup = skm.precision_recall_fscore_support(yt, yp, labels=CLASSES, average=None)
    for i, c in enumerate(CLASSES):
        assert summary["overall"]["per_class"][c]["recall"] == pytest.approx(rc[i], abs=1e-12)
        assert summary["overall"]["per_class"][c]["support"] == sup[i]

    lines = run.stdout.splitlines()
    assert lines[0].endswith("3 classes (approve, decline, refer); prediction: most probable class")
    assert "macro F1" in lines[1] and "recall" not in lines[1]  # recall only per class for K >= 3
    assert "confusion matrix, whole table (rows: true class, columns: predicted):" in lines
    conf = skm.confusion_matrix(yt, yp, labels=CLASSES)
    at = lines.index("confusion matrix, whole table (rows: true class, columns: predicted):")
    assert lines[at + 1].split() == CLASSES
    for i, c in enumerate(CLASSES):
        assert lines[at + 2 + i].split() == [c] + [f"{v:,}" for v in conf[i]]
    assert any(x.startswith("per class:") for x in lines)
    assert any("fairness (branch; favourable outcome: predicted 'approve or refer')" in x for x in lines)

    html = open(out / "report.html", encoding="utf-8").read()
    for needle in ("Per class, one versus the rest", "Confusion matrix, whole table", "Which classes drive each "
                   "flagged slice", "most probable class of each row", "no positive class", "fig-per-class"):
        assert needle in html, needle
    sl = pd.read_csv(out / "slices.csv")
    assert "recall_decline" in sl.columns and "tp" not in sl.columns


def test_planted_weakness_is_driven_by_decline_recall(routed_df):
    res = audit.run(routed_df, label="outcome", score=_score())
    assert "branch=east" in set(res.flagged()["slice"])
    d = class_drivers(res, "branch=east")
    assert (d.loc[0, "class"], d.loc[0, "rate"]) == ("decline", "recall")
    # reference: scikit-learn's per-class recall and precision on the slice's rows and on the rest's
    yt, yp = routed_df["outcome"].to_numpy(), _pred(routed_df)
    m = routed_df["branch"].to_numpy() == "east"
    for _, r in d.iterrows():
        f = skm.recall_score if r["rate"] == "recall" else skm.precision_score
        assert r["slice_value"] == pytest.approx(f(yt[m], yp[m], labels=[r["class"]], average=None)[0], abs=1e-12)
        assert r["rest_value"] == pytest.approx(f(yt[~m], yp[~m], labels=[r["class"]], average=None)[0], abs=1e-12)
    assert (d["gap"] < 0).all() and d["gap"].is_monotonic_increasing


@pytest.mark.parametrize("metric", ["macro_f1", "recall:decline", "log_loss", "brier", "accuracy"])
def test_every_multiclass_metric_gives_all_faces(routed_df, metric):
    res = audit.run(routed_df, label="outcome", score=_score(), metric=metric)
    notes = method_notes(res)
    assert notes["metric_title"] == res.metric.title
    if metric == "macro_f1":
        assert "multinomial delta method" in notes["test"] and "delta method" in notes["interval"]["macro_f1"]
    files = build_files(res)
    assert {"slices.csv", "summary.json", "report.html"} <= set(files)
    text = terminal_summary(res)
    assert "confusion matrix, whole table" in text


def test_hostile_class_names_are_text_everywhere():
    names = ["=1+1", "<b>x</b>", "plain & co"]
    df = routed(n=2000, seed=3, names=names)
    res = audit.run(df, label="outcome", score=_score(names), protected="branch", favorable="plain & co")
    files = build_files(res)
    html = files["report.html"].decode()
    assert "<b>x</b>" not in html and "&lt;b&gt;x&lt;/b&gt;" in html
    assert "=1+1" in html and "plain &amp; co" in html
    header = next(csv.reader(io.StringIO(files["slices.csv"].decode())))
    assert "precision_=1+1" in header and "recall_<b>x</b>" in header and "true_=1+1_pred_plain & co" in header
    # OWASP CSV-injection guidance: no header or cell of any file starts a formula
    for name in ("slices.csv", "fairness.csv"):
        for row in csv.reader(io.StringIO(files[name].decode())):
            for cell in row:
                assert not cell.startswith(("=", "+", "@")) or cell.startswith("'"), (name, cell)
    summary = json.loads(files["summary.json"])
    assert summary["label_definition"]["classes"] == sorted(names)
    fig = charts.class_confusion(res.overall["confusion"], res.classes)
    assert "predicted &lt;b&gt;x&lt;/b&gt;" in list(fig.data[0].x)
    assert "<b>x</b>" in terminal_summary(res)  # the terminal shows names as given


def test_neutralised_header_only_when_it_looks_like_a_formula():
    from audit.faces.export import frame_csv

    out = frame_csv(pd.DataFrame({"n": [1], "=cmd": ["-x"], "-0.5": [2]})).decode()
    assert out.splitlines()[0] == "n,'=cmd,-0.5"


def _steered(fav, seed=5, n=3000):
    """Three classes, the favourable set ``fav`` predicted for each branch's rows by its own rates
    (seeded): P(predicted in fav | true in fav) and P(predicted in fav | true not in fav) are 0.8 and
    0.2 in 'north', 0.55 and 0.05 in 'south' (the favourable outcome given less often to every
    true outcome), 0.95 and 0.45 in 'east' (more often)."""
    rng = np.random.default_rng(seed)
    rates = {"north": (0.8, 0.2), "south": (0.55, 0.05), "east": (0.95, 0.45)}
    others = [c for c in CLASSES if c not in fav]
    rows = []
    for branch, (tpr, fpr) in rates.items():
        y = rng.choice(CLASSES, n, p=[0.4, 0.3, 0.3])
        in_f = np.isin(y, fav)
        to_f = rng.random(n) < np.where(in_f, tpr, fpr)
        pred = np.where(to_f, np.where(in_f, y, rng.choice(list(fav), n)),
                        np.where(in_f, rng.choice(others, n), y))
        rows.append(pd.DataFrame({"outcome": y, "decision": pred, "branch": branch}))
    return pd.concat(rows, ignore_index=True)


@pytest.mark.parametrize("fav", [("approve",), ("approve", "refer")])
def test_three_class_fairness_directions_follow_the_definitions(fav):
    import html as html_mod
    import re

    from audit.faces.prose import fairness_findings, finding_text

    df = _steered(fav)
    res = audit.run(df, label="outcome", pred="decision", protected="branch", favorable=list(fav),
                    reference={"branch": "north"}, max_order=1)
    fr = res.fairness
    assert fr.favorable_is_positive is None  # no positive class among three: the favourable set plays it
    assert fr.favorable == " or ".join(fav)
    found = fairness_findings(res)
    in_f, to_f = df["outcome"].isin(fav).to_numpy(), df["decision"].isin(fav).to_numpy()
    b = df["branch"].to_numpy()

    def rates(g):
        # reference: scikit-learn, one versus rest for the favourable set
        m = b == g
        return {"selection": to_f[m].mean(), "tpr": skm.recall_score(in_f[m], to_f[m]),
                "fpr": 1 - skm.recall_score(~in_f[m], ~to_f[m]), "ppv": skm.precision_score(in_f[m], to_f[m])}

    ref = rates("north")
    fav_words, other_words = " or ".join(fav), f"other than {' or '.join(fav)}"
    for group in ("south", "east"):
        got = rates(group)
        mine = found[(found["group"] == group) & (found["criterion"] != "four_fifths")].set_index("criterion")
        assert set(mine.index) == {"selection", "tpr", "fpr", "ppv"}
        for crit, v in got.items():
            r = mine.loc[crit]
            assert r["value"] == pytest.approx(v, abs=1e-12) and r["reference_value"] == pytest.approx(ref[crit])
            higher = v > ref[crit]
            assert bool(r["higher"]) == higher
            # The definitions, from the person's side: a group is worse off when its members are given
            # the favourable prediction less often than the reference's members with the same true
            # outcome (selection: every row; TPR: actual members of the set; FPR: actual others), or
            # when its favourable predictions are held to a higher bar (higher PPV).
            worse = higher if crit == "ppv" else not higher
            assert bool(r["disadvantaged"]) == worse, (group, crit)
            assert r["reading"] == ("at a disadvantage" if worse else "in the group's favour")
            more = "more" if higher else "less"
            assert r["meaning"] == {
                "selection": f"predicted '{fav_words}' (favourable) {more} often",
                "tpr": f"among actual '{fav_words}', given the favourable '{fav_words}' {more} often",
                "fpr": f"among actual '{other_words}', given the favourable '{fav_words}' {more} often",
                "ppv": (f"its '{fav_words}' (favourable) predictions are {more} often borne out"
                        f" ({'a higher' if higher else 'a lower'} bar)"),
            }[crit]
    # the planted directions: 'south' is given the favourable outcome less often, 'east' more often
    assert found.loc[found["group"] == "south", "disadvantaged"].all()
    assert not found.loc[(found["group"] == "east"), "disadvantaged"].any()
    assert "four_fifths" in set(found.loc[found["group"] == "south", "criterion"])  # 29 CFR 1607.4(D)
    # the report states the same rule for the set and marks each flag the same way
    html_text = build_html(res, created="2026-01-01T00:00:00+00:00")
    fair = html_text[html_text.index("<section id='fairness'>"):html_text.index("<section id='limits'>")]
    words = re.sub(r"\s+", " ", html_mod.unescape(re.sub(r"<[^>]+>", " ", fair)))
    assert (f"when its members get the favourable prediction ({fav_words}) less often than the reference group's "
            "members with the same true outcome (lower selection rate; lower TPR; lower FPR), or when its "
            f"{fav_words} predictions are held to a higher bar (higher PPV)") in words
    for _, r in found.iterrows():
        assert finding_text(r) in words
    summary = json.loads(build_files(res)["summary.json"])
    assert summary["fairness"]["favorable_is_positive"] is None
    jsonschema = pytest.importorskip("jsonschema")
    jsonschema.validate(summary, json.load(open(os.path.join(ROOT, "audit", "faces", "summary.schema.json"))))
