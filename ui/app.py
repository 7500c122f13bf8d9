"""Fissure's page: bring a predictions table, set what the columns are, read the audit.

The page computes nothing itself: every number comes from ``audit.run`` and every chart
from ``audit.charts``; downloads are built by ``audit.export`` and ``audit.report`` from
the same result object the page shows.

    streamlit run ui/app.py
"""
from __future__ import annotations

import os
import sys

import pandas as pd
import streamlit as st

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
if ROOT not in sys.path:
    sys.path.insert(0, ROOT)

from audit.faces import charts  # noqa: E402
from ui import fairness_view  # noqa: E402
from audit.stats.correct import CORRECTIONS  # noqa: E402
from audit.engine import ALL, run  # noqa: E402
from audit.errors import AuditInputError  # noqa: E402
from audit.faces.export import fairness_csv, slices_csv, summary_json  # noqa: E402
from audit.core.read import read_table  # noqa: E402
from audit.stats.intervals import INTERVALS  # noqa: E402
from audit.stats.measure import METRICS  # noqa: E402

MAX_UPLOAD_MB = 150
DEMO_PATH = os.path.join(ROOT, "demo", "predictions.csv")
CAUTION = ("**Read flags as signals, not verdicts.** A flag means a slice's numbers differ from the rest of the rows "
           "by more than chance would explain. It is not a finding of discrimination and not a legal conclusion. "
           "What a flag means, and what to do about it, is for your organisation's compliance function and qualified "
           "counsel under applicable law.")
SENSITIVE = ("Protected attributes are sensitive personal data: handle the file and these results under your "
             "organisation's data-protection rules.")
RANKED_COLUMNS = ["rank", "slice", "order", "n", "metric_value", "metric_low", "metric_high", "rest_value", "diff",
                  "diff_low", "diff_high", "p_value", "q_value", "flagged"]

st.set_page_config(page_title="Fissure slice audit", layout="wide")


# ----------------------------------------------------------------------------- engine calls
@st.cache_data(show_spinner=False, max_entries=4)
def load(data: bytes, name: str) -> pd.DataFrame:
    df, _ = read_table(data, name=name)
    return df


@st.cache_data(show_spinner=False, max_entries=8)
def audit_cached(data: bytes, name: str, settings: tuple):
    df, source = read_table(data, name=name)
    kw = dict(settings)
    if "reference" in kw:
        kw["reference"] = dict(kw["reference"])
    return run(df, source=source, **kw)


@st.cache_data(show_spinner=False, max_entries=4)
def report_cached(data: bytes, name: str, settings: tuple) -> str:
    from audit.faces.report import build_html

    return build_html(audit_cached(data, name, settings), command=None)


def demo_bytes() -> bytes:
    if not os.path.exists(DEMO_PATH):
        from demo.generate import generate

        generate().to_csv(DEMO_PATH, index=False)
    with open(DEMO_PATH, "rb") as fh:
        return fh.read()


# ----------------------------------------------------------------------------- guesses
def guess_label(df: pd.DataFrame) -> str:
    hints = ("label", "target", "outcome", "actual", "truth", "y", "delinquent", "default", "status")
    binary = [c for c in df.columns if df[c].nunique(dropna=True) == 2]
    for c in binary:
        if any(h == c.lower() or c.lower().startswith(h) for h in hints):
            return c
    return binary[0] if binary else df.columns[0]


def guess_score(df: pd.DataFrame, label: str) -> str | None:
    cands = [c for c in df.columns if c != label and pd.api.types.is_float_dtype(df[c])
             and df[c].between(0, 1).all()]
    named = [c for c in cands if any(h in c.lower() for h in ("p_", "prob", "score", "pred"))]
    return (named or cands or [None])[0]


def esc(text: str) -> str:
    """Escape Markdown so user-supplied names show as text."""
    out = str(text)
    for ch in "\\`*_{}[]()#+-.!|<>~$":
        out = out.replace(ch, "\\" + ch)
    return out


def fmt(x, d=4) -> str:
    try:
        x = float(x)
    except (TypeError, ValueError):
        return "—"
    return "—" if x != x else f"{x:.{d}f}"


# ----------------------------------------------------------------------------- page
st.title("Fissure · slice audit of a classifier")
st.caption("Find the customer groups where a model that looks fine on average does worse: every attribute value and "
           "every pair, with intervals, tests against the rest of the rows and control of false discoveries.")

st.header("1 · Bring the predictions")
upload = st.file_uploader("Predictions table (CSV, Parquet or Excel): one row per case, with the true label, a "
                          "predicted label and/or probability, and customer attributes",
                          type=["csv", "parquet", "xlsx"], key="upload")
