"""Findings first in the faces (issue 10, parts 3-5): the terminal summary, summary.json and the
report lead with findings, each with its echoes folded under it; flagged slices carry flag ranks
without gaps and selection-adjusted intervals; a run with triples says how many were considered,
pruned and tested. The demo goes through the command line in this process.

Outside references: the JSON Schema standard (draft 2020-12, through ``jsonschema``); Benjamini &
Yekutieli (2005), JASA 100:71-81, for the level 1 - R*alpha/m of the selection-adjusted intervals,
recomputed here from the q-values in slices.csv; the number of triples of values from the
attributes' level counts (a sum of products over every three attributes)."""
import contextlib
import html
import io
import itertools
import json
import math
import os
import re
import shutil

import pandas as pd
import pytest

from conftest import ROOT
from audit.faces.cli import main as cli_main

PLANTED_PAIR = "age_band=18-24 & employment_type=gig"
PLANTED_SINGLE = "channel=broker"
PLANTED_MISSING = "income_band=(missing)"
# demo/README.md: by error rate the three planted weaknesses lead, then one unplanted finding it explains
PLANTED = [PLANTED_PAIR, PLANTED_SINGLE, PLANTED_MISSING]
DEMO_FINDINGS = PLANTED + ["channel=web & tenure_years=[2, 3.4)"]
DEMO = ["--label", "delinquent", "--score", "p_delinquent", "--protected", "sex,age_band", "--favorable", "0"]


def _run(work, *args):
    """``fissure audit predictions.csv ARGS`` in this process; returns (exit code, stdout)."""
    old = os.getcwd()
    os.chdir(work)
    out = io.StringIO()
    try:
        with contextlib.redirect_stdout(out):
            code = cli_main(["audit", "predictions.csv", *[str(a) for a in args]])
    finally:
        os.chdir(old)
    return code, out.getvalue()


def _csv(path):
    return pd.read_csv(path, dtype=str, keep_default_na=False)


def _words(fragment: str) -> str:
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", " ", fragment))).strip()


def _section(raw: str, key: str, following: str) -> str:
    return raw[raw.index(f"<section id='{key}'>"):raw.index(f"<section id='{following}'>")]


@pytest.fixture(scope="module")
def pairs_run(tmp_path_factory, demo_csv):
    work = tmp_path_factory.mktemp("findings2")
    shutil.copy(demo_csv, work / "predictions.csv")
    code, stdout = _run(work, *DEMO, "--out", "out")
    assert code == 0
    return work, stdout


@pytest.fixture(scope="module")
def triples_run(tmp_path_factory, demo_csv):
    work = tmp_path_factory.mktemp("findings3")
    shutil.copy(demo_csv, work / "predictions.csv")
    code, stdout = _run(work, "--label", "delinquent", "--score", "p_delinquent", "--max-order", "3", "--out", "out")
    assert code == 0
    return work, stdout


def _echo_counts(sl):
    """Echoes per finding, from slices.csv's own columns."""
    flagged = sl[sl["flagged"] == "true"]
    return flagged.loc[flagged["echo_of"] != "", "echo_of"].value_counts().to_dict()


def test_terminal_lists_the_planted_findings_first_with_their_echo_counts(pairs_run):
    work, stdout = pairs_run
    lines = stdout.splitlines()
    sl = _csv(work / "out" / "slices.csv")
    counts = _echo_counts(sl)
    at = next(i for i, x in enumerate(lines) if x.startswith("findings by error_rate"))
    # nothing ranked is listed before the findings
    assert not any(re.match(r"\s+\d+ ", x) for x in lines[:at])
    items = [x for x in lines[at + 1:] if re.match(r"  \d+\. ", x)]
    assert items[0].startswith(f"  1. {PLANTED_PAIR}  [flag rank 1, {counts[PLANTED_PAIR]} echo(es)]")
    assert items[1].startswith(f"  2. {PLANTED_SINGLE}  [flag rank ")
    assert items[1].endswith(f", {counts[PLANTED_SINGLE]} echo(es)]")
    n_flagged = int((sl["flagged"] == "true").sum())
    n_find = int((sl["finding"] == "true").sum())
    assert items[2].startswith(f"  3. {PLANTED_MISSING}  [flag rank ")
    # the demo's README: four findings by error rate, the three planted ones first
    assert len(items) == n_find == 4
    assert sum(counts.values()) == n_flagged - n_find  # every other flagged slice is folded under one
    assert f"{n_flagged} flagged at bh 0.05 ({n_find} finding(s), {n_flagged - n_find} echo(es))" in stdout
    # the first echoes named under the pair are its echoes of best flag rank
    echoes = sl[sl["echo_of"] == PLANTED_PAIR].assign(fr=lambda d: d["flag_rank"].astype(int)).sort_values("fr")
    first = lines[lines.index(items[0]) + 2]
    assert first.startswith(f"     echoes: {echoes['slice'].iloc[0]}, ")
    assert first.endswith(" more")


