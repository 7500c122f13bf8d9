"""The release gate and the fairness flags' directions: the pure functions, and the command line
in-process (one real process only where the shell matters: a pipe closed early)."""
import json
import os
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from conftest import ROOT, random_table
import audit
from audit.faces.gate import evaluate_gate
from audit.faces.prose import disadvantage_when_higher, fairness_findings, fmt_p


def _rows(group, tp, fn, fp, tn):
    y = [1] * (tp + fn) + [0] * (fp + tn)
    yhat = [1] * tp + [0] * fn + [1] * fp + [0] * tn
    return pd.DataFrame({"y": y, "yhat": yhat, "group": group})


def fair_table(seed=0) -> pd.DataFrame:
    """Three groups of 2,000 rows built from chosen confusion counts (shuffled, seeded):

    ========  ====  ====  ====  ====  =========  =====  =====  =====
    group      tp    fn    fp    tn   selection   TPR    FPR    PPV
    ========  ====  ====  ====  ====  =========  =====  =====  =====
    a          800   200   200   800    0.500     0.80   0.20   0.800
    b          500   500    50   950    0.275     0.50   0.05   0.909
    c          700   300   250   750    0.475     0.70   0.25   0.737
    ========  ====  ====  ====  ====  =========  =====  =====  =====

    With 1 favourable, ``a`` is the reference (highest selection rate).
    """
    df = pd.concat([_rows("a", 800, 200, 200, 800), _rows("b", 500, 500, 50, 950), _rows("c", 700, 300, 250, 750)],
                   ignore_index=True)
    rng = np.random.default_rng(seed)
    df["noise"] = rng.choice(["x", "y"], len(df))
    return df.sample(frac=1.0, random_state=seed).reset_index(drop=True)


@pytest.fixture(scope="module")
def fair_result():
    return audit.run(fair_table(), label="y", pred="yhat", attributes=["group", "noise"], protected=["group"],
                     favorable="1", max_order=1)


def test_direction_rule_table():
    # Our stated rule (audit/faces/prose.py): disadvantage = the favourable prediction given less often
    # within the same true outcome, or a higher bar for favourable predictions (PPV).
    assert [disadvantage_when_higher(c, True) for c in ("selection", "tpr", "fpr", "ppv")] == [False, False, False, True]
    assert [disadvantage_when_higher(c, False) for c in ("selection", "tpr", "fpr", "ppv")] == [False, True, True, False]


def test_findings_values_match_scikit_learn_and_directions(fair_result):
    from sklearn.metrics import precision_score, recall_score

    df = fair_table()
    found = fairness_findings(fair_result)
    assert set(found["group"]) == {"b", "c"}
    flagged = fair_result.fairness.groups
    assert set(flagged.loc[flagged["fairness_flag"], "group"]) == set(found["group"])  # every flag explained
    ref = df[df["group"] == "a"]
    for _, r in found.iterrows():
        g = df[df["group"] == r["group"]]
        if r["criterion"] == "tpr":  # scikit-learn: recall = TPR
            assert r["value"] == pytest.approx(recall_score(g["y"], g["yhat"]))
            assert r["reference_value"] == pytest.approx(recall_score(ref["y"], ref["yhat"]))
        if r["criterion"] == "ppv":  # scikit-learn: precision = PPV
            assert r["value"] == pytest.approx(precision_score(g["y"], g["yhat"]))
        if r["criterion"] == "fpr":  # FPR = 1 − recall of the negative class
            assert r["value"] == pytest.approx(1 - recall_score(g["y"], g["yhat"], pos_label=0))
    d = {(r["group"], r["criterion"]): r for _, r in found.iterrows()}
    # b: every criterion at a disadvantage, and 0.275 / 0.5 = 0.55 < 4/5 (29 CFR 1607.4(D)).
    for c in ("selection", "tpr", "fpr", "ppv", "four_fifths"):
        assert d[("b", c)]["disadvantaged"], c
    assert not d[("b", "ppv")]["higher"] is False  # b's PPV is higher: a higher bar, a disadvantage
    # c: lower TPR is a disadvantage; higher FPR and lower PPV favour the group and say so.
    assert d[("c", "tpr")]["disadvantaged"] and d[("c", "tpr")]["direction"] == "lower true-positive rate than 'a'"
    assert not d[("c", "fpr")]["disadvantaged"] and d[("c", "fpr")]["reading"] == "in the group's favour"
    assert not d[("c", "ppv")]["disadvantaged"] and d[("c", "ppv")]["direction"].startswith("lower positive predictive")