if upload is not None:
    data, name = upload.getvalue(), upload.name
    if len(data) > MAX_UPLOAD_MB * 1024 * 1024:
        st.error(f"This file is {len(data) / 1e6:.0f} MB; the page takes files up to {MAX_UPLOAD_MB} MB. "
                 "Use the command line (`fissure audit`) for larger tables.")
        st.stop()
    st.caption(f"Using the uploaded file **{esc(name)}** ({len(data) / 1e6:.2f} MB).")
else:
    data, name = demo_bytes(), "predictions.csv"
    st.caption("No file uploaded: showing the **demo** — a fictional lender's 90-day delinquency model on 20,000 "
               "synthetic applicants (see demo/README.md for the weaknesses planted in it).")

try:
    df = load(data, name)
except AuditInputError as exc:
    st.error(f"This file cannot be audited: {exc}")
    st.stop()

cols = list(df.columns)
FORM_KEYS = ("label", "score", "pred", "positive", "threshold", "bins", "attributes", "metric", "min_support",
             "min_metric", "max_order", "alpha", "correction", "interval", "level", "protected", "favorable",
             "min_share", "reference", "filter_attrs", "filter_order", "filter_flagged", "slice_pick", "heat_a", "heat_b",
             "fair_attr")
signature = (name, len(data), hash(data))
if st.session_state.get("_file_signature") != signature:
    # A new table: forget settings that named the old table's columns.
    for k in FORM_KEYS:
        st.session_state.pop(k, None)
    st.session_state["_file_signature"] = signature
st.header("2 · Say what the columns are")
with st.form("settings"):
    c1, c2, c3 = st.columns(3)
    label_default = guess_label(df)
    current_label = st.session_state.get("label", label_default)
    current_label = current_label if current_label in cols else label_default
    label = c1.selectbox("True label column", cols, index=cols.index(label_default), key="label")
    score_default = guess_score(df, label_default)
    score_opts = ["(none)"] + [c for c in cols]
    score = c2.selectbox("Predicted probability of the positive class", score_opts,
                         index=score_opts.index(score_default) if score_default else 0, key="score")
    pred_opts = ["(none)"] + cols
    pred = c3.selectbox("Predicted label column (optional; else probability ≥ threshold)", pred_opts, index=0,
                        key="pred")
    c4, c5, c6 = st.columns(3)
    label_values = sorted(map(str, df[current_label].dropna().unique().tolist()))[:20]
    positive = c4.selectbox("Positive class", ["(infer)"] + label_values, index=0, key="positive",
                            help="Inferred for 0/1, false/true, no/yes labels; pick it otherwise.")
    threshold = c5.number_input("Decision threshold", 0.0, 1.0, 0.5, 0.01, key="threshold")
    bins = c6.number_input("Quantile bins per numeric attribute", 1, 20, 5, 1, key="bins")
    current_score = st.session_state.get("score", score_default)
    current_score = current_score if current_score in cols else score_default
    candidates = [c for c in cols if c not in (current_label, current_score)]
    attrs = st.multiselect("Attributes to slice by (identifier-like columns are skipped with a reason)", candidates,
                           default=candidates, key="attributes")
    c7, c8, c9, c10 = st.columns(4)
    metric_names = list(METRICS)
    metric = c7.selectbox("Audited metric", metric_names, index=0, key="metric",
                          format_func=lambda m: f"{m} — {METRICS[m].title}")
    min_support = c8.number_input("Minimum rows per slice", 1, 100000, 30, 5, key="min_support")
    min_metric = c9.number_input("Minimum rows in the metric's denominator", 1, 100000, 10, 5, key="min_metric")
    max_order = c10.selectbox("Slices", [2, 1], index=0, key="max_order",
                              format_func=lambda o: "single attributes and pairs" if o == 2 else "single attributes")
    c11, c12, c13, c14 = st.columns(4)
    alpha = c11.number_input("Flag at adjusted p ≤", 0.001, 0.5, 0.05, 0.01, format="%.3f", key="alpha")
    correction = c12.selectbox("Multiple-testing correction", list(CORRECTIONS), index=0, key="correction",
                               format_func=lambda k: f"{CORRECTIONS[k].title}")
    interval = c13.selectbox("Interval for rates", list(INTERVALS), index=0, key="interval",
                             format_func=lambda k: INTERVALS[k].title)
    level = c14.select_slider("Interval level", [0.8, 0.9, 0.95, 0.99], value=0.95, key="level")
    st.markdown("**Group fairness** (optional). " + SENSITIVE)
    f1, f2, f3 = st.columns(3)
    protected = f1.multiselect("Protected attributes", candidates, default=[], key="protected")
    favorable = f2.selectbox("Favourable predicted outcome for the person", ["(positive prediction)"] + label_values,
                             index=0, key="favorable",
                             help="For a delinquency model, being predicted not delinquent is favourable.")
    min_share = f3.number_input("Leave groups under this share out of ratios", 0.0, 0.5, 0.02, 0.01,
                                key="min_share")
    reference_text = st.text_input("Reference groups (optional; default: the highest selection rate), e.g. "
                                   "sex=female; age_band=35-44", key="reference")
    submitted = st.form_submit_button("Run the audit")

