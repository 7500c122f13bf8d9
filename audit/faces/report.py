"""The governance slice report: one self-contained HTML file (and optionally a PDF) built
from the audit result. Every user-supplied string is HTML-escaped; the chart library is
inlined once (a smaller official bundle of the same plotly.js version when it is shipped,
else the full one); element ids are fixed so the same audit gives the same file apart from
the line that carries the date.
"""
from __future__ import annotations

import datetime as _dt
import html
import os
import re
import shutil
import subprocess
import tempfile

from .prose import (CAUTION, DRIVERS_RULE, class_drivers, fairness_findings, finding_groups, finding_text, fmt_p,
                    is_multiclass, level_pct, limitations, method_notes, prediction_words, role_words,
                    selection_level, triples_words)

SECTIONS = [
    ("opening", "1. Summary for the reviewer"),
    ("identity", "2. Audit identity"),
    ("data", "3. Data examined"),
    ("method", "4. How the numbers were made"),
    ("findings", "5. What the audit found"),
    ("fairness", "6. Group fairness"),
    ("limits", "7. Limits of this audit"),
    ("signoff", "8. Review and sign-off"),
    ("reproduce", "9. Reproducing this audit"),
]

#: plotly.js "cartesian" distribution (npm plotly.js-cartesian-dist-min, MIT licence, header kept):
#: every trace type the charts use (scatter, bar, heatmap) at about a third of the full bundle.
VENDORED_PLOTLY = os.path.join(os.path.dirname(os.path.abspath(__file__)), "plotly-cartesian.min.js")
_VENDORED_VERSION = re.compile(r"plotly\.js \(cartesian - minified\) v(\d+\.\d+\.\d+)")

CSS = """
:root { --ink:#1d3557; --flag:#d1651f; --muted:#5c6470; --rule:#d5dae1; }
body { font-family: 'DejaVu Sans', Arial, sans-serif; color: var(--ink); max-width: 1000px; margin: 2em auto;
       padding: 0 1.2em; line-height: 1.45; font-size: 14px; }
h1 { font-size: 24px; margin-bottom: .2em; } h2 { font-size: 18px; border-bottom: 2px solid var(--ink);
     padding-bottom: .2em; margin-top: 2em; } h3 { font-size: 15px; margin-top: 1.4em; }
table { border-collapse: collapse; margin: .6em 0 1em; font-size: 12.5px; }
table.wide { font-size: 11.5px; }
th, td { border: 1px solid var(--rule); padding: 3px 7px; text-align: left; vertical-align: top; }
th { background: #eef2f7; } td.num { text-align: right; font-variant-numeric: tabular-nums; }
.flag { color: var(--flag); font-weight: bold; } .muted { color: var(--muted); }
.favour { color: var(--ink); font-style: italic; } .disadv { color: var(--flag); }
td.reading { min-width: 14em; } td.num { white-space: nowrap; } .tok { white-space: nowrap; }
/* The fairness table has fifteen columns: smaller type and padding keep it inside the text column
   (screen, narrower windows, and the printed page, A4 or Letter). */
table.fair { width: 100%; font-size: 11px; }
table.fair th, table.fair td { padding: 2px 4px; } table.fair td.reading { min-width: 10em; width: 26%; }
@media screen and (max-width: 980px) {
  table.fair { font-size: 10px; } table.fair th, table.fair td { padding: 2px 3px; }
  table.fair td.reading { min-width: 8em; }
}
@media screen and (max-width: 860px) { table.fair { font-size: 9px; } }
.caution { border-left: 5px solid var(--flag); background: #fdf3ec; padding: .6em 1em; margin: 1em 0; }
.gate-blocked { border: 2px solid var(--flag); padding: .5em 1em; } .gate-passed { border: 2px solid var(--ink);
     padding: .5em 1em; } .gate-none { border: 1px dashed var(--rule); padding: .5em 1em; }
pre { background: #f4f6f9; padding: .8em; overflow-x: auto; font-size: 12px; white-space: pre-wrap; }
.chart { width: 900px; max-width: 100%; margin: .6em 0 0; page-break-inside: avoid; }
figure { margin: 0 0 1.2em; } figcaption { font-size: 12.5px; color: var(--muted); max-width: 900px; }
.blank { display: inline-block; min-width: 12em; border-bottom: 1px solid var(--ink); height: 1.2em; }
details.fold { margin: .3em 0 .8em; } details.fold > summary { cursor: pointer; color: var(--ink); }
details.fold[open] > summary { margin-bottom: .3em; } ol.findings > li { margin-bottom: .5em; }
.echo-names { font-size: 12.5px; color: var(--muted); }
@page { margin: 16mm 14mm; }  /* no fixed size: prints on A4 or Letter as the printer is set */
@media print {
  body { max-width: none; margin: 0; font-size: 11px; }
  section { page-break-before: always; } section#opening { page-break-before: avoid; }
  .chart { width: 170mm; height: auto; } table { page-break-inside: auto; } tr { page-break-inside: avoid; }
  table.fair { font-size: 8.5px; } table.fair th { font-size: 8px; }
  table.fair th, table.fair td { padding: 2px 2.5px; } table.fair td.reading { min-width: 7em; }
  details.fold::details-content { content-visibility: visible; display: block; }
  details.fold > summary { list-style: none; font-weight: bold; }
}
"""


def e(x) -> str:
    """HTML-escape any value for text or attribute content."""
    return html.escape("" if x is None else str(x), quote=True)


def _f(x, digits=4) -> str:
    try:
        xf = float(x)
    except (TypeError, ValueError):
        return e(x)
    if xf != xf:
        return "—"
    return f"{xf:.{digits}f}"


def _p(x) -> str:
    return fmt_p(x)


