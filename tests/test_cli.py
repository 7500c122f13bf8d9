"""The command line end to end, in a real subprocess, on the demo and on bad input."""
import json
import os
import subprocess
import sys

import pandas as pd
import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def fissure(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "audit", *args], capture_output=True, text=True, cwd=cwd or ROOT,
                          env={**os.environ, "PYTHONPATH": ROOT})


def test_demo_end_to_end(demo_csv, tmp_path):
    out = tmp_path / "out"
    r = fissure("audit", demo_csv, "--label", "delinquent", "--score", "p_delinquent", "--out", str(out), "--no-report")
    assert r.returncode == 0, r.stderr
    assert "age_band=18-24 & employment_type=gig" in r.stdout
    assert "not findings of discrimination" in r.stdout
    sl = pd.read_csv(out / "slices.csv", dtype=str, keep_default_na=False)
    for col in ["slice", "order", "n", "tp", "fp", "fn", "tn", "precision", "recall", "f1", "accuracy", "log_loss",
                "p_value", "q_value", "flagged", "rank", "status"]:
        assert col in sl.columns
    assert set(sl["flagged"]) <= {"true", "false"}
    assert (sl.loc[sl["status"] != "tested", "rank"] == "").all()
    top = sl[sl["rank"] == "1"].iloc[0]
    assert top["slice"] == "age_band=18-24 & employment_type=gig"
    s = json.loads((out / "summary.json").read_text())
    assert s["input"]["rows"] == 20000 and s["input"]["name"] == "predictions.csv"
    assert len(s["input"]["sha256"]) == 64
    assert s["columns"]["skipped"][0]["column"] == "applicant_id"
    assert s["slices"]["family_size"] == s["slices"]["tested"] and s["slices"]["flagged"] > 0
    assert s["configuration"]["metric"] == "error_rate" and s["tool"]["name"] == "fissure"
    assert not [p for p in os.listdir(out) if p.endswith(".part")]


def test_python_m_and_console_script_agree(demo_csv, tmp_path):
    r = fissure("audit", demo_csv, "--label", "delinquent", "--score", "p_delinquent", "--out", str(tmp_path / "a"),
                "--no-report", "--quiet", "--max-order", "1")
    assert r.returncode == 0 and r.stdout == ""
    exe = os.path.join(os.path.dirname(sys.executable), "fissure")
    if os.path.exists(exe):
        r2 = subprocess.run([exe, "audit", demo_csv, "--label", "delinquent", "--score", "p_delinquent", "--out",
                             str(tmp_path / "b"), "--no-report", "--quiet", "--max-order", "1"], capture_output=True)
        assert r2.returncode == 0
        assert (tmp_path / "a" / "slices.csv").read_bytes() == (tmp_path / "b" / "slices.csv").read_bytes()


def _table(tmp_path, name, text):
    p = tmp_path / name
    p.write_text(text)
    return str(p)


GOOD = "y,p,g\n0,0.1,a\n1,0.8,b\n0,0.3,a\n1,0.7,b\n"


@pytest.mark.parametrize("content,args,msg", [
    (None, ["--label", "y", "--score", "p"], "does not exist"),
    ("", ["--label", "y", "--score", "p"], "is empty"),
    ("y,p,g\n", ["--label", "y", "--score", "p"], "header but no data rows"),
    (GOOD, ["--label", "nope", "--score", "p"], "label column 'nope' is not in the table"),
    (GOOD, ["--label", "y", "--score", "zz"], "probability column 'zz' is not in the table"),
    ("y,p,g\n0,0.1,a\n0,0.8,b\n", ["--label", "y", "--score", "p"], "has 1 distinct value"),
    ("y,p,g\n0,0.1,a\n1,0.8,b\n2,0.8,b\n", ["--label", "y", "--score", "p"], "has 3 distinct values"),
    ("y,p,g\n0,1.5,a\n1,0.8,b\n", ["--label", "y", "--score", "p"], "value 1.5 at data row 1"),
    ("y,p,g\n0,x,a\n1,0.8,b\n", ["--label", "y", "--score", "p"], "non-numeric value 'x' at data row 1"),
    ("y,p,g\n0,0.1,a\n,0.8,b\n", ["--label", "y", "--score", "p"], "missing value at data row 2"),
    ("y,q,g\n0,0,a\n1,5,b\n", ["--label", "y", "--pred", "q"], "prediction column 'q' has value '5' at data row 2"),
    (GOOD, ["--label", "y", "--score", "p", "--positive", "9"], "positive class '9' does not occur"),
    ("y,p,p\n0,0.1,0.2\n1,0.2,0.3\n", ["--label", "y", "--score", "p"], "column name 'p' more than once"),
    (GOOD, ["--label", "y", "--score", "p", "--attributes", "g,y"], "attribute column 'y' is the label"),
    (GOOD, ["--label", "y", "--score", "p", "--metric", "auc"], "invalid choice"),
    (GOOD, ["--score", "p"], "give the label column"),
])
def test_bad_input_is_one_line_exit_2_and_writes_nothing(tmp_path, content, args, msg):
    data = str(tmp_path / "missing.csv") if content is None else _table(tmp_path, "t.csv", content)
    out = tmp_path / "out"
    r = fissure("audit", data, *args, "--out", str(out))
    assert r.returncode == 2, (r.stdout, r.stderr)
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and msg in lines[0] and lines[0].startswith("fissure: ")
    assert "Traceback" not in r.stderr
    assert not out.exists()


def test_config_file_reproduces_the_run(demo_csv, tmp_path):
    a = fissure("audit", demo_csv, "--label", "delinquent", "--score", "p_delinquent", "--metric", "recall",
                "--min-support", "50", "--correction", "holm", "--out", str(tmp_path / "a"), "--quiet")
    assert a.returncode == 0, a.stderr
    b = fissure("audit", demo_csv, "--config", str(tmp_path / "a" / "fissure.toml"), "--out", str(tmp_path / "b"),
                "--quiet")
    assert b.returncode == 0, b.stderr
    assert (tmp_path / "a" / "slices.csv").read_bytes() == (tmp_path / "b" / "slices.csv").read_bytes()
