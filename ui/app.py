"""Fissure's page: bring a predictions table, say what the columns are, read the audit.

The page computes nothing itself: every number comes from ``audit.run`` and every chart
from ``audit.faces.charts``; downloads are built by ``audit.faces.export`` and
``audit.faces.report`` from the same result object the page shows, only when asked for.

What the page shows is what it computed: every widget whose choices depend on something
(the file, the label, the result) is keyed on what it depends on, so a new file, label,
metric or filter gives a fresh widget showing the value the numbers below it used.

    streamlit run ui/app.py
"""
from __future__ import annotations

import datetime as _dt
import hashlib
import os
import sys
import time

import pandas as pd
import streamlit as st

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
if ROOT not in sys.path:
    sys.path.insert(0, ROOT)

from audit.engine import ALL, run  # noqa: E402
from audit.errors import AuditInputError  # noqa: E402
from audit.faces import charts  # noqa: E402
from audit.faces.export import fairness_csv, slices_csv, summary_json  # noqa: E402
from audit.stats.correct import CORRECTIONS  # noqa: E402
from audit.stats.intervals import INTERVALS  # noqa: E402
from audit.stats.measure import METRICS  # noqa: E402
from ui import fairness_view, intake  # noqa: E402
from ui.memo import REPORTS, RESULTS  # noqa: E402
from ui.wording import WIDGETS, check_reference, md, page_error, parse_reference  # noqa: E402

DEMO_PATH = os.path.join(ROOT, "demo", "predictions.csv")
CAUTION = ("**Read flags as signals, not verdicts.** A flag means a slice's numbers differ from the rest of the rows "
           "by more than chance would explain. It is not a finding of discrimination and not a legal conclusion. "
           "What a flag means, and what to do about it, is for your organisation's compliance function and qualified "
           "counsel under applicable law.")
SENSITIVE = ("Protected attributes are sensitive personal data: handle the file and these results under your "
             "organisation's data-protection rules.")
RANKED_COLUMNS = ["rank", "slice", "order", "n", "metric_value", "metric_low", "metric_high", "rest_value", "diff",
                  "diff_low", "diff_high", "p_value", "q_value", "flagged"]
NONE = "(none)"

st.set_page_config(page_title="Fissure slice audit", layout="wide")
try:
    MAX_UPLOAD_MB = int(st.get_option("server.maxUploadSize"))
except Exception:  # outside a server (tests) the option may be unset
    MAX_UPLOAD_MB = 150
T0 = time.perf_counter()
TIMINGS: dict[str, float] = {}


def _tick(step: str, since: float) -> float:
    now = time.perf_counter()
    TIMINGS[step] = TIMINGS.get(step, 0.0) + now - since
    return now


# ----------------------------------------------------------------------------- widget state
def _h(*parts) -> str:
    return hashlib.blake2b(repr(parts).encode(), digest_size=5).hexdigest()


def remember(name: str, value):
    st.session_state.setdefault("_memory", {})[name] = value
    return value


def recall(name: str, default=None):
    return st.session_state.get("_memory", {}).get(name, default)


def choose(where, label: str, options: list, guess, name: str, *deps, **kw):
    """A select box keyed on its options and what they depend on: when they change, a new widget
    shows the previous choice if it is still offered, else the guess, on its first render."""
    prev = recall(name)
    default = prev if prev in options else (guess if guess in options else options[0])
    value = where.selectbox(label, options, index=options.index(default), key=f"{name}-{_h(options, *deps)}", **kw)
    return remember(name, value)


def choose_many(where, label: str, options: list, guess: list, name: str, *deps, **kw):
    prev = recall(name)
    default = [x for x in prev if x in options] if prev is not None else [x for x in guess if x in options]
    value = where.multiselect(label, options, default=default, key=f"{name}-{_h(options, *deps)}", **kw)
    return remember(name, list(value))