def _table(header, rows, num_cols=(), cls: str = "", col_class=None) -> str:
    klass = f" class='{cls}'" if cls else ""
    out = [f"<table{klass}><thead><tr>" + "".join(f"<th>{e(h)}</th>" for h in header) + "</tr></thead><tbody>"]
    for r in rows:
        cells = []
        for i, v in enumerate(r):
            c = ' class="num"' if i in num_cols else (f' class="{col_class[i]}"' if col_class and i in col_class
                                                         else "")
            cells.append(f"<td{c}>{v}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def _unbroken(escaped: str) -> str:
    """Escaped text with each interval (``[27, 33)``, ``(-inf, 27)``) kept on one line."""
    return re.sub(r"[\[(][^\[\]()]*, [^\[\]()]*[\])]", lambda m: f"<span class='tok'>{m.group(0)}</span>", escaped)


def _pair_breaks(escaped: str) -> str:
    """Escaped group or attribute name (intervals already in no-break spans) that breaks a line only
    after each ``&`` (the word before it is kept with it, so no line starts with ``&`` or holds it alone)
    and, where the table is too narrow, between ``name=`` and an interval."""
    glued = re.sub(r"(<span class='tok'>[^<]*</span>|[^\s<>]+) &amp; ", r"<span class='tok'>\1 &amp;</span> ", escaped)
    return glued.replace("=<span class='tok'>", "=<wbr><span class='tok'>")


def _figure(fig, div_id: str, caption: str = "") -> str:
    import plotly.io as pio

    fig = fig.update_layout(width=900)
    body = pio.to_html(fig, full_html=False, include_plotlyjs=False, div_id=div_id,
                       config={"displaylogo": False, "responsive": False, "displayModeBar": False})
    cap = f"<figcaption><b>How to read it.</b> {e(caption)}</figcaption>" if caption else ""
    return f'<figure><div class="chart">{body}</div>{cap}</figure>'


def plotly_script() -> tuple[str, str]:
    """The chart library to inline and which bundle it is (``"cartesian"`` or ``"full"``).

    The shipped cartesian bundle is used only when its version equals the one the installed
    plotly Python package was built for; otherwise (or when the file is missing) the full
    bundle that package carries.
    """
    import plotly.offline

    want = plotly.offline.get_plotlyjs_version()
    try:
        with open(VENDORED_PLOTLY, encoding="utf-8") as fh:
            js = fh.read()
    except OSError:
        js = ""
    m = _VENDORED_VERSION.search(js[:400])
    if m and m.group(1) == want:
        return js, "cartesian"
    return plotly.offline.get_plotlyjs(), "full"


#: Words for the metric keys the tables show.
_TITLES = {"roc_auc": "ROC AUC", "brier": "Brier score", "log_loss": "mean log loss", "f1": "F1",
           "f1_neg": "F1 of the negative class", "macro_f1": "macro F1", "micro_f1": "micro F1",
           "weighted_f1": "support-weighted F1", "jaccard": "Jaccard index",
           "selection_rate": "selection rate (share predicted positive)",
           "base_rate": "base rate (share actually positive)"}


def _title(key: str) -> str:
    from ..stats.measure import METRICS

    if key in _TITLES:
        return _TITLES[key]
    return METRICS[key].title if key in METRICS else key.replace("_", " ")


def _support_words(token: str) -> str:
    from ..stats.methods import COUNT_WORDS

    return COUNT_WORDS.get(token, token.replace("_", " "))


def _gate_html(gate) -> str:
    if gate is None or not gate.checks:
        return ("<div class='gate-none'><b>Release gate:</b> not set for this run (the command line's "
                "<code>--block-on-flag</code> / <code>--block-gap</code>).</div>")
    words = {"slices": "flagged slices", "fairness": "fairness flags", "gap": f"flagged gaps over {gate.gap}"}
    what = ", ".join(words[c] for c in gate.checks)
    if gate.blocked:
        return (f"<div class='gate-blocked'><b class='flag'>Release gate: BLOCKED</b> (checked: {e(what)})<ul>"
                + "".join(f"<li>{e(r)}</li>" for r in gate.reasons) + "</ul></div>")
    return f"<div class='gate-passed'><b>Release gate: passed</b> (checked: {e(what)}).</div>"


def build_html(result, *, command: str | None = None, created: str | None = None, top: int | None = None,
               gate=None) -> str:
    """The report as one HTML string (self-contained, no external resources).

    ``created`` is the run's timestamp (shared with summary.json); ``gate`` the run's
    :class:`~audit.faces.gate.GateResult` (default: no gate set).
    """
    import plotly

    from . import charts
    from .gate import evaluate_gate

    cfg = result.config
    m = result.metric
    notes = method_notes(result)
    created = created or _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
    gate = gate or evaluate_gate(result)
    st = result.status_counts()
    lvl = int(round(cfg.level * 100))
    multi = is_multiclass(result)
    classes = [str(c) for c in result.classes]
    neg, pos = ("", "") if multi else classes
    parts: list[str] = []
    title = f"Slice audit of {cfg.model_name}" if cfg.model_name else "Slice audit"
    flagged = result.flagged()
    if "flag_rank" in flagged.columns:
        flagged = flagged.sort_values("flag_rank", kind="stable")
    groups = finding_groups(result)
    top = len(flagged) if top is None else top
    found = fairness_findings(result)
    fr = result.fairness
    src = result.source
    n_charts = 0

    # 1. opening: what was audited, what needs a decision, the gate, what to do next
    fair_groups = len(found.drop_duplicates(["attribute", "group"])) if len(found) else 0
    label_words = (f"{len(classes)} classes ({', '.join(e(c) for c in classes)}), predicted as "
                   f"{e(prediction_words(result))}" if multi else f"positive class <b>{e(pos)}</b>")
    audited = (f"{e(cfg.model_name or ('A classifier' if multi else 'A binary classifier'))}"
               + (f" (version {e(cfg.model_version)})" if cfg.model_version else "")
               + f" on <b>{result.n_rows:,}</b> rows of {e(src.name or 'an in-memory table')}: true label "
               f"<code>{e(cfg.label)}</code>, {label_words}; audited metric <b>{e(m.title)}</b> "
               f"over {len(result.attributes)} attribute(s) {_orders_words(cfg.max_order)} ({st.get('tested', 0):,} slices "
               f"tested, corrected with {e(notes['correction']['title'])} at {cfg.alpha:g}).")
    if fr is not None:
        audited += (f" Group fairness on {e(', '.join(a for a in fr.references if ' & ' not in a))}, favourable "
                    f"outcome: predicted <b>{e(fr.favorable)}</b>.")
    n_dec = len(groups) + len(found)
    decide = (f"<b>{n_dec}</b> finding(s) need a decision: <b class='flag'>{len(groups)}</b> slice finding(s) "
              f"({len(flagged)} flagged slice(s): {len(groups)} finding(s) and {len(flagged) - len(groups)} "
              f"echo(es) folded under them)"
              + (f" and <b class='flag'>{len(found)}</b> fairness finding(s) in {fair_groups} protected group(s)"
                 f" ({int(found['disadvantaged'].sum()) if len(found) else 0} at a disadvantage, "
                 f"{int((~found['disadvantaged'].astype(bool)).sum()) if len(found) else 0} in the group's favour)"
                 if fr is not None else "")
              + ". Each is listed in section 8 for a decision.")
    steps = []
    if n_dec:
        steps.append("Read each finding in section 5, with the echoes folded under it, and each fairness finding "
                     "in section 6: size, interval and direction.")
        steps.append("Record a decision for each in section 8 (for example accept with a rationale, remediate, "
                     "monitor, escalate), with an owner and a date.")
    else:
        steps.append("No slice or group was flagged. Absence of a flag is not evidence of equal performance: "
                     "read section 7 before concluding.")
    if gate.blocked:
        steps.append("The release gate is blocked: resolve the findings above, or record the approver's "
                     "override with its rationale in section 8, before release.")
    steps.append("After any change to the model or the data, run the audit again from the configuration in "
                 "section 9 and compare.")
    steps.append("Have the review signed in section 8.")
    opening = (f"<div class='caution'><b>Read this first.</b> {e(CAUTION)}</div>"
               f"<h3>What was audited</h3><p>{audited}</p>"
               f"<h3>What needs a decision</h3><p>{decide}</p>" + _opening_findings(result, groups)
               + _gate_html(gate)
               + "<h3>What to do next</h3><ol>" + "".join(f"<li>{x}</li>" for x in steps) + "</ol>"
               "<p class='muted' id='script-note'>The charts in this document are drawn by a script embedded in "
               "the file (no network needed). A reader with scripts disabled, or a print made without running "
               "them, sees no charts: every number a chart shows is also in the tables here and in "
               "<code>slices.csv</code> / <code>fairness.csv</code>; what is lost is the visual comparison "
               "and the values shown on hover.</p>")
    parts.append(_section("opening", opening))

    # 2. identity
    ident = [("Model", e(cfg.model_name or "(not given)")), ("Model version", e(cfg.model_version or "(not given)")),
             ("Intended use", e(cfg.intended_use or "(not given)")),
             ("Tool", f"Fissure {e(result.version)}"), ("Configuration hash (SHA-256)", f"<code>{cfg.digest()}</code>")]
    parts.append(_section("identity", f"<p id='date-line'>Audit date (UTC): {e(created)}</p>"
                          + _table(["item", "value"], ident)))

    # 3. data
    rows = [("File", e(src.name or "(in-memory table)")), ("SHA-256", f"<code>{e(src.sha256 or '—')}</code>"),
            ("Rows", f"{result.n_rows:,}"), ("Label column", e(cfg.label)),
            ("Classes", f"negative {e(neg)}, positive <b>{e(pos)}</b>"
                        + (" (inferred)" if result.positive_inferred else " (given)")),
            ("Prediction", e(f"column '{cfg.pred}'") if result.prediction_source == "column"
             else e(f"probability column '{cfg.score}' ≥ threshold {cfg.threshold:g}")),
            ("Probability column", e(cfg.score or "(none)"))]
    if multi:
        rows[4:] = [("Classes", f"{len(classes)}: " + ", ".join(f"<b>{e(c)}</b>" for c in classes)
                     + " (no positive class: each class is measured one versus the rest)"),
                    ("Prediction", e(prediction_words(result))),
                    ("Probability columns", e(", ".join(f"{c}: {col}" for c, col in cfg.score.items())
                                              if isinstance(cfg.score, dict) else (cfg.score or "(none)")))]
    data_html = _table(["item", "value"], rows)
    arows = []
    for a in result.attributes:
        edges = ", ".join(f"{x:g}" for x in a.edges) if a.edges else "—"
        arows.append([e(a.name), e(a.kind), str(len(a.levels)), f"{a.n_missing:,}", e(edges)])
    data_html += "<h3>Attributes sliced</h3>" + _table(["attribute", "treated as", "levels", "rows missing",
                                                        "bin edges"], arows, num_cols=(2, 3))
    if result.skipped:
        data_html += "<h3>Columns not sliced</h3>" + _table(["column", "reason"],
                                                            [[e(k), e(v)] for k, v in result.skipped.items()])
    parts.append(_section("data", data_html))

    # 4. method
    frows = [[e(_title(k)), e(v)] for k, v in notes["formulas"].items()]
    meth = ((f"<p>Audited metric: <b>{e(m.title)}</b> = {e(m.formula)}; "
            f"{'higher' if m.higher_is_worse else 'lower'} is worse. In the formulas, tp, fp, fn and tn count "
            f"true positives (actual {e(pos)}, predicted {e(pos)}), false positives (actual {e(neg)}, predicted "
            f"{e(pos)}), false negatives (actual {e(pos)}, predicted {e(neg)}) and true negatives; n counts "
            f"rows; p is the predicted probability of {e(pos)} and y is 1 for actual {e(pos)}.</p>"
            if not multi else
            f"<p>Audited metric: <b>{e(m.title)}</b> = {e(m.formula)}; "
            f"{'higher' if m.higher_is_worse else 'lower'} is worse. The label has {len(classes)} classes and no "
            f"positive class; the prediction is {e(prediction_words(result))}. In the formulas, for each class c, "
            f"tp_c counts rows of true class c predicted c, fp_c rows predicted c whose true class is another, fn_c "
            f"rows of true class c predicted another class; n counts rows; p_ic is the predicted probability of "
            f"class c for row i and y_ic is 1 when row i's true class is c. Per-class rates are proportions and get "
            f"the same intervals and tests as two-class rates.</p>")
            + _table(["metric", "formula"], frows)
            + _table(["step", "method"], [
                ["Intervals for rates", e(f"{notes['interval']['title']} at {lvl}% ({notes['interval']['reference']})")],
                ["Interval for F1", e(notes["interval"]["f1"])],
                *([["Interval for macro-F1", e(notes["interval"]["macro_f1"])]] if multi else []), ["Intervals for mean losses", e(notes["interval"]["means"])],
                ["Interval of slice − rest", e(notes["interval"]["differences"])],
                ["Test of slice against rest", e(notes["test"])], ["Effect size", e(notes["effect_size"])],
                ["Multiple-testing correction", e(f"{notes['correction']['title']}: controls the "
                                                  f"{notes['correction']['controls']} ({notes['correction']['reference']}) "
                                                  f"over the family of {result.family_size} "
                                                  f"{notes['correction']['family']}")],
                ["Minimum support", e(f"{cfg.min_support} rows, and {cfg.min_metric_support} "
                                      f"{_support_words(m.denominator)} (the rows the metric is a share of), "
                                      f"in the slice and in the rest")],
                ["Flag rule", e(notes["flag_rule"])], ["Ranking", e(notes["ranking"])],
                *_findings_method_rows(result, notes),
                ["Undefined values", e(notes["undefined"])], ["Log-loss clipping", e(notes["log_loss_clipping"])],
                ["Reading the table", e(_reading_words(result, notes))],
                ["ROC AUC", e(notes["roc_auc"])]]))
    parts.append(_section("method", meth))

    # 5. findings
    o = result.overall
    orows = []
    keys = (["accuracy", "error_rate", "macro_f1", "micro_f1", "weighted_f1", "macro_precision", "macro_recall",
             "log_loss", "brier"] if multi else
            ["accuracy", "error_rate", "precision", "recall", "specificity", "fpr", "fnr", "f1", "log_loss", "brier"])
    for k in keys:
        if o.get(k) is None:
            continue
        ci = f"[{_f(o.get(k + '_low'))}, {_f(o.get(k + '_high'))}]" if o.get(k + "_low") is not None else "—"
        orows.append([e(_title(k)), _f(o[k]), ci])
    if o.get("roc_auc") is not None:
        orows.append(["ROC AUC", _f(o["roc_auc"]), "—"])
    n_find = len(groups)
    find = ("<p>" + f"Slices tested: <b>{st.get('tested', 0)}</b> (family size m = {result.family_size}); below "
            f"support: <b>{st.get('below_support', 0)}</b>; without enough rest: {st.get('no_rest', 0)}; undefined: "
            f"{st.get('undefined', 0)}; <span class='flag'>flagged: {st['flagged']}</span> "
            f"(<b>{n_find}</b> finding(s), {st['flagged'] - n_find} echo(es)).</p>")
    if triples_words(result):
        find += f"<p id='triples-counts'>Triples of values: {e(triples_words(result))}.</p>"
    if len(flagged):
        find += _findings_html(result, groups, flagged, lvl, top)
        if multi:
            drive, k = _drivers_html(result, flagged.head(top))
            find += drive
            n_charts += k
    else:
        find += "<p>No slice was flagged at the chosen settings.</p>"
    find += f"<h3>The whole table ({result.n_rows:,} rows)</h3>" + _table(["metric", "value", f"{lvl}% interval"],
                                                                          orows, num_cols=(1,))
    if multi:
        find, k = _multiclass_whole(result, find)
        n_charts += k
    else:
        find += _figure(charts.confusion(o, result.classes, title="Confusion matrix, whole table"), "fig-confusion",
                        f"Rows are the true class, columns the prediction; the diagonal holds correct predictions. "
                        f"The two other cells are the two kinds of error (actual {neg} predicted {pos}, actual {pos} "
                        f"predicted {neg}) that the slice tables break down by group.")
        n_charts += 1
    if len(result.ranked()):
        find += _figure(charts.top_slices(result, k=15), "fig-top",
                        f"One line per slice, worst-ranked at the top. The marker is the slice's {m.title} with "
                        f"its {lvl}% interval; the grey tick is the same metric for all other rows. Orange "
                        f"diamonds are flagged: the gap to the tick is larger than chance explains after the "
                        f"correction. A wide interval means few rows: read its far end, not the marker.")
        n_charts += 1
    if len(result.ranked()) and not (multi and m.kind != "mean"):
        # The chance band of a multi-class rate needs the engine's band for K classes (not there yet).
        find += _figure(charts.noise_band(result), "fig-noise",
                        f"Each point is a tested slice, placed by its number of rows (log scale) and its "
                        f"{m.title}. The shaded band is where a slice of that size would land by chance alone if "
                        f"it were like the whole table; small slices scatter widely without meaning anything. "
                        f"Points far outside the band on the bad side are the ones to read; the orange ones "
                        f"survived the correction for {result.family_size} tests.")
        n_charts += 1
    pair = charts.worst_pair(result)
    if pair:
        find += _figure(charts.pair_heatmap(result, *pair), "fig-pair",
                        f"{m.title} for every combination of {pair[0]} and {pair[1]} (the pair holding the "
                        f"worst-ranked pair slice); ⚑ marks flagged cells, grey cells were too small to test. A "
                        f"cell that stands out from both its row and its column is a problem of the combination, "
                        f"not of either attribute alone.")
        n_charts += 1
    find += ("<p>The full table of every slice, tested or not, with counts, metrics, intervals, differences, "
             "p-values and adjusted p-values is in <code>slices.csv</code> beside this report; "
             "<code>summary.json</code> holds this report's content in machine-readable form.</p>")
    parts.append(_section("findings", find))

    # 6. fairness
    if fr is not None:
        fair_html, k = _fairness_section(result, found, lvl)
        n_charts += k
        parts.append(_section("fairness", fair_html))
    else:
        parts.append(_section("fairness", "<p>No protected attributes were named for this audit "
                                          "(<code>--protected</code>), so no group-fairness criteria were checked.</p>"))

    # 7. limits (the caution itself is stated once, in section 1)
    limits = [f"<b>{e(t)}.</b> {e(x)}" for t, x in limitations(result)]
    limits.append("<b>Sensitive data.</b> Protected and sensitive attributes used in this audit should be held "
                  "and processed under the organisation's data-protection rules.")
    parts.append(_section("limits", "<ul>" + "".join(f"<li>{x}</li>" for x in limits) + "</ul>"
                          "<p class='muted'>How to read a flag: see the caution at the top of section 1.</p>"))

    # 8. sign-off
    signs = [[e(role), "<span class='blank'></span>", "<span class='blank'></span>", "<span class='blank'></span>"]
             for role in ("Prepared by", "Independent review by", "Approved by")]
    sign = _table(["role", "name", "signature", "date"], signs)
    drows = []
    for r, ech in groups:
        echo_line = (f"<br><span class='echo-names'>Decided with it, its {len(ech)} echo(es): "
                     f"{_echo_names(ech, limit=40)}</span>" if len(ech) else "")
        drows.append([f"S{int(r['finding_rank'])}", "slice finding",
                      e(f"{r['slice']}: {m.title} {_f(r['metric_value'])} vs rest {_f(r['rest_value'])}, slice − rest "
                        f"{_f(r['diff'])} ({_adj_words(result)} [{_f(r['diff_low_adj'])}, {_f(r['diff_high_adj'])}]), "
                        f"adjusted p {fmt_p(r['q_value'])}") + echo_line,
                      "<span class='blank'></span>", "<span class='blank'></span>"])
    for i, (_, r) in enumerate(found.iterrows(), start=1):
        cls = "flag" if r["disadvantaged"] else "favour"
        drows.append([f"F{i}", "fairness", f"<span class='{cls}'>{e(finding_text(r))}</span>",
                      "<span class='blank'></span>", "<span class='blank'></span>"])
    if gate.blocked:
        drows.append(["G", "release gate", e("blocked: " + "; ".join(gate.reasons)), "<span class='blank'></span>",
                      "<span class='blank'></span>"])
    if drows:
        sign += ("<h3>Decision on each finding</h3><p class='muted'>S: slice finding, by finding number (section "
                 "5); one decision covers the finding and the echoes named under it. "
                 "F: fairness finding (section 6). For example: accept with rationale, remediate, monitor, "
                 "escalate.</p>" + _table(["#", "kind", "finding", "decision", "owner / due date"], drows))
    parts.append(_section("signoff", sign))

    # 9. reproduce
    env = {**result.environment, "plotly": plotly.__version__}
    js, bundle = plotly_script()
    env["plotly.js (embedded)"] = f"{plotly.offline.get_plotlyjs_version()} ({bundle} bundle)"
    repro = ("<p>Run the same audit again with the configuration below saved as <code>fissure.toml</code> "
             "(written beside this report):</p>"
             f"<pre>fissure audit {e(src.name or 'DATA')} --config fissure.toml --out audit-again</pre>")
    if command:
        repro += f"<p>The command that produced this report:</p><pre>{e(command)}</pre>"
    repro += f"<h3>Configuration (TOML)</h3><pre id='config-toml'>{e(cfg.to_toml())}</pre>"
    repro += "<h3>Software</h3>" + _table(["component", "version"], [[e(k), e(v)] for k, v in env.items()])
    parts.append(_section("reproduce", repro))

    head = (f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>{e(title)}</title>"
            f"<meta name='generator' content='Fissure {e(result.version)}'>"
            f"<style>{CSS}</style><script type='text/javascript'>{js}</script></head><body>")
    intro = (f"<h1>{e(title)}</h1><p class='muted'>Prepared by Fissure {e(result.version)}</p>"
             f"<noscript><div class='caution' id='noscript-note'>Scripts are disabled: the {n_charts} charts of "
             f"this report are not drawn. Every number they show is in the tables below and in slices.csv"
             f"{' / fairness.csv' if fr is not None else ''}.</div></noscript>")
    return head + intro + "".join(parts) + "</body></html>\n"


def _orders_words(max_order: int) -> str:
    return {1: "one at a time", 2: "and their pairs"}.get(max_order, "with their pairs and triples")


def _adj_words(result) -> str:
    lvl = selection_level(result)
    return f"{level_pct(lvl)} adjusted interval" if lvl else "adjusted interval"


def _echo_names(ech, limit: int | None = None) -> str:
    names = list(ech["slice"])
    shown = names if limit is None else names[:limit]
    more = f"; … and {len(names) - len(shown)} more" if len(names) > len(shown) else ""
    return "; ".join(e(x) for x in shown) + more


def _opening_findings(result, groups, limit: int = 20) -> str:
    """The findings in the summary for the reviewer, worst first, each with its echoes folded."""
    if not groups:
        return ""
    m = result.metric
    items = []
    for r, ech in groups[:limit]:
        fold = ""
        if len(ech):
            # the first few by flag rank: the opening stays about one printed page; section 5 lists them all
            # (a triples run's triple echoes counted there by what explains them)
            where = (" (section 5 lists those of one or two attributes and counts the triples; slices.csv lists "
                     "every one)" if (ech["order"] == 3).any() else " (all in section 5)")
            fold = (f"<details class='fold'><summary>{len(ech)} echo(es) folded under it</summary>"
                    f"<span class='echo-names'>{_echo_names(ech, limit=6)}"
                    + (where if len(ech) > 6 else "") + "</span></details>")
        items.append(f"<li><b>{e(r['slice'])}</b> ({int(r['n']):,} rows): {e(m.title)} {_f(r['metric_value'])} "
                     f"against {_f(r['rest_value'])} for the rest; slice − rest {_f(r['diff'])}, "
                     f"{_adj_words(result)} [{_f(r['diff_low_adj'])}, {_f(r['diff_high_adj'])}]"
                     + (fold if fold else "; no echoes") + "</li>")
    more = (f"<p class='muted'>… and {len(groups) - limit} more finding(s) in section 5.</p>"
            if len(groups) > limit else "")
    return ("<h3>Findings, worst first</h3><ol class='findings' id='opening-findings'>" + "".join(items) + "</ol>"
            + more)


def _findings_method_rows(result, notes) -> list[list[str]]:
    """Rows of the method table on findings, echoes, adjusted intervals and triples."""
    fn = notes.get("findings") or {}
    if not fn:
        return []
    ex = (result.method or {}).get("explanations", {})
    rows = [["Findings and echoes", e(f"{fn['roles']} Multiple testing: {fn['multiplicity']}; "
                                      f"{fn['explanation_tests']:,} explanation test(s) here, "
                                      f"{fn['findings']} finding(s), {fn['echoes']} echo(es).")]]
    lvl = fn.get("adjusted_level")
    here = ""
    if lvl and ex.get("selected") is not None:
        here = (f"; here R = {ex['selected']:,}, m = {result.family_size:,}: 1 − {ex['selected']:,}·"
                f"{result.config.alpha:g}/{result.family_size:,} = {level_pct(lvl)}")
    rows.append(["Intervals of flagged slices", e(fn["adjusted_intervals"] + here)])
    if fn.get("triples"):
        rows.append(["Slices of three attributes", e(fn["triples"])])
    return rows


def _findings_html(result, groups, flagged, lvl: int, top: int) -> str:
    """Section 5's lead: the findings worst first, each with its echoes folded under it, then every
    flagged slice by flag rank (folded, one click away)."""
    m = result.metric
    adj = _adj_words(result)
    finding_rank = {r["slice"]: int(r["finding_rank"]) for r, _ in groups}
    out = [f"<h3>Findings, worst first ({len(groups)} of {len(flagged)} flagged slices)</h3>"
           "<p>A <b>finding</b> is a flagged slice that no other flagged slice explains; an <b>echo</b> is a flagged "
           "slice flagged only because it lies inside a finding or holds one (section 4 gives the tests). Each echo "
           "is folded under the finding its explanations lead to. Findings are numbered by the conservative end of "
           f"the interval of slice − rest adjusted for the selection ({e(adj)}); the flag rank numbers every flagged "
           f"slice the same way, 1 to {len(flagged)} without gaps.</p>"]
    rows = []
    for r, ech in groups:
        rows.append([str(int(r["finding_rank"])), str(int(r["flag_rank"])), f"<b>{e(r['slice'])}</b>",
                     f"{int(r['n']):,}", _f(r["metric_value"]), f"[{_f(r['metric_low'])}, {_f(r['metric_high'])}]",
                     _f(r["rest_value"]), _f(r["diff"]), f"[{_f(r['diff_low_adj'])}, {_f(r['diff_high_adj'])}]",
                     _p(r["q_value"]), f"{len(ech):,}"])
    out.append("<div id='findings-table'>" + _table(
        ["finding", "flag rank", "slice", "n", m.title, f"{lvl}% interval", "rest", "slice − rest", adj,
         "adjusted p", "echoes"], rows, num_cols=(0, 1, 3, 4, 6, 7, 9, 10)) + "</div>")
    for r, ech in groups:
        if not len(ech):
            continue
        three = (ech["order"] == 3).to_numpy()
        erows = [[str(int(x["flag_rank"])), e(x["slice"]), e(x["explained_by"]), f"{int(x['n']):,}",
                  _f(x["metric_value"]), f"{_f(x['diff'])} [{_f(x['diff_low_adj'])}, {_f(x['diff_high_adj'])}]",
                  _p(x["q_value"])] for _, x in ech[~three].iterrows()]
        body = (_table(["flag rank", "echo", "explained by", "n", m.title, f"slice − rest [{adj}]", "adjusted p"],
                       erows, num_cols=(0, 3, 4, 6)) if erows else "")
        out.append(f"<details class='fold' id='echoes-{int(r['finding_rank'])}'><summary>Finding "
                   f"{int(r['finding_rank'])}, {e(r['slice'])}: {len(ech)} echo(es) folded under it</summary>"
                   + body + (_triples_fold(ech[three], r["slice"], adj) if three.any() else "") + "</details>")
    # Triples that are echoes are counted under their findings above, not listed again one by one.
    folded3 = flagged["order"] == 3
    folded3 = folded3 & ~flagged["finding"].astype(bool) if "finding" in flagged.columns else folded3 & False
    listed = flagged[~folded3]
    shown = listed.head(top)
    frows = []
    for _, r in shown.iterrows():
        frows.append([str(int(r["flag_rank"])), e(r["slice"]), e(role_words(r, finding_rank)), f"{int(r['n']):,}",
                      _f(r["metric_value"]), f"[{_f(r['metric_low'])}, {_f(r['metric_high'])}]", _f(r["rest_value"]),
                      f"{_f(r['diff'])} [{_f(r['diff_low'])}, {_f(r['diff_high'])}]",
                      f"[{_f(r['diff_low_adj'])}, {_f(r['diff_high_adj'])}]", _p(r["q_value"])])
    what = (f"Every finding and every flagged slice of one or two attributes by flag rank ({len(shown)} of "
            f"{len(flagged)} flagged shown; the {int(folded3.sum())} triple echo(es) are counted under their "
            f"findings above), with its role" if folded3.any() else
            f"Every flagged slice by flag rank ({len(shown)} of {len(flagged)} shown), with its role")
    out.append(f"<details class='fold' id='all-flagged'><summary>{what}</summary>"
               + _table(["flag rank", "slice", "role", "n", m.title, f"{lvl}% interval", "rest",
                         f"slice − rest [{lvl}% interval]", adj, "adjusted p"], frows, num_cols=(0, 3, 4, 6, 9))
               + "</details>")
    if len(flagged) > len(shown):
        out.append(f"<p class='muted'>All {len(flagged)} flagged slices are listed in slices.csv.</p>")
    return "".join(out)


def _triples_fold(tri, finding: str, adj: str) -> str:
    """The triples of values among a finding's echoes, counted by the flagged slice that explains
    each (one row per explaining slice, in order of its triples' best flag rank): a triples run
    folds tens of triples under one finding, most of them the finding or one of its echoes with a
    third value added."""
    via = tri["explained_by"].where(tri["explained_by"].astype(str) != "", finding)
    rows = []
    for name, g in tri.groupby(via.to_numpy(), sort=False):  # tri is by flag rank: first seen = best ranked
        best = g.iloc[0]
        ranks = g["flag_rank"].astype(int)
        rows.append([e(name), f"{len(g):,}", f"{ranks.min()}–{ranks.max()}" if len(g) > 1 else str(ranks.min()),
                     e(best["slice"]),
                     f"{_f(best['diff'])} [{_f(best['diff_low_adj'])}, {_f(best['diff_high_adj'])}]"])
    return (f"<p class='triples-fold'>{len(tri):,} of them are triples of values, counted here by the flagged slice "
            f"that explains each; slices.csv lists every one with its flag rank and role.</p>"
            + _table(["explained by", "triples", "flag ranks", "best-ranked of them", f"its slice − rest [{adj}]"],
                     rows, num_cols=(1, 2)))


def _section(key: str, body: str) -> str:
    title = dict(SECTIONS)[key]
    return f"<section id='{key}'><h2>{e(title)}</h2>{body}</section>"


def find_chromium() -> str | None:
    """Path of a Chromium browser; ``FISSURE_CHROMIUM`` overrides (``none`` disables the PDF route)."""
    forced = os.environ.get("FISSURE_CHROMIUM")
    if forced:
        return None if forced.lower() == "none" else forced
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return "/usr/bin/chromium" if os.path.exists("/usr/bin/chromium") else None


def html_to_pdf(html_text: str, *, timeout: float = 120.0) -> tuple[bytes | None, str | None]:
    """Print the report to PDF with headless Chromium; return (pdf bytes, None) or (None, reason)."""
    exe = find_chromium()
    if exe is None:
        return None, "PDF not written: no Chromium browser found (Debian: apt-get install chromium); HTML written"
    with tempfile.TemporaryDirectory() as tmp:
        src = os.path.join(tmp, "report.html")
        out = os.path.join(tmp, "report.pdf")
        with open(src, "w", encoding="utf-8") as fh:
            fh.write(html_text.replace("<details class='fold'", "<details class='fold' open"))
        args = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-quic",
                f"--user-data-dir={os.path.join(tmp, 'profile')}", "--no-pdf-header-footer",
                "--virtual-time-budget=10000", f"--print-to-pdf={out}", "file://" + src]
        env = {**os.environ, "HOME": tmp, "XDG_CONFIG_HOME": tmp, "XDG_CACHE_HOME": tmp}
        try:
            subprocess.run(args, capture_output=True, timeout=timeout, env=env, check=False)
        except (OSError, subprocess.TimeoutExpired) as exc:
            return None, f"PDF not written: Chromium failed ({type(exc).__name__}); HTML written"
        if not os.path.exists(out) or os.path.getsize(out) == 0:
            return None, "PDF not written: Chromium produced no file; HTML written"
        with open(out, "rb") as fh:
            return fh.read(), None