settings = {
    "label": label, "score": None if score == "(none)" else score, "pred": None if pred == "(none)" else pred,
    "positive": None if positive == "(infer)" else positive, "threshold": float(threshold), "bins": int(bins),
    "attributes": tuple(attrs) if attrs else None, "metric": metric, "min_support": int(min_support),
    "min_metric_support": int(min_metric), "alpha": float(alpha), "correction": correction, "interval": interval,
    "level": float(level), "max_order": int(max_order),
}
if protected:
    settings["protected"] = tuple(protected)
    settings["favorable"] = None if favorable == "(positive prediction)" else favorable
    settings["min_group_share"] = float(min_share)
    refs = {}
    for part in (reference_text or "").split(";"):
        if "=" in part:
            k_, v_ = part.split("=", 1)
            refs[k_.strip()] = v_.strip()
    if refs:
        settings["reference"] = tuple(sorted(refs.items()))
key = tuple(sorted(settings.items()))

try:
    with st.spinner("Auditing every slice…"):
        result = audit_cached(data, name, key)
except AuditInputError as exc:
    st.error(f"The audit could not run: {exc}")
    st.stop()

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
k5.metric("Flagged", f"{stc['flagged']:,}")
pos_note = " (inferred)" if result.positive_inferred else ""
st.caption(f"Positive class: **{esc(result.classes[1])}**{pos_note}; negative: {esc(result.classes[0])}. "
           + ("Prediction: probability ≥ " + f"{result.config.threshold:g}." if result.prediction_source == "threshold"
              else "Prediction: from the predicted-label column."))
if result.skipped:
    st.caption("Not sliced: " + "; ".join(f"{esc(k)} — {esc(v)}" for k, v in result.skipped.items()))
left, right = st.columns([3, 2])
rows = []
for k in ["accuracy", "error_rate", "precision", "recall", "specificity", "fpr", "fnr", "f1", "log_loss", "brier",
          "roc_auc"]:
    if o.get(k) is None:
        continue
    rows.append({"metric": k, "value": o[k], f"{lvl}% low": o.get(k + "_low"), f"{lvl}% high": o.get(k + "_high")})
left.dataframe(pd.DataFrame(rows), hide_index=True, width="stretch")
right.plotly_chart(charts.confusion(o, result.classes, title="Confusion matrix, all rows"), key="confusion_all")

# ----------------------------------------------------------------------------- ranked slices
st.header("4 · Worst slices")
ranked = result.ranked()
g1, g2, g3 = st.columns([3, 2, 1])
attr_names = [a.name for a in result.attributes]
pick_attrs = g1.multiselect("Only slices involving", attr_names, default=[], key="filter_attrs")
order_pick = g2.radio("Slice kind", ["all", "single attribute", "pair"], horizontal=True, key="filter_order")
only_flagged = g3.checkbox("Flagged only", value=False, key="filter_flagged")
view = ranked
if pick_attrs:
    view = view[view["attribute_1"].isin(pick_attrs) | view["attribute_2"].isin(pick_attrs)]
if order_pick != "all":
    view = view[view["order"] == (1 if order_pick == "single attribute" else 2)]
if only_flagged:
    view = view[view["flagged"]]
st.caption(f"{len(view):,} of {len(ranked):,} tested slices, worst first by the cautious end of the {lvl}% interval "
           f"of (slice − rest) for {m.title}. ")
NUM4 = st.column_config.NumberColumn(format="%.4f")
PVAL = st.column_config.NumberColumn(format="%.2e")
st.dataframe(view[RANKED_COLUMNS].rename(columns={"metric_value": m.name}), hide_index=True, width="stretch",
             height=360, column_config={m.name: NUM4, "metric_low": NUM4, "metric_high": NUM4, "rest_value": NUM4,
                                        "diff": NUM4, "diff_low": NUM4, "diff_high": NUM4, "p_value": PVAL,
                                        "q_value": st.column_config.NumberColumn("adjusted p", format="%.2e")})
if len(ranked):
    st.plotly_chart(charts.top_slices(result, k=15), key="top_chart")