def fmt(x, d=4) -> str:
    try:
        x = float(x)
    except (TypeError, ValueError):
        return "—"
    return "—" if x != x else f"{x:.{d}f}"


# ----------------------------------------------------------------------------- the file
def demo_bytes() -> bytes:
    if not os.path.exists(DEMO_PATH):
        from demo.generate import generate

        tmp = DEMO_PATH + f".{os.getpid()}.part"
        generate().to_csv(tmp, index=False)
        os.replace(tmp, DEMO_PATH)
    with open(DEMO_PATH, "rb") as fh:
        return fh.read()


def file_digest(file_id: str, data: bytes) -> str:
    """SHA-256 of an upload, computed once per uploaded file (the key of every cache)."""
    memo = st.session_state.setdefault("_digests", {})
    if file_id not in memo:
        memo.clear()
        memo[file_id] = intake.digest(data)
    return memo[file_id]


st.title("Fissure · slice audit of a classifier")
st.caption("Find the customer groups where a model that looks fine on average does worse: every attribute value and "
           "every pair, with intervals, tests against the rest of the rows and control of false discoveries.")

st.header("1 · Bring the predictions")
upload = st.file_uploader(f"Predictions table (CSV, Parquet or Excel, up to {MAX_UPLOAD_MB} MB): one row per case, "
                          "with the true label, a predicted label and/or probability, and customer attributes",
                          type=["csv", "tsv", "parquet", "xlsx"], key="upload")
t = time.perf_counter()
if upload is not None:
    data, name = upload.getvalue(), upload.name
    sha = file_digest(getattr(upload, "file_id", name), data)
    st.caption(f"Using the uploaded file **{md(name)}** ({len(data) / 1e6:.2f} MB).")
else:
    data, name = demo_bytes(), "predictions.csv"
    sha = file_digest(f"demo:{len(data)}", data)
    st.caption(f"No file uploaded: showing the **demo**, a fictional lender's 90-day delinquency model on synthetic "
               f"applicants (see demo/README.md for the weaknesses planted in it). A file over {MAX_UPLOAD_MB} MB is "
               f"refused by the uploader (a red mark on the file) and the page stays on the demo: use the command line "
               f"(`fissure audit`) for larger tables.")
t = _tick("digest", t)
try:
    table = intake.read_upload(data, name, sha)
except AuditInputError as exc:
    st.error(f"This file cannot be audited: {page_error(exc)} Choose another file above.")
    st.stop()
del data  # the parsed table is cached; the page keeps no second copy of the bytes
t = _tick("read", t)
sig = f"{sha[:16]}-{name}"
if st.session_state.get("_file") != sig:
    st.session_state["_file"] = sig
    st.session_state["_memory"] = {}  # a new table: forget choices that named the old table's columns
df = table.df
cols = list(df.columns)

# ----------------------------------------------------------------------------- settings
st.header("2 · Say what the columns are")
st.caption(f"{table.n_rows:,} rows, {len(cols)} columns. The choices below are guesses from the column names and "
           "values: check them.")
c1, c2, c3 = st.columns(3)
score_guess = intake.guess_score(table)
label_guess = intake.guess_label(table, score_guess)
label = choose(c1, WIDGETS["label"], cols, label_guess, "label", sig)
score_opts = [NONE] + [c for c in cols if c != label]
score = choose(c2, WIDGETS["score"], score_opts, score_guess or NONE, "score", sig, label)
score = None if score == NONE else score
pred_opts = [NONE] + [c for c in cols if c not in (label, score)]
pred = choose(c3, WIDGETS["pred"] + " (optional when a probability is given: else probability ≥ threshold)",
              pred_opts, intake.guess_pred(table, label, score) or NONE, "pred", sig, label, score)
pred = None if pred == NONE else pred
looks_pred = [c for c in intake.pred_like_columns(table, label) if c != pred]
if looks_pred and pred is None:
    st.caption(f"Column {', '.join(repr(md(c)) for c in looks_pred)} looks like a predicted label: choose it under "
               f"**{WIDGETS['pred']}** to audit those decisions rather than probability ≥ threshold.")

