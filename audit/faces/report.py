"""The governance slice report: one self-contained HTML file (and optionally a PDF) built
from the audit result. Every user-supplied string is HTML-escaped; Plotly's script is
inlined once; element ids are fixed so the same audit gives the same file apart from the
line that carries the date.
"""
from __future__ import annotations

import datetime as _dt
import html
import os
import shutil
import subprocess
import tempfile

import plotly
import plotly.io as pio

from . import charts
from .prose import method_notes

SECTIONS = [
    ("identity", "1. Audit identity"),
    ("data", "2. Data examined"),
    ("method", "3. How the numbers were made"),
    ("findings", "4. What the audit found"),
    ("fairness", "5. Group fairness"),
    ("limits", "6. Limits of this audit"),
    ("cautions", "7. Cautions on reading the flags"),
    ("signoff", "8. Review and sign-off"),
    ("reproduce", "9. Reproducing this audit"),
]

from .prose import CAUTION, limitations  # noqa: E402  (wording shared with summary.json)

CSS = """
:root { --ink:#1d3557; --flag:#d1651f; --muted:#5c6470; --rule:#d5dae1; }
body { font-family: 'DejaVu Sans', Arial, sans-serif; color: var(--ink); max-width: 1000px; margin: 2em auto;
       padding: 0 1.2em; line-height: 1.45; font-size: 14px; }
h1 { font-size: 24px; margin-bottom: .2em; } h2 { font-size: 18px; border-bottom: 2px solid var(--ink);
     padding-bottom: .2em; margin-top: 2em; } h3 { font-size: 15px; margin-top: 1.4em; }
table { border-collapse: collapse; margin: .6em 0 1em; font-size: 12.5px; }
th, td { border: 1px solid var(--rule); padding: 3px 7px; text-align: left; vertical-align: top; }
th { background: #eef2f7; } td.num { text-align: right; font-variant-numeric: tabular-nums; }
.flag { color: var(--flag); font-weight: bold; } .muted { color: var(--muted); }
.caution { border-left: 5px solid var(--flag); background: #fdf3ec; padding: .6em 1em; margin: 1em 0; }
pre { background: #f4f6f9; padding: .8em; overflow-x: auto; font-size: 12px; white-space: pre-wrap; }
.chart { width: 900px; max-width: 100%; margin: .6em 0; page-break-inside: avoid; }
.blank { display: inline-block; min-width: 16em; border-bottom: 1px solid var(--ink); height: 1.2em; }
@page { margin: 16mm 14mm; }  /* no fixed size: prints on A4 or Letter as the printer is set */
@media print {
  body { max-width: none; margin: 0; font-size: 11px; }
  section { page-break-before: always; } section#identity { page-break-before: avoid; }
  .chart { width: 170mm; height: auto; } table { page-break-inside: auto; } tr { page-break-inside: avoid; }
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
    try:
        xf = float(x)
    except (TypeError, ValueError):
        return "—"
    return "—" if xf != xf else (f"{xf:.2e}" if xf < 1e-3 else f"{xf:.4f}")


def _table(header, rows, num_cols=()) -> str:
    out = ["<table><thead><tr>" + "".join(f"<th>{e(h)}</th>" for h in header) + "</tr></thead><tbody>"]
    for r in rows:
        cells = []
        for i, v in enumerate(r):
            cls = ' class="num"' if i in num_cols else ""
            cells.append(f"<td{cls}>{v}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def _figure(fig, div_id: str) -> str:
    fig = fig.update_layout(width=900)
    body = pio.to_html(fig, full_html=False, include_plotlyjs=False, div_id=div_id,
                       config={"displaylogo": False, "responsive": False, "displayModeBar": False})
    return f'<div class="chart">{body}</div>'


def build_html(result, *, command: str | None = None, created: str | None = None, top: int | None = None) -> str:
    """The report as one HTML string (self-contained, no external resources)."""
    cfg = result.config
    m = result.metric
    notes = method_notes(result)
    created = created or _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
    st = result.status_counts()
    lvl = int(round(cfg.level * 100))
    parts: list[str] = []
    title = f"Slice audit of {cfg.model_name}" if cfg.model_name else "Slice audit"

    # 1. identity
    ident = [("Model", e(cfg.model_name or "(not given)")), ("Model version", e(cfg.model_version or "(not given)")),
             ("Intended use", e(cfg.intended_use or "(not given)")),
             ("Tool", f"Fissure {e(result.version)}"), ("Configuration hash (SHA-256)", f"<code>{cfg.digest()}</code>")]
    parts.append(_section("identity", f"<p id='date-line'>Audit date (UTC): {e(created)}</p>"
                          + _table(["item", "value"], ident)))

    # 2. data
    src = result.source
    rows = [("File", e(src.name or "(in-memory table)")), ("SHA-256", f"<code>{e(src.sha256 or '—')}</code>"),
            ("Rows", f"{result.n_rows:,}"), ("Label column", e(cfg.label)),
            ("Classes", f"negative {e(result.classes[0])!s}, positive <b>{e(result.classes[1])}</b>"
                        + (" (inferred)" if result.positive_inferred else " (given)")),
            ("Prediction", e(f"column '{cfg.pred}'") if result.prediction_source == "column"
             else e(f"probability column '{cfg.score}' ≥ threshold {cfg.threshold:g}")),
            ("Probability column", e(cfg.score or "(none)"))]
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

    # 3. method
    frows = [[e(k), e(v)] for k, v in notes["formulas"].items()]
    meth = (f"<p>Audited metric: <b>{e(m.title)}</b> = {e(m.formula)}; "
            f"{'higher' if m.higher_is_worse else 'lower'} is worse.</p>"
            + _table(["metric", "formula"], frows)
            + _table(["step", "method"], [
                ["Intervals for rates", e(f"{notes['interval']['title']} at {lvl}% ({notes['interval']['reference']})")],
                ["Interval for F1", e(notes["interval"]["f1"])], ["Intervals for mean losses", e(notes["interval"]["means"])],
                ["Interval of slice − rest", e(notes["interval"]["differences"])],
                ["Test of slice against rest", e(notes["test"])], ["Effect size", e(notes["effect_size"])],
                ["Multiple-testing correction", e(f"{notes['correction']['title']}: controls the "
                                                  f"{notes['correction']['controls']} ({notes['correction']['reference']}) "
                                                  f"over the family of {result.family_size} tested slices of orders 1 and 2")],
                ["Minimum support", e(f"{cfg.min_support} rows, and {cfg.min_metric_support} rows in the metric's "
                                      f"denominator ({m.denominator}), in the slice and in the rest")],
                ["Flag rule", e(notes["flag_rule"])], ["Ranking", e(notes["ranking"])],
                ["Undefined values", e(notes["undefined"])], ["Log-loss clipping", e(notes["log_loss_clipping"])],
                ["ROC AUC", e(notes["roc_auc"])]]))
    parts.append(_section("method", meth))

    # 4. findings
    o = result.overall
    orows = []
    for k in ["accuracy", "error_rate", "precision", "recall", "specificity", "fpr", "fnr", "f1", "log_loss", "brier"]:
        if o.get(k) is None:
            continue
        ci = f"[{_f(o.get(k + '_low'))}, {_f(o.get(k + '_high'))}]" if o.get(k + "_low") is not None else "—"
        orows.append([e(k), _f(o[k]), ci])
    if o.get("roc_auc") is not None:
        orows.append(["roc_auc", _f(o["roc_auc"]), "—"])
    find = f"<h3>The whole table ({result.n_rows:,} rows)</h3>" + _table(["metric", "value", f"{lvl}% interval"], orows,
                                                                         num_cols=(1,))
    find += _figure(charts.confusion(o, result.classes, title="Confusion matrix, whole table"), "fig-confusion")
    find += ("<p>" + f"Slices tested: <b>{st.get('tested', 0)}</b> (family size m = {result.family_size}); below "
             f"support: <b>{st.get('below_support', 0)}</b>; without enough rest: {st.get('no_rest', 0)}; undefined: "
             f"{st.get('undefined', 0)}; <span class='flag'>flagged: {st['flagged']}</span>.</p>")
    flagged = result.flagged()
    top = len(flagged) if top is None else top
    if len(flagged):
        frows = []
        for _, r in flagged.head(top).iterrows():
            frows.append([str(int(r["rank"])), e(r["slice"]), f"{int(r['n']):,}", _f(r["metric_value"]),
                          f"[{_f(r['metric_low'])}, {_f(r['metric_high'])}]", _f(r["rest_value"]),
                          f"{_f(r['diff'])} [{_f(r['diff_low'])}, {_f(r['diff_high'])}]", _p(r["q_value"])])
        find += (f"<h3>Flagged slices, worst first ({min(top, len(flagged))} of {len(flagged)} shown)</h3>"
                 + _table(["rank", "slice", "n", m.name, f"{lvl}% interval", "rest", "slice − rest [interval]",
                           "adjusted p"], frows, num_cols=(0, 2, 3, 5, 7)))
        if len(flagged) > top:
            find += f"<p class='muted'>All {len(flagged)} flagged slices are listed in slices.csv.</p>"
    else:
        find += "<p>No slice was flagged at the chosen settings.</p>"
    if len(result.ranked()):
        find += _figure(charts.top_slices(result, k=15), "fig-top")
        find += _figure(charts.noise_band(result), "fig-noise")
    pair = charts.worst_pair(result)
    if pair:
        find += _figure(charts.pair_heatmap(result, *pair), "fig-pair")
    find += ("<p>The full table of every slice, tested or not, with counts, metrics, intervals, differences, "
             "p-values and adjusted p-values is in <code>slices.csv</code> beside this report; "
             "<code>summary.json</code> holds this report's content in machine-readable form.</p>")
    parts.append(_section("findings", find))

    # 5. fairness
    if result.fairness is not None:
        parts.append(_section("fairness", _fairness_section(result.fairness, e=e, f=_f, p=_p, figure=_figure)))
    else:
        parts.append(_section("fairness", "<p>No protected attributes were named for this audit "
                                          "(<code>--protected</code>), so no group-fairness criteria were checked.</p>"))

    # 6. limits
    limits = [f"<b>{e(t)}.</b> {e(x)}" for t, x in limitations(result)]
    parts.append(_section("limits", "<ul>" + "".join(f"<li>{x}</li>" for x in limits) + "</ul>"))

    # 7. cautions
    parts.append(_section("cautions", f"<div class='caution'>{e(CAUTION)}</div>"
                          "<p>Protected and sensitive attributes used in this audit should be held and processed "
                          "under the organisation's data-protection rules.</p>"))

    # 8. sign-off
    signs = [[e(role), "<span class='blank'></span>", "<span class='blank'></span>", "<span class='blank'></span>"]
             for role in ("Prepared by", "Independent review by", "Approved by")]
    sign = _table(["role", "name", "signature", "date"], signs)
    drows = [[str(int(r["rank"])), e(r["slice"]), "<span class='blank'></span>", "<span class='blank'></span>"]
             for _, r in flagged.head(top).iterrows()]
    if drows:
        sign += ("<h3>Decision on each finding</h3><p class='muted'>For example: accept with rationale, remediate, "
                 "monitor, escalate.</p>" + _table(["rank", "flagged slice", "decision", "owner / due date"], drows))
    parts.append(_section("signoff", sign))

    # 9. reproduce
    env = result.environment
    env = {**env, "plotly": plotly.__version__}
    repro = ("<p>Run the same audit again with the configuration below saved as <code>fissure.toml</code> "
             "(written beside this report):</p>"
             f"<pre>fissure audit {e(src.name or 'DATA')} --config fissure.toml --out audit-again</pre>")
    if command:
        repro += f"<p>The command that produced this report:</p><pre>{e(command)}</pre>"
    repro += f"<h3>Configuration (TOML)</h3><pre id='config-toml'>{e(cfg.to_toml())}</pre>"
    repro += "<h3>Software</h3>" + _table(["component", "version"], [[e(k), e(v)] for k, v in env.items()])
    parts.append(_section("reproduce", repro))

    plotly_js = plotly.offline.get_plotlyjs()
    head = (f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>{e(title)}</title>"
            f"<meta name='generator' content='Fissure {e(result.version)}'>"
            f"<style>{CSS}</style><script type='text/javascript'>{plotly_js}</script></head><body>")
    intro = (f"<h1>{e(title)}</h1><p class='muted'>Prepared by Fissure {e(result.version)}</p>"
             f"<div class='caution'>{e(CAUTION)}</div>")
    return head + intro + "".join(parts) + "</body></html>\n"


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
            fh.write(html_text)
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


def _fairness_section(fr, *, e, f, p, figure) -> str:
    parts = [f"<p>Favourable outcome: predicted <b>{e(fr.favorable)}</b>"
             + (" (the positive prediction)" if fr.favorable_is_positive else "")
             + f". Reference group per attribute: the one with the highest selection rate unless chosen. Groups "
               f"under {fr.min_group_share:.0%} of rows, and rows with a missing protected value, are counted but left "
               f"out of ratios and tests. Differences are tested against the reference group and corrected over "
               f"{fr.family_size} tests. The four-fifths check (29 CFR 1607.4(D)) is exact: a ratio of exactly 4/5 is "
               f"not below it. It is a US rule of thumb from employment selection, not a legal test everywhere.</p>"]
    if fr.missing:
        parts.append("<p>Rows with a missing protected value: "
                     + "; ".join(f"{e(k)}: {v:,}" for k, v in fr.missing.items()) + ".</p>")
    for note in fr.notes:
        parts.append(f"<p class='muted'>{e(note)}</p>")
    header = ["attribute", "group", "n", "selection rate", "impact ratio", "below 4/5", "TPR", "FPR", "PPV",
              "equalized-odds gap", "adjusted p (selection)", "left out"]
    rows = []
    for _, r in fr.groups.iterrows():
        below = "<span class='flag'>yes</span>" if r["below_four_fifths"] else "no"
        rows.append([e(r["attribute"]), e(r["group"]) + (" (reference)" if r["is_reference"] else ""),
                     f"{int(r['n']):,}", f(r["selection_rate"]), f(r["impact_ratio"], 3), below, f(r["tpr"]),
                     f(r["fpr"]), f(r["ppv"]), f(r["equalized_odds_gap"]), p(r.get("selection_q")),
                     e(r["exclusion_reason"]) if r["excluded"] else ""])
    out = ["<table><thead><tr>" + "".join(f"<th>{e(h)}</th>" for h in header) + "</tr></thead><tbody>"]
    out += ["<tr>" + "".join(f"<td>{c}</td>" for c in row) + "</tr>" for row in rows]
    out.append("</tbody></table>")
    parts.append("".join(out))
    for i, attr in enumerate(dict.fromkeys(fr.groups["attribute"])):
        if " & " in attr:
            continue
        parts.append(figure(charts.selection_rates(fr.groups, attr), f"fig-fair-sel-{i}"))
        parts.append(figure(charts.error_rate_balance(fr.groups, attr), f"fig-fair-eo-{i}"))
    parts.append("<p>The full table, with intervals, p-values and calibration columns, is in "
                 "<code>fairness.csv</code>.</p>")
    return "".join(parts)