# ----------------------------------------------------------------------------- one slice
st.header("5 · Inspect one slice")
choices = ranked["slice"].tolist() + result.slices.loc[result.slices["status"] != "tested", "slice"].tolist()
choices = [c for c in choices if c != ALL]
if choices:
    chosen = st.selectbox("Slice", choices, index=0, key="slice_pick")
    s = result.slice(chosen)
    rest = result.rest_counts(chosen)
    a, b = st.columns(2)
    a.plotly_chart(charts.confusion(s, result.classes, title=f"In the slice (n={int(s['n']):,})"), key="cm_slice")
    b.plotly_chart(charts.confusion(rest, result.classes, title=f"In the rest (n={rest['n']:,})"), key="cm_rest")
    comp_df = result.compare(chosen)
    st.markdown(f"Status: **{esc(s['status'])}** {esc(s['status_reason'])}  ·  this slice holds "
                f"**{comp_df.attrs['share_of_errors']:.1%}** of all errors and {s['share']:.1%} of all rows.")
    st.dataframe(comp_df, hide_index=True, width="stretch",
                 column_config={c: st.column_config.NumberColumn(format="%.4f") for c in comp_df.columns[1:]})
    if result.overall.get("log_loss") is not None:
        st.caption(f"Mean losses in the slice: log loss {fmt(s['log_loss'])} [{fmt(s['log_loss_low'])}, "
                   f"{fmt(s['log_loss_high'])}], Brier {fmt(s['brier'])} [{fmt(s['brier_low'])}, "
                   f"{fmt(s['brier_high'])}]" + (f", ROC AUC {fmt(s['roc_auc'])}" if s["roc_auc"] == s["roc_auc"]
                                                 else "") + ".")
    if s["status"] == "tested":
        st.markdown(f"Audited metric **{esc(m.name)}**: slice {fmt(s['metric_value'])} vs rest {fmt(s['rest_value'])}; "
                    f"difference {fmt(s['diff'])} [{fmt(s['diff_low'])}, {fmt(s['diff_high'])}], "
                    f"{esc(s['test'])} test, p = {s['p_value']:.3g}, adjusted p = {s['q_value']:.3g}"
                    + (" — **flagged**." if s["flagged"] else "."))

# ----------------------------------------------------------------------------- two attributes
if len(attr_names) >= 2 and result.config.max_order == 2:
    st.header("6 · Two attributes at once")
    pair = charts.worst_pair(result) or (attr_names[0], attr_names[1])
    h1, h2 = st.columns(2)
    ha = h1.selectbox("Rows", attr_names, index=attr_names.index(pair[0]), key="heat_a")
    hb_opts = [x for x in attr_names if x != ha]
    hb = h2.selectbox("Columns", hb_opts, index=hb_opts.index(pair[1]) if pair[1] in hb_opts else 0, key="heat_b")
    st.plotly_chart(charts.pair_heatmap(result, ha, hb), key="heatmap")

# ----------------------------------------------------------------------------- noise
st.header("7 · Where noise ends")
st.caption("Each dot is a tested slice. The shaded band is where a slice that behaves like the whole table would "
           "land by chance alone, before allowing for the number of slices tested; small slices need a bigger gap. "
           "A slice is flagged only when its test against the rest of the rows survives the correction for "
           "testing every slice, so dots just outside the band can stay unflagged.")
st.plotly_chart(charts.noise_band(result), key="noise")

# ----------------------------------------------------------------------------- fairness
if result.fairness is not None:
    st.header("8 · Group fairness")
    st.caption(SENSITIVE + " The four-fifths rule is a US rule of thumb from employment-selection guidelines, not a "
               "legal test everywhere.")
    fairness_view.show(result.fairness, st)

# ----------------------------------------------------------------------------- downloads
st.header("Take the results away")
d1, d2, d3, d4 = st.columns(4)
d1.download_button("slices.csv", slices_csv(result), "slices.csv", "text/csv", key="dl_slices")
d2.download_button("summary.json", summary_json(result), "summary.json", "application/json", key="dl_summary")
if result.fairness is not None:
    d3.download_button("fairness.csv", fairness_csv(result), "fairness.csv", "text/csv", key="dl_fair")
report_html = report_cached(data, name, key)
d4.download_button("report.html", report_html.encode("utf-8"), "report.html", "text/html", key="dl_report")
if st.checkbox("Also prepare the report as PDF (needs Chromium on the server)", key="want_pdf"):
    from audit.faces.report import html_to_pdf

    pdf, why = html_to_pdf(report_html)
    if pdf is None:
        st.warning(why)
    else:
        st.download_button("report.pdf", pdf, "report.pdf", "application/pdf", key="dl_pdf")
st.caption(CAUTION)