def test_summary_json_has_findings_with_echoes_and_flag_ranks(pairs_run):
    jsonschema = pytest.importorskip("jsonschema")
    work, _ = pairs_run
    summary = json.load(open(work / "out" / "summary.json"))
    schema = json.load(open(os.path.join(ROOT, "audit", "faces", "summary.schema.json")))
    jsonschema.validate(summary, schema)  # JSON Schema draft 2020-12
    sl = _csv(work / "out" / "slices.csv")
    found = summary["findings"]
    assert [f["slice"] for f in found] == DEMO_FINDINGS
    assert [f["finding_rank"] for f in found] == [1, 2, 3, 4]
    for f in found:
        mine = sl[sl["echo_of"] == f["slice"]]
        assert f["echoes"] == len(mine) == len(f["echo_slices"])
        assert set(f["echo_slices"]) == set(mine["slice"])
        ranks = [int(sl.loc[sl["slice"] == x, "flag_rank"].iloc[0]) for x in f["echo_slices"]]
        assert ranks == sorted(ranks)  # echoes by flag rank
    flagged = summary["flagged"]
    assert [x["flag_rank"] for x in flagged] == list(range(1, len(flagged) + 1))  # no gaps
    assert summary["slices"]["findings"] == 4 and summary["slices"]["echoes"] == len(flagged) - 4
    for x in flagged:
        assert x["diff_low_adj"] <= x["diff_low"] <= x["diff"] <= x["diff_high"] <= x["diff_high_adj"]
        assert x["finding"] == (x["echo_of"] is None)
    assert summary["triples"] is None
    # a findings entry without its echo names, or with a gap-free rank missing, is refused
    bad = dict(summary, findings=[{k: v for k, v in found[0].items() if k != "echo_slices"}])
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(bad, schema)
    bad = dict(summary, flagged=[{k: v for k, v in flagged[0].items() if k != "flag_rank"}])
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(bad, schema)


def test_report_leads_with_findings_and_folds_their_echoes(pairs_run):
    work, _ = pairs_run
    raw = (work / "out" / "report.html").read_text(encoding="utf-8")
    sl = _csv(work / "out" / "slices.csv")
    counts = _echo_counts(sl)
    # the reviewer's summary: findings in order, each with its echoes folded
    opening = _section(raw, "opening", "identity")
    ol = opening[opening.index("<ol class='findings'"):]
    ol = ol[:ol.index("</ol>")]
    items = ol.split("<li>")[1:]
    assert [_words(x).split(" (")[0] for x in items] == DEMO_FINDINGS
    for x, name in zip(items, PLANTED):
        assert f"<summary>{counts[name]} echo(es) folded under it</summary>" in x
    # section 5: the findings table comes first, then each finding's echoes folded under it
    find = _section(raw, "findings", "fairness")
    assert find.index("id='findings-table'") < find.index("The whole table")
    table = find[find.index("id='findings-table'"):find.index("</table>", find.index("id='findings-table'"))]
    rows = [_words(r) for r in table.split("<tr>")[2:]]
    assert rows[0].startswith(f"1 1 {PLANTED_PAIR} ") and rows[0].endswith(f" {counts[PLANTED_PAIR]}")
    assert rows[1].startswith(f"2 ") and f" {PLANTED_SINGLE} " in rows[1]
    assert rows[2].startswith(f"3 ") and f" {PLANTED_MISSING} " in rows[2]
    for i, name in enumerate(PLANTED, start=1):
        block = find[find.index(f"<details class='fold' id='echoes-{i}'>"):]
        block = block[:block.index("</details>")]
        assert f"{counts[name]} echo(es) folded under it" in _words(block)
        names = [_words(r.split("</td>")[1]) for r in block.split("<tr>")[2:]]
        assert set(names) == set(sl.loc[sl["echo_of"] == name, "slice"])
    # every flagged slice stays one click away, by flag rank without gaps
    full = find[find.index("id='all-flagged'"):]
    full = full[:full.index("</details>")]
    ranks = [int(_words(r.split("</td>")[0])) for r in full.split("<tr>")[2:]]
    assert ranks == list(range(1, int((sl["flagged"] == "true").sum()) + 1))
    # one decision per finding, its echoes named under it
    sign = _words(_section(raw, "signoff", "reproduce"))
    assert "S1 slice finding " + PLANTED_PAIR in sign and "S2 slice finding " + PLANTED_SINGLE in sign
    assert "S3 slice finding " + PLANTED_MISSING in sign and "S4 slice finding " + DEMO_FINDINGS[3] in sign
    assert "S5 " not in sign
    assert f"Decided with it, its {counts[PLANTED_PAIR]} echo(es): " in sign