candidates = [c for c in cols if c not in (label, score, pred)]
sliceable, not_sliceable = intake.screen(table, candidates, label=label)
values = intake.label_values(table, label)
roles = (sig, label, score, pred)
t = _tick("guess", t)

with st.form("settings"):
    c4, c5, c6 = st.columns(3)
    positive = choose(c4, WIDGETS["positive"], ["(infer)"] + values, "(infer)", "positive", *roles,
                      help="Inferred for 0/1, false/true, no/yes labels; pick it otherwise.")
    threshold = c5.number_input(WIDGETS["threshold"], 0.0, 1.0, 0.5, 0.01, key=f"threshold-{sig}",
                                disabled=score is None or pred is not None,
                                help="Used only when the prediction comes from the probability column.")
    bins = c6.number_input(WIDGETS["bins"], 1, 20, 5, 1, key=f"bins-{sig}")
    attrs = choose_many(st, WIDGETS["attributes"], candidates, sliceable, "attributes", *roles)
    if not_sliceable:
        st.caption("Not preselected: " + "; ".join(f"**{md(k)}**: {md(v)}" for k, v in not_sliceable.items())
                   + ". Choosing one anyway: the audit skips it and says why.")
    c7, c8, c9, c10 = st.columns(4)
    metric_names = [k for k, m in METRICS.items() if score is not None or not m.needs_score]
    metric = choose(c7, WIDGETS["metric"], metric_names, "error_rate", "metric", sig, score is None,
                    format_func=lambda k: f"{k} — {METRICS[k].title}")
    min_support = c8.number_input(WIDGETS["min_support"], 1, 100000, 30, 5, key=f"min_support-{sig}")
    min_metric = c9.number_input(WIDGETS["min_metric_support"], 1, 100000, 10, 5, key=f"min_metric-{sig}",
                                 help="For recall, the actual positives; for precision, the predicted positives.")
    max_order = c10.selectbox(WIDGETS["max_order"], [2, 1], index=0, key=f"max_order-{sig}",
                              format_func=lambda o: "single attributes and pairs" if o == 2 else "single attributes")
    c11, c12, c13, c14 = st.columns(4)
    alpha = c11.number_input(WIDGETS["alpha"], 0.001, 0.5, 0.05, 0.01, format="%.3f", key=f"alpha-{sig}")
    correction = c12.selectbox(WIDGETS["correction"], list(CORRECTIONS), index=0, key=f"correction-{sig}",
                               format_func=lambda k: f"{CORRECTIONS[k].title}")
    interval = c13.selectbox(WIDGETS["interval"], list(INTERVALS), index=0, key=f"interval-{sig}",
                             format_func=lambda k: INTERVALS[k].title)
    level = c14.select_slider(WIDGETS["level"], [0.8, 0.9, 0.95, 0.99], value=0.95, key=f"level-{sig}")
    st.markdown("**Group fairness** (optional). " + SENSITIVE)
    f1, f2, f3 = st.columns(3)
    protected = choose_many(f1, WIDGETS["protected"], candidates, [], "protected", *roles)
    favorable = choose(f2, WIDGETS["favorable"], ["(positive prediction)"] + values, "(positive prediction)",
                       "favorable", *roles, help="For a delinquency model, being predicted not delinquent is favourable.")
    min_share = f3.number_input(WIDGETS["min_group_share"], 0.0, 0.5, 0.02, 0.01, key=f"min_share-{sig}")
    reference_text = st.text_input(WIDGETS["reference"] + " (optional; default: the highest selection rate), e.g. "
                                   "sex=female; age_band=35-44", key=f"reference-{sig}")
    st.form_submit_button("Run the audit")