def _fairness_section(result, found, lvl: int) -> tuple[str, int]:
    """Section 6 and the number of charts it draws."""
    from . import charts

    fr = result.fairness
    fav = str(fr.favorable)
    if fr.favorable_is_positive is None:
        # Three or more classes, one versus rest for the favourable set: it plays the positive class
        # in every criterion.
        pos, neg, fav_pos = fav, f"a class other than {fav}", True
        role = " (one or more classes; every criterion below is computed one versus the rest for this set)"
    else:
        neg, pos = (str(c) for c in result.classes)
        fav_pos = fr.favorable_is_positive
        role = " (the positive prediction)" if fav_pos else " (the negative prediction)"
    unfav = pos if fav == neg else neg
    parts = [f"<p>Favourable outcome: predicted <b>{e(fav)}</b>"
             + role
             + f". The <b>selection rate</b> is the share of a group predicted {e(fav)}; TPR is the share of actual "
               f"{e(pos)} predicted {e(pos)}, FPR the share of actual {e(neg)} predicted {e(pos)}, PPV the share of "
               f"predicted {e(pos)} that are actual {e(pos)}. Reference group per attribute: the one with the highest "
               f"selection rate unless chosen. Groups under {fr.min_group_share:.0%} of rows, and rows with a "
               f"missing protected value, are counted but left out of ratios and tests. Differences are tested "
               f"against the reference group and corrected over {fr.family_size} tests. The four-fifths check "
               f"(29 CFR 1607.4(D)) is exact: a ratio of exactly 4/5 is not below it. It is a US rule of thumb "
               f"from employment selection, not a legal test everywhere.</p>"
             f"<p>A group is <b>flagged</b> when any criterion's adjusted p-value is at most {result.config.alpha:g} "
             f"or it fails the four-fifths check. Each flag says which way it points: a group is <span "
             f"class='flag'>at a disadvantage</span> when its members get the favourable prediction ({e(fav)}) "
             f"less often than the reference group's members with the same true outcome (lower selection rate; "
             + ("lower TPR; lower FPR" if fav_pos else "higher TPR; higher FPR")
             + "), or when "
             + (f"its {e(pos)} predictions are held to a higher bar (higher PPV)" if fav_pos
                else f"its {e(unfav)} predictions are less often borne out (lower PPV)")
             + ". A flag pointing the other way is marked <span class='favour'>in the group's favour</span>: "
               "it still shows a difference from the reference group, to the reference group's cost.</p>"]
    if fr.missing:
        parts.append("<p>Rows with a missing protected value: "
                     + "; ".join(f"{e(k)}: {v:,}" for k, v in fr.missing.items()) + ".</p>")
    for note in fr.notes:
        parts.append(f"<p class='muted'>{e(note)}</p>")
    by_group: dict[tuple[str, str], list[str]] = {}
    for _, r in found.iterrows():
        cls = "disadv" if r["disadvantaged"] else "favour"
        by_group.setdefault((r["attribute"], r["group"]), []).append(
            f"<span class='{cls}'>• {_unbroken(e(r['direction']))} — {_unbroken(e(r['reading']))}</span>")
    header = ["attribute", "group", "n", f"selection rate (predicted {fav})", "impact ratio", "below 4/5", "TPR",
              "FPR", "PPV", "equalized-odds gap", "adj. p selection", "adj. p TPR", "adj. p FPR", "adj. p PPV",
              "flag and direction"]
    rows = []
    for _, r in fr.groups.iterrows():
        below = "<span class='flag'>yes</span>" if r["below_four_fifths"] else "no"
        key = (r["attribute"], r["group"])
        if key in by_group:
            flag = "<b class='flag'>⚑ flagged</b><br>" + "<br>".join(by_group[key])
        elif r["is_reference"]:
            flag = "reference"
        elif r["excluded"]:
            flag = "left out: " + e(r["exclusion_reason"])
        else:
            flag = "—"
        rows.append([_pair_breaks(e(r["attribute"])),
                     _pair_breaks(_unbroken(e(r["group"]))) + (" (reference)" if r["is_reference"] else ""),
                     f"{int(r['n']):,}", _f(r["selection_rate"]), _f(r["impact_ratio"], 3), below, _f(r["tpr"]),
                     _f(r["fpr"]), _f(r["ppv"]), _f(r["equalized_odds_gap"]), _p(r.get("selection_q")),
                     _p(r.get("tpr_q")), _p(r.get("fpr_q")), _p(r.get("ppv_q")), flag])
    parts.append(_table(header, rows, num_cols=(2, 3, 4, 6, 7, 8, 9, 10, 11, 12, 13), cls="wide fair",
                        col_class={14: "reading"}))
    if len(found):
        parts.append("<h3>Fairness findings</h3><ul>"
                     + "".join(f"<li class='{'flag' if r['disadvantaged'] else 'favour'}'>{e(finding_text(r))}</li>"
                               for _, r in found.iterrows()) + "</ul>")
    else:
        parts.append("<p>No protected group was flagged at the chosen settings.</p>")
    n = 0
    for i, attr in enumerate(dict.fromkeys(fr.groups["attribute"])):
        if " & " in attr:
            continue
        parts.append(_figure(charts.selection_rates(fr.groups, attr), f"fig-fair-sel-{i}",
                             f"Bars: the share of each {attr} group predicted {fav} (the favourable outcome), with "
                             f"{lvl}% intervals. The dashed line is four-fifths of the reference group's rate; a "
                             f"bar below it fails the four-fifths check. Overlapping intervals mean the difference "
                             f"may be chance."))
        parts.append(_figure(charts.error_rate_balance(fr.groups, attr), f"fig-fair-eo-{i}",
                             f"Each point is a {attr} group: across, how often actual {neg} are predicted {pos} "
                             f"(FPR); up, how often actual {pos} are predicted {pos} (TPR), with {lvl}% intervals. "
                             f"Groups close together are treated alike on both kinds of error (equalized odds); a "
                             f"group apart along one axis differs on that error."))
        n += 2
    parts.append("<p>The full table, with intervals, p-values and calibration columns, is in "
                 "<code>fairness.csv</code>.</p>")
    return "".join(parts), n