def test_method_section_states_how_findings_and_adjusted_intervals_are_made(pairs_run):
    work, _ = pairs_run
    raw = (work / "out" / "report.html").read_text(encoding="utf-8")
    method = _words(_section(raw, "method", "findings"))
    assert "Holm's step-down method (Holm 1979)" in method and "one family" in method
    assert "1 − R·alpha/m" in method and "Benjamini & Yekutieli 2005" in method
    # Benjamini & Yekutieli (2005): R slices selected (q <= alpha, either direction) of the m tested
    sl = _csv(work / "out" / "slices.csv")
    tested = sl[sl["status"] == "tested"]
    m = len(tested)
    r = int((tested["q_value"].astype(float) <= 0.05).sum())
    assert f"here R = {r:,}, m = {m:,}: 1 − {r:,}·0.05/{m:,} = {1 - r * 0.05 / m:.2%}" in method


def test_terminal_and_report_print_the_same_adjusted_level(pairs_run):
    """One run, one level: 1 - R*alpha/m (Benjamini & Yekutieli 2005) to two decimals in every face."""
    work, stdout = pairs_run
    sl = _csv(work / "out" / "slices.csv")
    tested = sl[sl["status"] == "tested"]
    r, m = int((tested["q_value"].astype(float) <= 0.05).sum()), len(tested)
    level = f"{1 - r * 0.05 / m:.2%}"
    assert f"(slice − rest, {level} interval adjusted for the selection)" in _words(stdout)
    findings = _words(_section((work / "out" / "report.html").read_text(encoding="utf-8"), "findings", "fairness"))
    assert f"{level} adjusted interval" in findings
    assert not re.search(r"\d\.\d% adjusted interval", findings)   # never a one-decimal rounding of it


def test_triples_counts_in_the_terminal_the_summary_and_the_report(triples_run):
    work, stdout = triples_run
    summary = json.load(open(work / "out" / "summary.json"))
    tri = summary["triples"]
    levels = [len(a["levels"]) for a in summary["attributes"]]
    # every triple of values from three different attributes: a sum of products of level counts
    assert tri["possible"] == sum(math.prod(c) for c in itertools.combinations(levels, 3))
    sl = _csv(work / "out" / "slices.csv")
    o3 = sl[sl["order"] == "3"]
    assert tri["listed"] == len(o3) and tri["tested"] == int((o3["status"] == "tested").sum())
    assert tri["flagged"] == int((o3["flagged"] == "true").sum()) and tri["pruned"] == tri["possible"] - tri["kept"]
    empty = tri["kept"] - tri["listed"]  # kept triples that no row of slices.csv holds
    assert tri["possible"] == tri["pruned"] + empty + len(o3)  # every triple considered is accounted for
    line = (f"triples: {tri['possible']:,} considered, {tri['pruned']:,} pruned (one of their pairs has fewer than "
            f"30 rows), " + (f"{empty:,} kept but held by no row, " if empty else "")
            + f"{tri['listed']:,} listed, {tri['tested']:,} tested, {tri['flagged']:,} flagged")
    assert line in stdout.splitlines()
    raw = (work / "out" / "report.html").read_text(encoding="utf-8")
    find = _words(_section(raw, "findings", "fairness"))
    assert f"Triples of values: {line[len('triples: '):]}." in find
    method = _words(_section(raw, "method", "findings"))
    assert f"{tri['possible']:,} triples of values considered; {tri['pruned']:,} pruned" in method
    assert "tested slices of orders 1 to 3" in method
    # the planted weaknesses stay findings 1 and 2; a three-part name is printed whole
    assert [f["slice"] for f in summary["findings"][:2]] == [PLANTED_PAIR, PLANTED_SINGLE]
    three = [f["slice"] for f in summary["findings"] if f["order"] == 3]
    echoes3 = o3.loc[(o3["flagged"] == "true") & (o3["finding"] == "false"), "slice"]
    assert len(echoes3) > 0
    for f in summary["findings"]:
        if f["order"] == 3:
            assert any(x.startswith(f"  {f['finding_rank']}. {f['slice']}  [") for x in stdout.splitlines())
    for name in list(three) + list(echoes3[:5]):
        assert name.count(" & ") == 2 and name in _words(raw)