if score is None and pred is None:
    st.error(f"Choose a column under **{WIDGETS['score']}** or under **{WIDGETS['pred']}**: the audit needs the "
             "model's predictions.")
    st.stop()
if not attrs:
    st.error(f"Choose at least one column under **{WIDGETS['attributes']}**.")
    st.stop()

settings = {
    "label": label, "score": score, "pred": pred, "positive": None if positive == "(infer)" else positive,
    "threshold": float(threshold), "bins": int(bins), "attributes": tuple(attrs), "metric": metric,
    "min_support": int(min_support), "min_metric_support": int(min_metric), "alpha": float(alpha),
    "correction": correction, "interval": interval, "level": float(level), "max_order": int(max_order),
}
refs, bad_refs = parse_reference(reference_text)
problem = check_reference(refs, bad_refs, protected)
if problem:
    st.error(problem)
    st.stop()
if protected:
    settings["protected"] = tuple(protected)
    settings["favorable"] = None if favorable == "(positive prediction)" else favorable
    settings["min_group_share"] = float(min_share)
    if refs:
        settings["reference"] = tuple(sorted(refs.items()))
key = tuple(sorted(settings.items()))


def _audit():
    kw = dict(settings)
    if "reference" in kw:
        kw["reference"] = dict(kw["reference"])
    created = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
    return run(df, source=table.source, **kw), created  # one timestamp per run: report and summary share it


t = _tick("settings", t)
try:
    with st.spinner("Auditing every slice…"):
        result, created = RESULTS.get_or_make((sha, name, key), _audit)
except AuditInputError as exc:
    st.error(f"The audit could not run: {page_error(exc)}")
    st.stop()
t = _tick("audit", t)
run_id = _h(sha, key)

m = result.metric
lvl = int(round(result.config.level * 100))
st.info(CAUTION)

# ----------------------------------------------------------------------------- overview
st.header("3 · The whole model first")
o = result.overall
stc = result.status_counts()
k1, k2, k3, k4, k5 = st.columns(5)
k1.metric("Rows", f"{result.n_rows:,}")
k2.metric(f"Overall {m.name}", fmt(o.get(m.name)))
k3.metric("Slices tested", f"{stc.get('tested', 0):,}", help=f"family size m = {result.family_size}")
k4.metric("Below support", f"{stc.get('below_support', 0):,}")
k5.metric("Flagged", f"{stc.get('flagged', 0):,}", help="Slices that do worse than the rest of the rows, with "
          "adjusted p at or below the threshold. Slices that do better are never flagged.")
pos_note = " (inferred)" if result.positive_inferred else ""
st.caption(f"Label **{md(label)}**; positive class: **{md(result.classes[1])}**{pos_note}; negative: "
           f"{md(result.classes[0])}. "
           + (f"Prediction: **{md(score)}** ≥ {result.config.threshold:g}." if result.prediction_source == "threshold"
              else f"Prediction: the column **{md(pred)}**."))
skipped = {**result.skipped}
if skipped:
    st.caption("Chosen but not sliced by the audit: " + "; ".join(f"**{md(k)}**: {md(v)}" for k, v in skipped.items()))
left, right = st.columns([3, 2])
rows = []
for k in ["accuracy", "error_rate", "precision", "recall", "specificity", "fpr", "fnr", "f1", "log_loss", "brier",
          "roc_auc"]:
    if o.get(k) is None:
        continue
    rows.append({"metric": k, "value": o[k], f"{lvl}% low": o.get(k + "_low"), f"{lvl}% high": o.get(k + "_high")})
NUM4 = st.column_config.NumberColumn(format="%.4f")
left.dataframe(pd.DataFrame(rows), hide_index=True, width="stretch", height=35 * (len(rows) + 1) + 3,
               column_config={"value": NUM4, f"{lvl}% low": NUM4, f"{lvl}% high": NUM4})
right.plotly_chart(charts.confusion(o, result.classes, title="Confusion matrix, all rows"), key="confusion_all")