def test_favourable_negative_flips_the_error_directions():
    res = audit.run(fair_table(), label="y", pred="yhat", attributes=["group"], protected=["group"],
                    favorable="0", max_order=1, reference={"group": "a"})
    found = fairness_findings(res)
    d = {(r["group"], r["criterion"]): r for _, r in found.iterrows()}
    # b predicted 0 more often (0.725 vs 0.5): in its favour; lower TPR and FPR with 0 favourable: in its favour.
    assert not d[("b", "selection")]["disadvantaged"] and d[("b", "selection")]["higher"]
    assert not d[("b", "tpr")]["disadvantaged"] and not d[("b", "fpr")]["disadvantaged"]
    assert "given the favourable '0' more often" in d[("b", "fpr")]["meaning"]
    # c: higher FPR with 0 favourable: actual 0s denied the favourable 0 more often.
    assert d[("c", "fpr")]["disadvantaged"] and "less often" in d[("c", "fpr")]["meaning"]


def test_gate_scopes(fair_result):
    assert evaluate_gate(fair_result).as_dict() == {"blocked": False, "reasons": [], "checks": [], "gap": None}
    assert not fair_result.flagged().empty or True
    g = evaluate_gate(fair_result, on_flag="fairness")
    assert g.blocked and g.checks == ("fairness",) and "protected group(s) with fairness flags" in g.reasons[0]
    assert "at a disadvantage" in g.reasons[0]
    both = evaluate_gate(fair_result, on_flag="both")
    assert both.checks == ("slices", "fairness") and both.blocked
    null = audit.run(random_table(n=1500, seed=30), label="y", score="p")
    g = evaluate_gate(null, on_flag="both")
    assert not g.blocked and g.checks == ("slices",)  # no protected attributes: fairness not checkable


def test_gate_slices_only_ignores_fairness(fair_result):
    g = evaluate_gate(fair_result, on_flag="slices")
    n_flagged = len(fair_result.flagged())
    assert g.blocked == (n_flagged > 0)
    assert all("fairness" not in r for r in g.reasons)


def test_fmt_p_keeps_significant_digits():
    assert fmt_p(8e-38) == "8e-38" and fmt_p(0.04321) == "0.043" and fmt_p(np.nan) == "—"


# ----------------------------------------------------------------------------- command line, in-process
@pytest.fixture()
def fair_csv(tmp_path):
    p = tmp_path / "fair.csv"
    fair_table().to_csv(p, index=False)
    return p


def test_cli_block_on_fairness_records_gate(fissure_main, fair_csv, tmp_path):
    out = tmp_path / "out"
    r = fissure_main("audit", fair_csv, "--label", "y", "--pred", "yhat", "--attributes", "group", "--protected",
                     "group", "--favorable", "1", "--max-order", "1", "--out", out, "--block-on-flag", "fairness")
    assert r.returncode == 1, r.stderr
    assert "fissure: release gate:" in r.stderr and "fairness flags" in r.stderr
    s = json.loads((out / "summary.json").read_text())
    assert s["gate"]["blocked"] is True and s["gate"]["checks"] == ["fairness"]
    assert s["gate"]["reasons"] and "group=b" in s["gate"]["reasons"][0]
    assert {f["criterion"] for f in s["fairness"]["findings"] if f["group"] == "b"} >= {"selection", "four_fifths"}
    # terminal: the fairness line, the findings with direction, the gate, recall printed once
    assert "fairness (group; favourable outcome: predicted '1')" in r.stdout
    assert "group=b: lower selection rate than 'a'" in r.stdout and "at a disadvantage" in r.stdout
    assert "in the group's favour" in r.stdout
    assert "release gate: BLOCKED" in r.stdout
    overall = [x for x in r.stdout.splitlines() if x.startswith("overall ")][0]
    assert overall.count("recall") == 0 or overall.count("recall") == 1


