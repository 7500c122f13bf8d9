"""The output folder holds exactly one run; the Python way to write the files; one timestamp per run."""
import json
import os
import re

import pytest

from conftest import ROOT, random_table
import audit
from audit.errors import AuditInputError
from audit.faces.export import MARKER, check_output_folder, save


@pytest.fixture()
def table_csv(tmp_path):
    p = tmp_path / "t.csv"
    random_table(n=1500, seed=4, effect=0.4).to_csv(p, index=False)
    return p


def _base(path):
    return ["audit", path, "--label", "y", "--score", "p", "--max-order", "1", "--quiet"]


def test_rerun_removes_files_the_new_run_did_not_write(fissure_main, table_csv, tmp_path):
    out = tmp_path / "out"
    r = fissure_main(*_base(table_csv), "--out", out, "--protected", "region", "--favorable", "1")
    assert r.returncode == 0, r.stderr
    assert {"report.html", "fissure.toml", "fairness.csv", MARKER} <= set(os.listdir(out))
    r = fissure_main(*_base(table_csv), "--out", out, "--no-report")
    assert r.returncode == 0, r.stderr
    assert sorted(os.listdir(out)) == sorted([MARKER, "slices.csv", "summary.json"])
    marker = json.loads((out / MARKER).read_text())
    assert marker["files"] == ["slices.csv", "summary.json"] and marker["tool"] == "fissure"


def test_files_not_listed_in_the_marker_are_left_alone(fissure_main, table_csv, tmp_path):
    out = tmp_path / "out"
    assert fissure_main(*_base(table_csv), "--out", out, "--no-report").returncode == 0
    (out / "notes.txt").write_text("mine")  # added by the user after the run
    assert fissure_main(*_base(table_csv), "--out", out, "--no-report").returncode == 0
    assert (out / "notes.txt").read_text() == "mine"


def test_marker_cannot_point_outside_the_folder(fissure_main, table_csv, tmp_path):
    out = tmp_path / "out"
    assert fissure_main(*_base(table_csv), "--out", out, "--no-report").returncode == 0
    victim = tmp_path / "victim.txt"
    victim.write_text("keep")
    (out / MARKER).write_text(json.dumps({"tool": "fissure", "files": ["../victim.txt", str(victim), "x/../y"]}))
    assert fissure_main(*_base(table_csv), "--out", out, "--no-report").returncode == 0
    assert victim.read_text() == "keep"


@pytest.mark.parametrize("make", ["file_inside", "is_a_file"])
def test_refuses_a_folder_fissure_did_not_make_before_computing(fissure_main, table_csv, tmp_path, monkeypatch,
                                                                make):
    import audit.engine

    monkeypatch.setattr(audit.engine, "run", lambda *a, **k: pytest.fail("computed before the folder check"))
    out = tmp_path / "out"
    if make == "file_inside":
        out.mkdir()
        (out / "thesis.docx").write_text("precious")
    else:
        out.write_text("a file")
    r = fissure_main(*_base(table_csv), "--out", out)
    assert r.returncode == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("fissure: output folder") and str(out) in lines[0]
    if make == "file_inside":
        assert os.listdir(out) == ["thesis.docx"]


def test_empty_existing_folder_is_accepted(tmp_path):
    (tmp_path / "empty").mkdir()
    check_output_folder(str(tmp_path / "empty"))
    check_output_folder(str(tmp_path / "new"))


def test_save_from_python_writes_what_the_cli_writes(fissure_main, table_csv, tmp_path):
    import pandas as pd

    r = fissure_main(*_base(table_csv), "--out", tmp_path / "cli")
    assert r.returncode == 0, r.stderr
    res = audit.run(pd.read_csv(table_csv), label="y", score="p", max_order=1)
    paths = save(res, str(tmp_path / "py"))
    assert sorted(os.listdir(tmp_path / "py")) == sorted(os.listdir(tmp_path / "cli"))
    assert all(os.path.exists(p) for p in paths)
    assert (tmp_path / "py" / "slices.csv").read_bytes() == (tmp_path / "cli" / "slices.csv").read_bytes()
    with pytest.raises(AuditInputError, match="not empty"):
        (tmp_path / "other").mkdir()
        (tmp_path / "other" / "x").write_text("x")
        save(res, str(tmp_path / "other"))


def test_save_pdf_without_chromium_writes_nothing(tmp_path, monkeypatch):
    monkeypatch.setenv("FISSURE_CHROMIUM", "none")
    res = audit.run(random_table(n=600, seed=1), label="y", score="p", max_order=1)
    with pytest.raises(AuditInputError, match="Chromium"):
        save(res, str(tmp_path / "o"), pdf=True)
    assert not (tmp_path / "o").exists()


def test_one_timestamp_per_run(fissure_main, table_csv, tmp_path):
    out = tmp_path / "out"
    assert fissure_main(*_base(table_csv), "--out", out).returncode == 0
    created = json.loads((out / "summary.json").read_text())["created"]
    html = (out / "report.html").read_text()
    assert re.search(r"<p id='date-line'>Audit date \(UTC\): ([^<]*)</p>", html).group(1) == created
    assert json.loads((out / MARKER).read_text())["created"] == created


@pytest.mark.parametrize("metric,words", [("error_rate", "rows"), ("recall", "actual positives")])
def test_no_rest_reason_names_both_thresholds(fissure_main, tmp_path, metric, words):
    # 990 of 1,000 rows in g=a: the rest of that slice has 10 rows (pandas count), under 30 (common
    # practice default for min_support); the reason names both thresholds and what each counts.
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(11)
    n = 1000
    df = pd.DataFrame({"y": rng.integers(0, 2, n), "p": rng.random(n), "g": ["a"] * 990 + ["b"] * 10})
    df.to_csv(tmp_path / "t.csv", index=False)
    r = fissure_main("audit", tmp_path / "t.csv", "--label", "y", "--score", "p", "--metric", metric, "--max-order",
                     "1", "--no-report", "--quiet", "--out", tmp_path / "out")
    assert r.returncode == 0, r.stderr
    sl = pd.read_csv(tmp_path / "out" / "slices.csv", keep_default_na=False).set_index("slice")
    assert int(sl.loc["g=a", "rest_n"]) == int((df["g"] != "a").sum()) == 10
    assert sl.loc["g=a", "status"] == "no_rest"
    assert sl.loc["g=a", "status_reason"] == (
        f"the rest has fewer than 30 rows (minimum support) or fewer than 10 {words} in the metric's denominator "
        "(minimum metric support)")