def _reading_words(result, notes) -> str:
    """How the table was read, for the method section (the engine's ``reading`` entry)."""
    if notes["reading"] != "in chunks":
        return "in memory, in one piece"
    rows = result.config.chunk_rows
    return ("in chunks" + (f" of {rows:,} rows" if rows else "") + ", in two passes (the first checks every row and "
            "learns the attribute values and bin edges, the second counts every slice); counts are those of a read "
            "in one piece" + ("; ROC AUC is approximate, within the bound given on the next line"
                              if notes.get("roc_auc_error_bound") is not None else ""))


def _confusion_table(confusion, classes) -> str:
    """A K × K confusion matrix as an HTML table (rows: true class, columns: predicted), with totals."""
    z = [[int(x) for x in row] for row in confusion]
    header = ["true \\ predicted"] + [str(c) for c in classes] + ["total (support)"]
    rows = []
    for c, row in zip(classes, z):
        rows.append([f"<b>{e(c)}</b>"] + [f"{x:,}" for x in row] + [f"{sum(row):,}"])
    rows.append(["total (predicted)"] + [f"{sum(r[j] for r in z):,}" for j in range(len(classes))]
                + [f"{sum(map(sum, z)):,}"])
    return _table(header, rows, num_cols=tuple(range(1, len(classes) + 2)))