def test_cli_plain_block_on_flag_means_both(fissure_main, fair_csv, tmp_path):
    r = fissure_main("audit", fair_csv, "--label", "y", "--pred", "yhat", "--protected", "group", "--favorable", "1",
                     "--max-order", "1", "--out", tmp_path / "o", "--quiet", "--no-report", "--block-on-flag")
    assert r.returncode == 1
    s = json.loads((tmp_path / "o" / "summary.json").read_text())
    assert s["gate"]["checks"] == ["slices", "fairness"]


def test_cli_no_gate_recorded_as_not_set(fissure_main, fair_csv, tmp_path):
    r = fissure_main("audit", fair_csv, "--label", "y", "--pred", "yhat", "--protected", "group", "--favorable", "1",
                     "--max-order", "1", "--out", tmp_path / "o", "--quiet", "--no-report")
    assert r.returncode == 0, r.stderr
    s = json.loads((tmp_path / "o" / "summary.json").read_text())
    assert s["gate"] == {"blocked": False, "reasons": [], "checks": [], "gap": None}


def test_cli_recall_metric_printed_once(fissure_main, demo_csv, tmp_path):
    r = fissure_main("audit", demo_csv, "--label", "delinquent", "--score", "p_delinquent", "--metric", "recall",
                     "--max-order", "1", "--out", tmp_path / "o", "--no-report")
    assert r.returncode == 0, r.stderr
    overall = [x for x in r.stdout.splitlines() if x.startswith("overall ")][0]
    assert overall.count("recall") == 1


@pytest.mark.parametrize("args,msg", [
    (["--protected", "group"], "--favorable"),
    (["--block-on-flag", "fairness"], "--block-on-flag fairness needs protected attributes"),
    (["--block-on-flag", "everything"], "invalid choice"),
    (["--pdf", "--no-report"], "--pdf needs the report"),
])
def test_cli_refuses_before_computing(fissure_main, fair_csv, tmp_path, args, msg):
    out = tmp_path / "out"
    r = fissure_main("audit", fair_csv, "--label", "y", "--pred", "yhat", "--out", out, *args)
    assert r.returncode == 2, (r.stdout, r.stderr)
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and msg in lines[0] and lines[0].startswith("fissure: "), r.stderr
    assert not out.exists()


def test_favorable_from_config_file_is_enough(fissure_main, fair_csv, tmp_path):
    cfg = tmp_path / "f.toml"
    cfg.write_text('label = "y"\npred = "yhat"\nprotected = ["group"]\nfavorable = "1"\nmax_order = 1\n')
    r = fissure_main("audit", fair_csv, "--config", cfg, "--out", tmp_path / "o", "--quiet", "--no-report")
    assert r.returncode == 0, r.stderr


def test_pdf_without_chromium_exits_2_before_computing(fissure_main, fair_csv, tmp_path, monkeypatch):
    import audit.engine

    monkeypatch.setenv("FISSURE_CHROMIUM", "none")  # the finder's switch: no browser
    monkeypatch.setattr(audit.engine, "run", lambda *a, **k: pytest.fail("computed before the PDF check"))
    out = tmp_path / "out"
    r = fissure_main("audit", fair_csv, "--label", "y", "--pred", "yhat", "--out", out, "--pdf")
    assert r.returncode == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "--pdf needs a Chromium browser" in lines[0]
    assert not out.exists()


def test_piping_into_head_ends_without_traceback(demo_csv, tmp_path):
    # A real shell pipe: the reader closes after one line, while about 90 kB (more than a pipe's 64 kB
    # buffer) are still to be written, so the writer must meet a closed pipe.
    cmd = (f"{sys.executable} -m audit audit {demo_csv} --label delinquent --score p_delinquent --top 100000 "
           f"--no-report --out {tmp_path / 'o'} | head -n 1")
    r = subprocess.run(["bash", "-o", "pipefail", "-c", cmd], capture_output=True, text=True,
                       env={**os.environ, "PYTHONPATH": ROOT})
    assert r.stdout.startswith("fissure ") and r.stdout.count("\n") == 1
    assert "Traceback" not in r.stderr and "BrokenPipe" not in r.stderr, r.stderr
    assert (tmp_path / "o" / "slices.csv").exists()
