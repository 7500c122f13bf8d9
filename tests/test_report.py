"""The governance report: structure, self-containment, reproduction, hostile strings, schema, gate, PDF."""
import html
import json
import os
import re
import shutil
import subprocess
import sys
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest

from conftest import ROOT, random_table
from audit.faces.report import SECTIONS

HOSTILE = "<img src=x onerror=\"window.__pwned=1\">"


def fissure(*args, cwd):
    return subprocess.run([sys.executable, "-m", "audit", *args], capture_output=True, text=True, cwd=cwd,
                          env={**os.environ, "PYTHONPATH": ROOT})


class Collect(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.ids, self.text, self.pre = [], set(), [], {}
        self._pre = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if "id" in a:
            self.ids.add(a["id"])
        if tag == "pre" and a.get("id"):
            self._pre = a["id"]
            self.pre[self._pre] = ""

    def handle_endtag(self, tag):
        if tag == "pre":
            self._pre = None

    def handle_data(self, data):
        self.text.append(data)
        if self._pre:
            self.pre[self._pre] += data


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory, demo_csv):
    work = tmp_path_factory.mktemp("report")
    shutil.copy(demo_csv, work / "predictions.csv")
    r = fissure("audit", "predictions.csv", "--label", "delinquent", "--score", "p_delinquent", "--out", "out",
                "--model-name", "Personal-loan delinquency", "--model-version", "3.2",
                "--intended-use", "credit decisions", "--protected", "sex,age_band", "--favorable", "0",
                "--quiet", cwd=work)
    assert r.returncode == 0, r.stderr
    return work


def parse(path):
    p = Collect()
    p.feed(open(path, encoding="utf-8").read())
    return p


def test_every_section_and_every_flagged_slice(demo_run):
    p = parse(demo_run / "out" / "report.html")
    for key, title in SECTIONS:
        assert key in p.ids, key
    text = " ".join(p.text)
    for key, title in SECTIONS:
        assert title in text
    sl = pd.read_csv(demo_run / "out" / "slices.csv", dtype=str, keep_default_na=False)
    flagged = sl.loc[sl["flagged"] == "true", "slice"]
    assert len(flagged) > 10
    for s in flagged:
        assert s in text, s
    assert "not a finding of discrimination" in text
    assert "slices.csv" in text and "Prepared by" in text and "Independent review by" in text
    assert "base rates differ" in text  # fairness section with the trade-off statement


def test_no_external_resource_is_loaded(demo_run):
    p = parse(demo_run / "out" / "report.html")
    for tag, attrs in p.tags:
        for k in ("src", "href"):
            v = attrs.get(k) or ""
            assert not v.lower().startswith(("http:", "https:", "//")), (tag, k, v)
        assert tag != "link"
    raw = (demo_run / "out" / "report.html").read_text()
    assert raw.count("Plotly.newPlot") >= 4  # charts embedded
    assert len(re.findall(r"<script type='text/javascript'>/\*\*", raw)) <= 1  # plotly.js inlined once


def test_embedded_toml_reproduces_slices_csv(demo_run):
    p = parse(demo_run / "out" / "report.html")
    toml = html.unescape(p.pre["config-toml"])
    (demo_run / "again.toml").write_text(toml)
    r = fissure("audit", "predictions.csv", "--config", "again.toml", "--out", "again", "--quiet", cwd=demo_run)
    assert r.returncode == 0, r.stderr
    assert (demo_run / "again" / "slices.csv").read_bytes() == (demo_run / "out" / "slices.csv").read_bytes()
    assert (demo_run / "again" / "fairness.csv").read_bytes() == (demo_run / "out" / "fairness.csv").read_bytes()


def test_deterministic_apart_from_the_date_line(demo_run, tmp_path):
    shutil.copy(demo_run / "predictions.csv", tmp_path / "predictions.csv")
    args = ["audit", "predictions.csv", "--label", "delinquent", "--score", "p_delinquent", "--out", "out",
            "--model-name", "Personal-loan delinquency", "--model-version", "3.2", "--intended-use",
            "credit decisions", "--protected", "sex,age_band", "--favorable", "0", "--quiet"]
    assert fissure(*args, cwd=tmp_path).returncode == 0
    a = (demo_run / "out" / "report.html").read_text().splitlines()
    b = (tmp_path / "out" / "report.html").read_text().splitlines()
    assert (demo_run / "out" / "slices.csv").read_bytes() == (tmp_path / "out" / "slices.csv").read_bytes()
    strip = lambda lines: [re.sub(r"<p id='date-line'>[^<]*</p>", "", x) for x in lines]  # noqa: E731
    assert strip(a) == strip(b)


def test_summary_validates_against_shipped_schema(demo_run):
    jsonschema = pytest.importorskip("jsonschema")
    schema = json.load(open(os.path.join(ROOT, "audit", "faces", "summary.schema.json")))
    summary = json.load(open(demo_run / "out" / "summary.json"))
    jsonschema.validate(summary, schema)
    assert summary["model"] == {"name": "Personal-loan delinquency", "version": "3.2", "intended_use": "credit decisions"}
    assert summary["fairness"]["favorable_outcome"] == "0"
    bad = dict(summary, input={**summary["input"], "rows": 0})
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(bad, schema)