def _multiclass_whole(result, find: str) -> tuple[str, int]:
    """The whole table of a multi-class audit: the K × K confusion matrix and the per-class table
    beside the averages; returns the section so far and the number of charts added."""
    from . import charts

    o = result.overall
    classes = [str(c) for c in result.classes]
    pc = o["per_class"]
    prow = [[f"<b>{e(c)}</b>", f"{int(pc[c]['support']):,}", f"{int(pc[c]['predicted']):,}", _f(pc[c]["precision"]),
             _f(pc[c]["recall"]), _f(pc[c]["f1"]), _f(pc[c]["jaccard"])] for c in classes]
    prow.append(["<i>macro average</i>", "", "", _f(o.get("macro_precision")), _f(o.get("macro_recall")),
                 _f(o.get("macro_f1")), ""])
    prow.append(["<i>support-weighted average</i>", "", "", "", "", _f(o.get("weighted_f1")), ""])
    prow.append(["<i>micro average (= accuracy)</i>", "", "", "", "", _f(o.get("micro_f1")), ""])
    find += ("<h3>Per class, one versus the rest</h3><p>Each class c in turn is the positive class and every other "
             "class the negative: precision is the share of rows predicted c that are truly c, recall the share of "
             "rows of true class c predicted c. The averages below the classes are scikit-learn's: macro is the "
             "plain mean over the classes present, weighted uses each class's support.</p>"
             + _table(["class", "support (true rows)", "predicted rows", "precision", "recall", "F1",
                       "Jaccard index"], prow, num_cols=(1, 2, 3, 4, 5, 6)))
    find += ("<h3>Confusion matrix, whole table</h3>" + _confusion_table(o["confusion"], classes))
    find += _figure(charts.class_confusion(o["confusion"], classes, title="Confusion matrix, whole table"),
                    "fig-confusion",
                    "Rows are the true class, columns the prediction; each cell gives its count and its share of "
                    "the row, so the diagonal holds each class's recall. Off the diagonal, a large share shows "
                    "which class the rows of a true class are mistaken for.")
    find += _figure(charts.per_class_bars(result), "fig-per-class",
                    "For each class, one versus the rest: precision, recall and F1, with the class's number of true "
                    "rows under its name; the dotted line is the macro-averaged F1. A class far below the others "
                    "is the one the averages hide.")
    return find, 2