# ----------------------------------------------------------------------------- ranked slices
st.header("4 · Worst slices")
ranked = result.ranked()
attr_names = [a.name for a in result.attributes]
g1, g2, g3 = st.columns([3, 2, 1])
pick_attrs = choose_many(g1, "Only slices involving", attr_names, [], "filter_attrs", sig, attr_names)
order_pick = g2.radio("Slice kind", ["all", "single attribute", "pair"], horizontal=True, key="filter_order")
only_flagged = g3.checkbox("Flagged only", value=False, key="filter_flagged")


def _filtered(frame: pd.DataFrame, *, flagged: bool) -> pd.DataFrame:
    if pick_attrs:
        frame = frame[frame["attribute_1"].isin(pick_attrs) | frame["attribute_2"].isin(pick_attrs)]
    if order_pick != "all":
        frame = frame[frame["order"] == (1 if order_pick == "single attribute" else 2)]
    if flagged:
        frame = frame[frame["flagged"]]
    return frame


view = _filtered(ranked, flagged=only_flagged)
st.caption(f"{len(view):,} of {len(ranked):,} tested slices, worst first by the cautious end of the {lvl}% interval "
           f"of (slice − rest) for {md(m.title)}. Flags cover only slices that do **worse** than the rest of the rows; "
           "a slice that does significantly better is listed but never flagged.")
PVAL = st.column_config.NumberColumn(format="%.2e")
st.dataframe(view[RANKED_COLUMNS].rename(columns={"metric_value": m.name}), hide_index=True, width="stretch",
             height=360, column_config={m.name: NUM4, "metric_low": NUM4, "metric_high": NUM4, "rest_value": NUM4,
                                        "diff": NUM4, "diff_low": NUM4, "diff_high": NUM4, "p_value": PVAL,
                                        "q_value": st.column_config.NumberColumn("adjusted p", format="%.2e")})
t = _tick("ranked table", t)
if len(view):
    st.plotly_chart(charts.top_slices(result, k=15, ranked=view), key="top_chart")

# ----------------------------------------------------------------------------- one slice
st.header("5 · Inspect one slice")
untested = result.slices[(result.slices["status"] != "tested") & (result.slices["order"] > 0)]
choices = view["slice"].tolist() + ([] if only_flagged else _filtered(untested, flagged=False)["slice"].tolist())
choices = [c for c in choices if c != ALL]
if not choices:
    st.caption("No slice matches the filters above.")
else:
    chosen = choose(st, "Slice (follows the filters above)", choices, choices[0], "slice_pick", run_id)
    s = result.slice(chosen)
    rest = result.rest_counts(chosen)
    st.markdown(f"**{md(chosen)}** · n = **{int(s['n']):,}** rows · errors {int(s['errors']):,} · "
                f"tp {int(s['tp']):,} · fp {int(s['fp']):,} · fn {int(s['fn']):,} · tn {int(s['tn']):,}")
    a, b = st.columns(2)
    a.plotly_chart(charts.confusion(s, result.classes, title=f"In the slice (n={int(s['n']):,})"), key="cm_slice")
    b.plotly_chart(charts.confusion(rest, result.classes, title=f"In the rest (n={rest['n']:,})"), key="cm_rest")
    comp_df = result.compare(chosen)
    st.markdown(f"Status: **{md(s['status'])}** {md(s['status_reason'])}  ·  this slice holds "
                f"**{comp_df.attrs['share_of_errors']:.1%}** of all errors and {s['share']:.1%} of all rows.")
    st.dataframe(comp_df, hide_index=True, width="stretch",
                 column_config={c: NUM4 for c in comp_df.columns[1:]})
    if result.overall.get("log_loss") is not None:
        st.caption(f"Mean losses in the slice: log loss {fmt(s['log_loss'])} [{fmt(s['log_loss_low'])}, "
                   f"{fmt(s['log_loss_high'])}], Brier {fmt(s['brier'])} [{fmt(s['brier_low'])}, "
                   f"{fmt(s['brier_high'])}]" + (f", ROC AUC {fmt(s['roc_auc'])}" if s["roc_auc"] == s["roc_auc"]
                                                 else "") + ".")
    if s["status"] == "tested":
        st.markdown(f"Audited metric **{md(m.name)}**: slice {fmt(s['metric_value'])} vs rest {fmt(s['rest_value'])}; "
                    f"difference {fmt(s['diff'])} [{fmt(s['diff_low'])}, {fmt(s['diff_high'])}], "
                    f"{md(s['test'])} test, p = {s['p_value']:.3g}, adjusted p = {s['q_value']:.3g}"
                    + (" — **flagged**." if s["flagged"] else
                       (" — not flagged: it does better than the rest." if not s["worse_than_rest"] else ".")))