@pytest.fixture(scope="module")
def hostile_run(tmp_path_factory):
    work = tmp_path_factory.mktemp("hostile")
    df = random_table(n=1500, seed=4, effect=0.4)
    df["region"] = df["region"].replace({"r2": HOSTILE, "r1": "=HYPERLINK(\"http://x\")", "r3": "@SUM(1)"})
    df = df.rename(columns={"plan": "+plan<script>"})
    df.to_csv(work / "t.csv", index=False)
    r = fissure("audit", "t.csv", "--label", "y", "--score", "p", "--out", "out", "--quiet",
                "--model-name", "<script>window.__pwned=2</script>", cwd=work)
    assert r.returncode == 0, r.stderr
    return work


def test_hostile_strings_are_escaped_in_html(hostile_run):
    raw = (hostile_run / "out" / "report.html").read_text()
    p = parse(hostile_run / "out" / "report.html")
    assert not [t for t, a in p.tags if t == "img"]
    assert "window.__pwned=2</script>" not in raw
    text = " ".join(p.text)
    assert HOSTILE in text  # shown as text
    assert "+plan<script>" in text


def test_csv_neutralises_formulas_but_keeps_negative_numbers(hostile_run):
    raw = (hostile_run / "out" / "slices.csv").read_text()
    sl = pd.read_csv(hostile_run / "out" / "slices.csv", dtype=str, keep_default_na=False)
    vals = set(sl["value_1"]) | set(sl["value_2"])
    assert "'=HYPERLINK(\"http://x\")" in vals and "'@SUM(1)" in vals
    assert not any(v.startswith(("=", "@", "+")) for v in vals)
    assert "'+plan<script>" in set(sl["attribute_1"]) | set(sl["attribute_2"])
    diffs = sl.loc[sl["diff"] != "", "diff"]
    assert diffs.str.startswith("-").any()  # negative numbers stay numbers
    assert not diffs.str.startswith("'").any()
    assert float(diffs[diffs.str.startswith("-")].iloc[0]) < 0
    assert "\n'=" not in raw


def test_release_gate_exit_codes(demo_run, tmp_path):
    base = ["audit", "predictions.csv", "--label", "delinquent", "--score", "p_delinquent", "--quiet", "--no-report"]
    r = fissure(*base, "--out", str(tmp_path / "a"), "--block-on-flag", cwd=demo_run)
    assert r.returncode == 1 and "release gate" in r.stderr
    r = fissure(*base, "--out", str(tmp_path / "b"), "--block-gap", "0.5", cwd=demo_run)
    assert r.returncode == 0
    r = fissure(*base, "--out", str(tmp_path / "c"), "--block-gap", "0.1", cwd=demo_run)
    assert r.returncode == 1 and "differs from the rest by" in r.stderr
    null = random_table(n=1500, seed=30)
    null.to_csv(tmp_path / "null.csv", index=False)
    r = fissure("audit", str(tmp_path / "null.csv"), "--label", "y", "--score", "p", "--quiet", "--no-report",
                "--out", str(tmp_path / "d"), "--block-on-flag", cwd=demo_run)
    assert r.returncode == 0, r.stderr
    r = fissure("audit", "missing.csv", "--label", "y", "--out", str(tmp_path / "e"), "--block-on-flag", cwd=demo_run)
    assert r.returncode == 2


@pytest.mark.skipif(shutil.which("chromium") is None or shutil.which("pdftoppm") is None,
                    reason="needs Debian's chromium and poppler-utils (.ci/run installs them)")
def test_pdf_pages_are_not_blank(demo_run, tmp_path):
    from PIL import Image

    r = fissure("audit", "predictions.csv", "--label", "delinquent", "--score", "p_delinquent", "--out",
                str(tmp_path / "pdf"), "--quiet", "--pdf", cwd=demo_run)
    assert r.returncode == 0, r.stderr
    pdf = tmp_path / "pdf" / "report.pdf"
    assert pdf.read_bytes()[:5] == b"%PDF-"
    subprocess.run(["pdftoppm", "-png", "-r", "40", "-f", "1", "-l", "3", str(pdf), str(tmp_path / "pg")], check=True)
    pages = sorted(tmp_path.glob("pg*.png"))
    assert len(pages) == 3
    for page in pages:
        px = np.asarray(Image.open(page).convert("L"), dtype=float)
        assert px.std() > 5 and (px < 128).mean() > 0.002, page


def test_missing_chromium_still_writes_html(demo_run, tmp_path):
    r = subprocess.run([sys.executable, "-m", "audit", "audit", "predictions.csv", "--label", "delinquent", "--score",
                        "p_delinquent", "--out", str(tmp_path / "np"), "--quiet", "--pdf", "--max-order", "1"],
                       capture_output=True, text=True, cwd=demo_run,
                       env={**os.environ, "PYTHONPATH": ROOT, "PATH": "/nonexistent", "FISSURE_CHROMIUM": "none"})
    assert r.returncode == 0, r.stderr
    assert (tmp_path / "np" / "report.html").exists() and not (tmp_path / "np" / "report.pdf").exists()
    assert r.stderr.strip().count("\n") == 0 and "PDF not written" in r.stderr