def _drivers_html(result, flagged) -> tuple[str, int]:
    """Which classes drive each flagged slice (see :func:`audit.faces.prose.class_drivers`), and the
    confusion matrix of the worst flagged slice; returns the HTML and the number of charts."""
    from . import charts

    classes = [str(c) for c in result.classes]
    rows = []
    for _, r in flagged.iterrows():
        d = class_drivers(result, r["slice"])
        if not len(d):
            rows.append([str(int(r["flag_rank"])), e(r["slice"]), "<span class='muted'>no class below the rest with "
                         "enough rows</span>", "", "", "", "", ""])
        for i, x in d.iterrows():
            rows.append([str(int(r["flag_rank"])) if i == 0 else "", e(r["slice"]) if i == 0 else "",
                         f"<b>{e(x['class'])}</b>", e(x["rate"]), _f(x["slice_value"]), _f(x["rest_value"]),
                         _f(x["gap"]), f"{int(x['slice_rows']):,} / {int(x['rest_rows']):,}"])
    out = ("<h3>Which classes drive each flagged slice</h3><p>"
           + e(DRIVERS_RULE.format(min_rows=result.config.min_metric_support))
           + " These gaps are descriptive: they point at where to look and carry no test or correction of their "
             "own.</p>"
           + _table(["flag rank", "slice", "class", "rate", "slice", "rest", "slice − rest", "rows behind the rate "
                     "(slice / rest)"], rows, num_cols=(0, 4, 5, 6, 7)))
    worst = flagged.iloc[0]["slice"]
    conf = charts.slice_confusion(result, worst)
    out += (f"<h3>Confusion matrix of the worst flagged slice: {e(worst)}</h3>" + _confusion_table(conf, classes))
    out += _figure(charts.class_confusion(conf, classes, title=f"Confusion matrix, {worst}"), "fig-slice-confusion",
                   f"The same grid for the rows of {worst} only: compare each row's shares with the whole table's "
                   f"above to see which true class the slice gets wrong, and as what.")
    return out, 1