# ----------------------------------------------------------------------------- two attributes
if len(attr_names) >= 2 and result.config.max_order == 2:
    st.header("6 · Two attributes at once")
    pair = charts.worst_pair(result) or (attr_names[0], attr_names[1])
    h1, h2 = st.columns(2)
    ha = choose(h1, "Rows", attr_names, pair[0], "heat_a", run_id)
    hb_opts = [x for x in attr_names if x != ha]
    hb = choose(h2, "Columns", hb_opts, pair[1], "heat_b", run_id, ha)
    st.plotly_chart(charts.pair_heatmap(result, ha, hb), key="heatmap")

# ----------------------------------------------------------------------------- noise
st.header("7 · Where noise ends")
st.caption("Each dot is a tested slice. The shaded band is where a slice that behaves like the whole table would "
           "land by chance alone, before allowing for the number of slices tested; small slices need a bigger gap. "
           "A slice is flagged only when it does worse than the rest and its test survives the correction for "
           "testing every slice, so dots just outside the band can stay unflagged.")
st.plotly_chart(charts.noise_band(result), key="noise")

# ----------------------------------------------------------------------------- fairness
if result.fairness is not None:
    st.header("8 · Group fairness")
    st.caption(SENSITIVE + " The four-fifths rule is a US rule of thumb from employment-selection guidelines, not a "
               "legal test everywhere.")
    fairness_view.show(result.fairness, st, key=run_id)

# ----------------------------------------------------------------------------- downloads
st.header("Take the results away")
st.caption("Each file is built when you click it, from the result shown above.")


def _report_html() -> str:
    from audit.faces.report import build_html

    return REPORTS.get_or_make(("html", sha, name, key), lambda: build_html(result, command=None, created=created))


d1, d2, d3, d4 = st.columns(4)
d1.download_button("slices.csv", lambda: slices_csv(result), "slices.csv", "text/csv", key="dl_slices",
                   on_click="ignore")
d2.download_button("summary.json", lambda: summary_json(result, created=created), "summary.json", "application/json",
                   key="dl_summary", on_click="ignore")
if result.fairness is not None:
    d3.download_button("fairness.csv", lambda: fairness_csv(result), "fairness.csv", "text/csv", key="dl_fair",
                       on_click="ignore")
d4.download_button("report.html", lambda: _report_html().encode("utf-8"), "report.html", "text/html",
                   key="dl_report", on_click="ignore")
if st.checkbox("Also prepare the report as PDF (needs Chromium on the server)", key="want_pdf"):
    from audit.faces.report import html_to_pdf

    pdf, why = REPORTS.get_or_make(("pdf", sha, name, key), lambda: html_to_pdf(_report_html()))
    if pdf is None:
        st.warning(why)
    else:
        st.download_button("report.pdf", pdf, "report.pdf", "application/pdf", key="dl_pdf")
st.caption(CAUTION)
_tick("rest of the page", t)
TIMINGS["total"] = time.perf_counter() - T0
st.session_state["_timings"] = dict(TIMINGS, reader=table.reader)