def test_a_triples_report_folds_echoes_under_their_findings_and_counts_them(triples_run, demo_df):
    import audit

    work, _ = triples_run
    raw = (work / "out" / "report.html").read_text(encoding="utf-8")
    sl = _csv(work / "out" / "slices.csv")
    flagged = sl[sl["flagged"] == "true"].assign(fr=lambda d: d["flag_rank"].astype(int))
    counts = _echo_counts(sl)
    # the same audit in this process: AuditResult.findings() counts the echoes slices.csv holds
    res = audit.run(demo_df, label="delinquent", score="p_delinquent", max_order=3)
    found = res.findings()
    assert dict(zip(found["slice"], found["echoes"])) == {f: counts.get(f, 0) for f in found["slice"]}
    assert sum(counts.values()) == len(flagged) - len(found)
    echoes3 = flagged[(flagged["order"] == "3") & (flagged["finding"] == "false")]
    assert len(echoes3) > 100  # the demo with triples: hundreds of triple echoes to fold
    find = _section(raw, "findings", "fairness")
    # the findings table: each finding once, worst first, with its echo count
    table = find[find.index("id='findings-table'"):find.index("</table>", find.index("id='findings-table'"))]
    rows = [_words(r) for r in table.split("<tr>")[2:]]
    assert len(rows) == len(found)
    for row, (_, f) in zip(rows, found.iterrows()):
        assert row.startswith(f"{int(f['finding_rank'])} {int(f['flag_rank'])} {f['slice']} ")
        assert row.endswith(f" {f['echoes']:,}")
    for _, f in found.iterrows():
        name, i = f["slice"], int(f["finding_rank"])
        mine = flagged[flagged["echo_of"] == name]
        if not len(mine):
            assert f"id='echoes-{i}'" not in find
            continue
        block = find[find.index(f"<details class='fold' id='echoes-{i}'>"):]
        block = block[:block.index("</details>")]
        assert f"Finding {i}, {name}: {len(mine)} echo(es) folded under it" in _words(block)
        tables = block.split("<table")[1:]
        three = mine[mine["order"] == "3"]
        two = mine[mine["order"] != "3"]
        # echoes of one or two attributes one by one, as a pairs run lists them
        if len(two):
            names = [_words(r.split("</td>")[1]) for r in tables[0].split("<tr>")[2:]]
            assert names == two.sort_values("fr")["slice"].tolist()
        # triples counted by the slice that explains each: the counts and flag ranks of slices.csv
        if len(three):
            assert f"{len(three):,} of them are triples of values" in _words(block)
            cells = [[_words(c) for c in r.split("</td>")[:-1]] for r in tables[-1].split("<tr>")[2:]]
            want = three.groupby("explained_by")["fr"].agg(["size", "min", "max"])
            assert {c[0] for c in cells} == set(want.index)
            for c in cells:
                w = want.loc[c[0]]
                assert int(c[1].replace(",", "")) == w["size"]
                assert c[2] == (f"{w['min']}–{w['max']}" if w["size"] > 1 else str(w["min"]))
                best = three[three["explained_by"] == c[0]].sort_values("fr")["slice"].iloc[0]
                assert c[3] == best
            assert sum(int(c[1].replace(",", "")) for c in cells) == len(three)
            assert len(cells) < len(three)  # folded: fewer rows than triples
    # every flagged slice by flag rank, except the triple echoes (counted above, all in slices.csv)
    full = find[find.index("id='all-flagged'"):]
    full = full[:full.index("</details>")]
    assert f"the {len(echoes3)} triple echo(es) are counted under their findings above" in _words(full)
    ranks = [int(_words(r.split("</td>")[0])) for r in full.split("<tr>")[2:]]
    assert ranks == sorted(set(flagged["fr"]) - set(echoes3["flag_rank"].astype(int)))
    # not a flat list: section 5's tables hold fewer rows than there are flagged slices (a triple
    # echo is named only as its group's best-ranked, or as what explains another echo)
    assert find.count("<tr>") - find.count("<table") < len(flagged)
