"""Fissure's page: bring a predictions table, say what the columns are, read the audit.

The page computes nothing itself: every number comes from ``audit.run`` and every chart
from ``audit.faces.charts``; downloads are built by ``audit.faces.export`` and
``audit.faces.report`` from the same result object the page shows, only when asked for.

What the page shows is what it computed: every widget whose choices depend on something
(the file, the label, the result) is keyed on what it depends on, so a new file, label,
metric or filter gives a fresh widget showing the value the numbers below it used. The
statistical settings (support, threshold, bins, test level, correction, interval) name no
column: they keep one key, and their value, from file to file, so a new upload redraws none of
them (each widget a new tab draws anew costs every session's browser time).

    streamlit run ui/app.py
"""
from __future__ import annotations

import datetime as _dt
import hashlib
import os
import shlex
import sys
import time

import pandas as pd
import streamlit as st

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
if ROOT not in sys.path:
    sys.path.insert(0, ROOT)

from audit.engine import ALL, run  # noqa: E402
from audit.errors import AuditInputError  # noqa: E402
from audit.faces.export import fairness_csv, slices_csv, summary_json  # noqa: E402
from audit.faces.prose import triples_words  # noqa: E402
from audit.stats.correct import CORRECTIONS  # noqa: E402
from audit.stats.intervals import INTERVALS  # noqa: E402
from audit.stats.measure import METRICS  # noqa: E402
from audit.stats.methods import metric_for  # noqa: E402
from ui import classes_view, fairness_view, findings_view, folder_view, intake, sections  # noqa: E402
from ui.memo import REPORTS, RESULTS  # noqa: E402
from ui.wording import (WIDGETS, check_reference, fmt, md, page_error, page_words, parse_reference,  # noqa: E402
                        status_words)

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
STATS_BOX = "Support, slices, test level, correction, intervals and bins"
FAIR_BOX = "Group fairness (optional): protected attributes and the favourable outcome"
CHOOSE = "(choose)"
ORDERS = {1: "single attributes", 2: "single attributes and pairs", 3: "up to three attributes"}
PROBS, PRED_COLUMN = "one probability column per class", "a predicted-label column"
MULTI_METRICS = ["error_rate", "accuracy", "macro_f1", "log_loss", "brier"]
LARGER = """The upload limit keeps this page responsive for everyone using it. For a larger table, run the same
audit from the command line on a machine that can read the file; memory stays bounded by the chunk:

- one file, read in chunks: `fissure audit predictions.csv --label LABEL --score PROB --chunk-rows 1000000 --out run1`
- a folder of Parquet files: `fissure audit parts/ --label LABEL --score PROB --out run1`
- on a Dask cluster: `fissure audit parts/ --label LABEL --score PROB --engine dask --scheduler tcp://HOST:8786 --out run1`

Then type the output folder (`run1`) below to browse its findings, ranked slices and fairness flags here,
read from its `slices.csv` and `summary.json` without recomputing anything."""

st.set_page_config(page_title="Fissure slice audit", layout="wide")
# Still placeholders: a new tab shows dozens of loading placeholders, each pulsing for as long as it
# waits, and every pulse is a frame the browser draws; on a busy server that is the whole wait. The
# expanders' border fade goes too. (Streamlit's fade of stale content is kept: its delay avoids flicker.)
st.html("<style>[data-testid='stSkeleton']{animation:none!important}"
        "[data-testid='stExpander'] details{transition:none!important}</style>")
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


def quoted(text) -> str:
    """A user's value in single quotes, as Markdown text."""
    return "'" + md(text) + "'"


def remember(name: str, value):
    st.session_state.setdefault("_memory", {})[name] = value
    return value


def recall(name: str, default=None):
    return st.session_state.get("_memory", {}).get(name, default)


def choose(where, label: str, options: list, guess, name: str, *deps, **kw):
    """A select box keyed on its options and what they depend on: when they change, a new widget
    shows the user's previous choice if it is still offered, else the guess, on its first render.
    A value left at the page's own guess is no choice: it follows the new guess (after a new run
    the slice picker shows the new top finding, not the old run's)."""
    auto = guess if guess in options else options[0]
    prev = None if recall(name + "/guessed") else recall(name)
    default = prev if prev in options else auto
    value = where.selectbox(label, options, index=options.index(default), key=f"{name}-{_h(options, *deps)}", **kw)
    remember(name + "/guessed", value == auto)
    return remember(name, value)


def choose_many(where, label: str, options: list, guess: list, name: str, *deps, **kw):
    prev = recall(name)
    default = [x for x in prev if x in options] if prev is not None else [x for x in guess if x in options]
    value = where.multiselect(label, options, default=default, key=f"{name}-{_h(options, *deps)}", **kw)
    return remember(name, list(value))


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


def cli_command(settings: dict, file_name: str) -> str:
    """``fissure audit ...`` with the page's settings (the defaults left out)."""
    q = shlex.quote
    parts = ["fissure audit", q(file_name), "--label", q(settings["label"])]
    score = settings.get("score")
    if isinstance(score, tuple):
        parts += ["--score", q(",".join(f"{k}={v}" for k, v in score))]
    elif score:
        parts += ["--score", q(score)]
    if settings.get("pred"):
        parts += ["--pred", q(settings["pred"])]
    if settings.get("positive"):
        parts += ["--positive", q(settings["positive"])]
    defaults = {"threshold": 0.5, "bins": 5, "metric": "error_rate", "min_support": 30, "min_metric_support": 10,
                "alpha": 0.05, "correction": "bh", "interval": "wilson", "level": 0.95, "max_order": 2}
    parts += ["--attributes", q(",".join(settings["attributes"]))]
    for k, d in defaults.items():
        v = settings.get(k)
        if v is not None and v != d and not (k == "threshold" and not score):
            parts += ["--" + k.replace("_", "-"), q(str(v))]
    if settings.get("protected"):
        fav = settings["favorable"]
        parts += ["--protected", q(",".join(settings["protected"])),
                  "--favorable", q(",".join(fav) if isinstance(fav, tuple) else str(fav))]
        if settings.get("min_group_share", 0.02) != 0.02:
            parts += ["--min-group-share", q(str(settings["min_group_share"]))]
        for a, g in settings.get("reference", ()):
            parts += ["--reference", q(f"{a}={g}")]
    parts += ["--out", "fissure-out"]
    return " ".join(parts)


def show_ranked(frame: pd.DataFrame, metric, where) -> None:
    """Tested slices, ranked (the engine's columns), with the metric named and numbers formatted."""
    PV = st.column_config.NumberColumn(format="%.2e")
    N4 = st.column_config.NumberColumn(format="%.4f")
    where.dataframe(frame[RANKED_COLUMNS].rename(columns={"metric_value": metric.name}), hide_index=True,
                    width="stretch", height=360,
                    column_config={metric.name: N4, "metric_low": N4, "metric_high": N4, "rest_value": N4, "diff": N4,
                                   "diff_low": N4, "diff_high": N4, "p_value": PV,
                                   "q_value": st.column_config.NumberColumn("adjusted p", format="%.2e")})


def show_finished_run(run: "folder_view.FinishedRun") -> None:
    """A finished run's folder, read-only: nothing is recomputed."""
    res, summ = run.result, run.summary
    st.header("A finished run, read from its folder")
    st.caption(f"From **{md(run.folder)}**: slices.csv and summary.json, written {md(summ.get('created', '?'))} by "
               f"Fissure {md((summ.get('tool') or {}).get('version', '?'))} for the file "
               f"**{md(res.source.name)}**. Nothing is recomputed: the settings are the run's own. Clear the folder "
               "above to go back to auditing an upload.")
    how = summ.get("method") or {}
    if how.get("roc_auc_error_bound") is not None:
        st.caption(f"The table was read {md(how.get('reading', 'in chunks'))}: each slice's ROC AUC is approximate, "
                   f"within {how['roc_auc_error_bound']:.2g} of the exact value (summary.json, method).")
    st.info(CAUTION)
    stc = res.status_counts()
    k1, k2, k3, k4, k5 = st.columns(5)
    k1.metric("Rows", f"{res.n_rows:,}")
    k2.metric(f"Overall {res.metric.name}", fmt(res.overall.get(res.metric.name, res.slice(ALL)["metric_value"])))
    k3.metric("Slices tested", f"{stc.get('tested', 0):,}", help=f"family size m = {res.family_size}")
    k4.metric("Flagged", f"{stc.get('flagged', 0):,}")
    k5.metric("Findings", f"{len(res.findings()):,}")
    st.header("Findings first")
    tab_f, tab_r = st.tabs(["Findings and their echoes", "Every tested slice, ranked"])
    findings_view.show(res, tab_f, key=_h(run.folder))
    show_ranked(res.ranked(), res.metric, tab_r)
    if summ.get("fairness"):
        fav = (summ["fairness"] or {}).get("favorable_outcome")
        st.header("Group fairness")
        st.caption(SENSITIVE + f" Favourable outcome: predicted {fairness_view.favourable_words(fav)}.")
        fairness_view.show_flags(run.fairness_flags, st)
        groups = folder_view.fairness_groups(summ)
        if groups is not None and len(groups):
            attrs = list(dict.fromkeys(groups["attribute"]))
            pick = st.selectbox("Protected attribute or intersection", attrs, key=f"run_fair-{_h(run.folder, attrs)}")
            ft = fairness_view.table(groups, pick)
            st.dataframe(ft, hide_index=True, width="stretch", column_config=fairness_view.column_config(st, ft.columns))
    st.caption(CAUTION)


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
               f"(`fissure audit`) for larger tables, as said under *Larger tables* below.")
t = _tick("digest", t)
with st.expander("Larger tables, and browsing a run made on the command line",
                 expanded=bool(st.session_state.get("run_folder"))):
    st.markdown(LARGER)
    folder_text = st.text_input("Output folder of a finished run, on this server (read-only: only its slices.csv "
                                "and summary.json are read)", key="run_folder", placeholder="/path/to/run1")
if folder_text.strip():
    try:
        finished = folder_view.open_run(folder_text)
    except folder_view.Refused as exc:
        st.error(f"**Output folder of a finished run**: {md(str(exc))} Nothing was opened; the page below audits "
                 "the uploaded file (or the demo).")
    else:
        del data
        show_finished_run(finished)
        st.stop()
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
classes = intake.label_classes(table, label)
multi = len(classes) >= 3
score_map: dict[str, str] = {}
if not multi:
    score_opts = [NONE] + [c for c in cols if c != label]
    score = choose(c2, WIDGETS["score"], score_opts, score_guess or NONE, "score", sig, label)
    score = None if score == NONE else score
    pred_opts = [NONE] + [c for c in cols if c not in (label, score)]
    pred = choose(c3, WIDGETS["pred"] + " (optional when a probability is given: else probability ≥ threshold)",
                  pred_opts, intake.guess_pred(table, label, score) or NONE, "pred", sig, label, score)
    pred = None if pred == NONE else pred
    looks_pred = [c for c in intake.pred_like_columns(table, label) if c != pred]
    if looks_pred and pred is None:
        st.caption(f"Column {', '.join(map(quoted, looks_pred))} looks like a predicted label: choose it under "
                   f"**{WIDGETS['pred']}** to audit those decisions rather than probability ≥ threshold.")
    used = (label, score, pred)
else:
    guessed = intake.class_score_columns(table, classes, exclude=(label,))
    pred_guess = next(iter(intake.pred_like_columns(table, label)), None)
    how = choose(c2, WIDGETS["how"], [PROBS, PRED_COLUMN],
                 PROBS if any(guessed.values()) or pred_guess is None else PRED_COLUMN, "how", sig, label)
    score = pred = None
    if how == PROBS:
        prob_opts = [NONE] + [c for c in cols if c != label and table.columns[c].numeric]
        st.caption(f"**{md(label)}** has {len(classes)} classes: " + ", ".join(f"**{md(k)}**" for k in classes)
                   + ". Each row's prediction is its most probable class.")
        boxes = st.columns(min(4, len(classes)))
        for i, k in enumerate(classes):
            col = choose(boxes[i % len(boxes)], f"{WIDGETS['class_score']} {k}", prob_opts, guessed.get(k) or NONE,
                         f"class_score_{i}", sig, label, k)
            if col != NONE:
                score_map[k] = col
    else:
        pred_opts = [NONE] + [c for c in cols if c != label]
        pred = choose(c3, WIDGETS["pred"], pred_opts, pred_guess or NONE, "pred_multi", sig, label)
        pred = None if pred == NONE else pred
    used = (label, pred, *score_map.values())
passed_over = {c: why for c, why in intake.passed_over_scores(table).items() if c not in used}
if passed_over:  # said before any run, as the command line would say it when the column is named
    st.caption("Named like a probability but not offered as one: " + "; ".join(
        f"{quoted(c)} has {md(why)}" for c, why in passed_over.items()) + ". Fix the file to audit it as a "
        "probability; such a column is not preselected as an attribute.")

candidates = [c for c in cols if c not in used]
bins_now = int(st.session_state.get("bins", 5))
numeric_cols = [c for c in candidates if intake.is_number_column(table, c)]
# The screen follows the last submitted codes/bins choices, as the audit will.
cat_now = [c for c in (recall("categorical") or []) if c in numeric_cols]
num_now = [c for c in (recall("numeric") or []) if c in numeric_cols and c not in cat_now]
sliceable, not_sliceable = intake.screen(table, candidates, label=label, bins=bins_now, categorical=cat_now,
                                         numeric=num_now)
values = intake.label_values(table, label)
roles = (sig, *used)
t = _tick("guess", t)

with st.form("settings"):
    c4, c5, c6 = st.columns(3)
    if not multi:
        positive = choose(c4, WIDGETS["positive"], ["(infer)"] + values, "(infer)", "positive", *roles,
                          help="Inferred for 0/1, false/true, no/yes labels; pick it otherwise.")
        threshold = c5.number_input(WIDGETS["threshold"], 0.0, 1.0, 0.5, 0.01, key="threshold",
                                    disabled=score is None or pred is not None,
                                    help="Used only when the prediction comes from the probability column.")
    else:
        positive, threshold = "(infer)", 0.5
        c4.caption("Three or more classes: no positive class and no threshold; each class is measured one-vs-rest "
                   "and averaged.")
    if not multi:
        metric_names = [k for k, m in METRICS.items() if score is not None or not m.needs_score]
    else:
        metric_names = [k for k in MULTI_METRICS if score_map or k not in ("log_loss", "brier")]
        metric_names += [f"{b}:{k}" for k in classes for b in ("recall", "precision", "f1")]
    metric = choose(c6, WIDGETS["metric"], metric_names, "error_rate", "metric", sig, multi, score is None,
                    bool(score_map), label, format_func=lambda k: f"{k} — {metric_for(k).title}")
    attrs = choose_many(st, WIDGETS["attributes"], candidates, [c for c in sliceable if c not in passed_over],
                        "attributes", *roles)
    if not_sliceable:
        named = set(not_sliceable) & set(intake.pred_like_columns(table, label))
        sliced = ("the audit slices a predicted-label column you choose (unless it restates the prediction "
                  "audited, when it is skipped with the reason)")
        anyway = "Choosing one anyway: " + (sliced + "." if named == set(not_sliceable) else
                                            sliced + "; it skips the others and says why." if named else
                                            "the audit skips it and says why.")
        st.caption("Not preselected: " + "; ".join(f"**{md(k)}**: {md(page_words(v))}" for k, v in not_sliceable.items())
                   + ". " + anyway)
    # Two boxes closed until opened: the browser draws their widgets only then, while the script
    # still reads every one of them, so their values hold whether the box is open or not.
    more = st.expander(STATS_BOX)
    c7, c8, c9, c10 = more.columns(4)
    bins = c7.number_input(WIDGETS["bins"], 1, 20, 5, 1, key="bins")
    min_support = c8.number_input(WIDGETS["min_support"], 1, 100000, 30, 5, key="min_support")
    min_metric = c9.number_input(WIDGETS["min_metric_support"], 1, 100000, 10, 5, key="min_metric",
                                 help="For recall, the actual positives; for precision, the predicted positives.")
    max_order = c10.selectbox(WIDGETS["max_order"], [2, 1, 3], index=0, key="max_order",
                              format_func=ORDERS.get)
    c11, c12, c13, c14 = more.columns(4)
    alpha = c11.number_input(WIDGETS["alpha"], 0.001, 0.5, 0.05, 0.01, format="%.3f", key="alpha")
    correction = c12.selectbox(WIDGETS["correction"], list(CORRECTIONS), index=0, key="correction",
                               format_func=lambda k: f"{CORRECTIONS[k].title}")
    interval = c13.selectbox(WIDGETS["interval"], list(INTERVALS), index=0, key="interval",
                             format_func=lambda k: INTERVALS[k].title)
    # A select box, not a slider: the slider's own code costs every new tab about 0.1 s to load and draw.
    level = c14.selectbox(WIDGETS["level"], [0.8, 0.9, 0.95, 0.99], index=2, key="level",
                          format_func=lambda v: f"{v:.0%}")
    if numeric_cols:
        k1, k2 = more.columns(2)
        categorical = choose_many(k1, WIDGETS["categorical"], numeric_cols, cat_now, "categorical", *roles,
                                  help="Branch, product or region codes: each value is a slice, never binned.")
        numeric = choose_many(k2, WIDGETS["numeric"], numeric_cols, num_now, "numeric", *roles,
                              help="Cut into quantile bins even when the column has only a few distinct values.")
    else:
        categorical, numeric = [], []
    fair = st.expander(FAIR_BOX, expanded=bool(recall("protected")))
    fair.markdown(SENSITIVE)
    f1, f2, f3 = fair.columns(3)
    protected = choose_many(f1, WIDGETS["protected"], candidates, [], "protected", *roles)
    fav_help = ("Which prediction is good for the person: for a delinquency model, being predicted not delinquent; "
                "for a loan-routing model, being approved. Required with protected attributes.")
    if not multi:
        favorable = choose(f2, WIDGETS["favorable"], [CHOOSE] + values, CHOOSE, "favorable", *roles, help=fav_help)
        favorable = None if favorable == CHOOSE else favorable
    else:
        favorable = tuple(choose_many(f2, WIDGETS["favorable"], classes, [], "favorable_set", *roles,
                                      help=fav_help)) or None
    min_share = f3.number_input(WIDGETS["min_group_share"], 0.0, 0.5, 0.02, 0.01, key="min_share")
    reference_text = fair.text_input(WIDGETS["reference"] + " (optional; default: the highest selection rate), e.g. "
                                     "sex=female; age_band=35-44", key=f"reference-{sig}")
    st.form_submit_button("Run the audit")
    st.caption("Choices in this box take effect when you press **Run the audit**; until then the results below "
               "are those of the settings stated in section 3, under the overview.")

if multi and how == PROBS and len(score_map) < len(classes):
    missing = [k for k in classes if k not in score_map]
    st.error(f"Choose a column under **{WIDGETS['class_score']} {md(missing[0])}**"
             + (f" (and for {', '.join(map(quoted, missing[1:]))})" if missing[1:] else "")
             + f", or choose *{PRED_COLUMN}* under **{WIDGETS['how']}**: with {len(classes)} classes the audit needs "
               "one probability column per class.")
    st.stop()
if multi and how == PRED_COLUMN and pred is None:
    st.error(f"Choose a column under **{WIDGETS['pred']}**, or choose *{PROBS}* under **{WIDGETS['how']}**: the "
             "audit needs the model's predictions.")
    st.stop()
if not multi and score is None and pred is None:
    st.error(f"Choose a column under **{WIDGETS['score']}** or under **{WIDGETS['pred']}**: the audit needs the "
             "model's predictions.")
    st.stop()
if not attrs:
    st.error(f"Choose at least one column under **{WIDGETS['attributes']}**.")
    st.stop()
if protected and favorable is None:
    st.error(f"Choose the **{WIDGETS['favorable']}**: with protected attributes the fairness checks need to know "
             "which prediction is good for the person (for a delinquency model, being predicted not delinquent). "
             "There is no default; the audit runs once it is chosen.")
    st.stop()

settings = {
    "label": label, "score": tuple(sorted(score_map.items())) if multi and score_map else score, "pred": pred,
    "positive": None if positive == "(infer)" else positive,
    "threshold": float(threshold), "bins": int(bins), "attributes": tuple(attrs), "metric": metric,
    "min_support": int(min_support), "min_metric_support": int(min_metric), "alpha": float(alpha),
    "correction": correction, "interval": interval, "level": float(level), "max_order": int(max_order),
}
both = sorted(set(categorical) & set(numeric))
if both:
    st.error(f"**{md(both[0])}** is chosen under both **{WIDGETS['categorical']}** and **{WIDGETS['numeric']}**; "
             "keep it in one.")
    st.stop()
for k, chosen in (("categorical", categorical), ("numeric", numeric)):
    chosen = [c for c in chosen if c in attrs]
    if chosen:
        settings[k] = tuple(chosen)
refs, bad_refs = parse_reference(reference_text)
problem = check_reference(refs, bad_refs, protected)
if problem:
    st.error(problem)
    st.stop()
if protected:
    settings["protected"] = tuple(protected)
    settings["favorable"] = favorable
    settings["min_group_share"] = float(min_share)
    if refs:
        settings["reference"] = tuple(sorted(refs.items()))
key = tuple(sorted(settings.items()))


def _audit():
    kw = dict(settings)
    if "reference" in kw:
        kw["reference"] = dict(kw["reference"])
    if isinstance(kw["score"], tuple):
        kw["score"] = dict(kw["score"])
    created = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
    return run(df, source=table.source, **kw), created  # one timestamp per run: report and summary share it


t = _tick("settings", t)
# A still notice, not an animated spinner: an animation keeps the browser drawing frames for as long as
# the audit runs, which on a busy server is the whole wait (the running mark at the top already moves).
notice = st.empty()
if RESULTS.get((sha, name, key)) is None:
    notice.caption("Auditing every slice…")
try:
    result, created = RESULTS.get_or_make((sha, name, key), _audit)
except AuditInputError as exc:
    notice.empty()
    st.error(f"The audit could not run: {page_error(exc)}")
    st.stop()
notice.empty()
t = _tick("audit", t)
run_id = _h(sha, key)

m = result.metric
multi = len(result.classes) >= 3
lvl = int(round(result.config.level * 100))
st.info(CAUTION)

# ----------------------------------------------------------------------------- overview
st.header("3 · The whole model first")
o = result.overall
stc = result.status_counts()
k1, k2, k3, k4, k5 = st.columns(5)
k1.metric("Rows", f"{result.n_rows:,}")
k2.metric(f"Overall {m.title.split(' (')[0]}", fmt(o.get(m.name, result.slice(ALL)["metric_value"])),
          help=f"{m.title}; its name in the files and on the command line: {m.name}")
k3.metric("Slices tested", f"{stc.get('tested', 0):,}", help=f"family size m = {result.family_size}")
k4.metric("Below support", f"{stc.get('below_support', 0):,}")
k5.metric("Flagged", f"{stc.get('flagged', 0):,}", help="Slices that do worse than the rest of the rows, with "
          "adjusted p at or below the threshold. Slices that do better are never flagged.")
cfg = result.config
st.caption(f"Audited with: {md(m.title)} ({md(m.name)}); {ORDERS[cfg.max_order]}; at least {cfg.min_support:,} "
           f"rows per slice and {cfg.min_metric_support:,} in the metric's denominator; flagged at adjusted "
           f"p ≤ {cfg.alpha:g} ({md(CORRECTIONS[cfg.correction].title)}); {md(INTERVALS[cfg.interval].title)} "
           f"intervals at {lvl}%; {cfg.bins} quantile bins per numeric attribute (*{STATS_BOX}* above).")
if triples_words(result):
    st.caption(f"Triples of values from three different attributes: {md(triples_words(result))}.")
skipped = {**result.skipped}
NUM4 = st.column_config.NumberColumn(format="%.4f")
if multi:
    classes_view.overview(result, st, lvl=lvl)
else:
    pos_note = " (inferred)" if result.positive_inferred else ""
    st.caption(f"Label **{md(label)}**; positive class: **{md(result.classes[1])}**{pos_note}; negative: "
               f"{md(result.classes[0])}. "
               + (f"Prediction: **{md(score)}** ≥ {result.config.threshold:g}." if result.prediction_source == "threshold"
                  else f"Prediction: the column **{md(pred)}**."))
    left, right = st.columns([3, 2])
    rows = []
    for k in ["accuracy", "error_rate", "precision", "recall", "specificity", "fpr", "fnr", "f1", "log_loss", "brier",
              "roc_auc"]:
        if o.get(k) is None:
            continue
        # interval ends as text: the browser's grid writes a missing number as "None"; here it is a dash
        what = "ROC AUC (area under the ROC curve)" if k == "roc_auc" else metric_for(k).title
        rows.append({"metric": k, "meaning": what, "value": o[k], f"{lvl}% low": fmt(o.get(k + "_low")),
                     f"{lvl}% high": fmt(o.get(k + "_high"))})
    left.dataframe(pd.DataFrame(rows), hide_index=True, width="stretch", height=35 * (len(rows) + 1) + 3,
                   column_config={"value": NUM4})
    sections.show_confusion(right, sections.confusion_table(o, result.classes), "Confusion matrix, all rows")
if skipped:
    st.caption("Chosen but not sliced by the audit: " + "; ".join(f"**{md(k)}**: {md(page_words(v))}"
                                                                   for k, v in skipped.items()))

# ----------------------------------------------------------------------------- findings, then every slice
st.header("4 · Findings first")
st.caption("A finding is a flagged slice that no other flagged slice explains; the slices flagged only because "
           "they lie in or around it are its echoes. Every tested slice is in the second tab.")
tab_findings, tab_ranked = st.tabs(["Findings and their echoes", "Every tested slice, ranked"])
findings_view.show(result, tab_findings, key=run_id)
t = _tick("findings", t)
ranked = result.ranked()
attr_names = [a.name for a in result.attributes]
with tab_ranked:
    g1, g2, g3 = st.columns([3, 2, 1])
    pick_attrs = choose_many(g1, "Only slices involving", attr_names, [], "filter_attrs", sig, attr_names)
    kinds = ["all", "single attribute", "pair"] + (["three attributes"] if result.config.max_order >= 3 else [])
    order_pick = g2.radio("Slice kind", kinds, horizontal=True, key="filter_order")
    only_flagged = g3.checkbox("Flagged only", value=False, key="filter_flagged")


def _filtered(frame: pd.DataFrame, *, flagged: bool) -> pd.DataFrame:
    if pick_attrs:
        hit = frame["attribute_1"].isin(pick_attrs) | frame["attribute_2"].isin(pick_attrs)
        if "attribute_3" in frame.columns:
            hit |= frame["attribute_3"].isin(pick_attrs)
        frame = frame[hit]
    if order_pick != "all":
        frame = frame[frame["order"] == kinds.index(order_pick)]
    if flagged:
        frame = frame[frame["flagged"]]
    return frame


view = _filtered(ranked, flagged=only_flagged)
with tab_ranked:
    st.caption(f"{len(view):,} of {len(ranked):,} tested slices, worst first by the cautious end of the {lvl}% "
               f"interval of (slice − rest) for {md(m.title)}. Flags cover only slices that do **worse** than the "
               "rest of the rows; a slice that does significantly better is listed but never flagged.")
    show_ranked(view, m, st)
    t = _tick("ranked table", t)
    if len(view):
        box = sections.chart_section(st, "Chart: the worst slices shown, with their intervals and the rest's value",
                                     "chart_top")
        if box is not None:
            from audit.faces import charts

            box.plotly_chart(charts.top_slices(result, k=15, ranked=view), key="top_chart")

# ----------------------------------------------------------------------------- one slice
st.header("5 · Inspect one slice")
untested = result.slices[(result.slices["status"] != "tested") & (result.slices["order"] > 0)]
choices = view["slice"].tolist() + ([] if only_flagged else _filtered(untested, flagged=False)["slice"].tolist())
choices = [c for c in choices if c != ALL]
if not choices:
    st.caption("No slice matches the filters of the ranked list.")
else:
    top_finding = next(iter(result.findings()["slice"]), choices[0])
    chosen = choose(st, "Slice (follows the filters of the ranked list)", choices, top_finding, "slice_pick", run_id)
    s = result.slice(chosen)
    if multi:
        classes_view.slice_panel(result, chosen, st)
        st.markdown(f"{status_words(s['status'], s['status_reason'])}  ·  {s['share']:.1%} of all rows.")
    else:
        rest = result.rest_counts(chosen)
        st.markdown(f"**{md(chosen)}** · n = **{int(s['n']):,}** rows · errors {int(s['errors']):,} · "
                    f"tp {int(s['tp']):,} · fp {int(s['fp']):,} · fn {int(s['fn']):,} · tn {int(s['tn']):,}")
        a, b = st.columns(2)
        sections.show_confusion(a, sections.confusion_table(s, result.classes), f"In the slice (n={int(s['n']):,})")
        sections.show_confusion(b, sections.confusion_table(rest, result.classes), f"In the rest (n={rest['n']:,})")
        comp_df = result.compare(chosen)
        st.markdown(f"{status_words(s['status'], s['status_reason'])}  ·  this slice holds "
                    f"**{comp_df.attrs['share_of_errors']:.1%}** of all errors and {s['share']:.1%} of all rows.")
        st.dataframe(comp_df, hide_index=True, width="stretch",
                     column_config={c: NUM4 for c in comp_df.columns[1:]})
    if result.overall.get("log_loss") is not None:
        auc = s.get("roc_auc", float("nan"))
        st.caption(f"Mean losses in the slice: log loss {fmt(s['log_loss'])} [{fmt(s['log_loss_low'])}, "
                   f"{fmt(s['log_loss_high'])}], Brier {fmt(s['brier'])} [{fmt(s['brier_low'])}, "
                   f"{fmt(s['brier_high'])}]" + (f", ROC AUC {fmt(auc)}" if auc == auc else "") + ".")
    if s["status"] == "tested":
        role = ""
        if s["flagged"]:
            role = (" It is a **finding**." if s["finding"] else
                    f" It is an **echo** of {md(s['echo_of'])}" + (f" (explained by {md(s['explained_by'])})"
                                                                    if s["explained_by"] != s["echo_of"] else "")
                    + ".")
        st.markdown(f"Audited metric **{md(m.name)}**: slice {fmt(s['metric_value'])} vs rest {fmt(s['rest_value'])}; "
                    f"difference {fmt(s['diff'])} [{fmt(s['diff_low'])}, {fmt(s['diff_high'])}], "
                    f"{md(s['test'])} test, p = {s['p_value']:.3g}, adjusted p = {s['q_value']:.3g}"
                    + (" — **flagged**." if s["flagged"] else
                       (" — not flagged: it does better than the rest." if not s["worse_than_rest"] else
                        f" — not flagged: adjusted p is above {result.config.alpha:g}."))
                    + role)

# ----------------------------------------------------------------------------- two attributes
if len(attr_names) >= 2 and result.config.max_order >= 2:
    st.header("6 · Two attributes at once")
    st.caption("Every pair of values of two attributes, as a grid coloured by the audited metric (the pair slices of "
               "the ranked list above). Opens on the pair of attributes with the worst-ranked pair slice.")
    box = sections.chart_section(st, "Chart: the metric for every pair of values of two attributes", "chart_pair")
    if box is not None:
        from audit.faces import charts

        pair = charts.worst_pair(result) or (attr_names[0], attr_names[1])
        h1, h2 = box.columns(2)
        ha = choose(h1, "Rows", attr_names, pair[0], "heat_a", run_id)
        hb_opts = [x for x in attr_names if x != ha]
        hb = choose(h2, "Columns", hb_opts, pair[1], "heat_b", run_id, ha)
        box.plotly_chart(charts.pair_heatmap(result, ha, hb), key="heatmap")

# ----------------------------------------------------------------------------- noise
st.header("7 · Where noise ends")
st.caption("Each dot is a tested slice. The shaded band is where a slice that behaves like the whole table would "
           "land by chance alone, before allowing for the number of slices tested; small slices need a bigger gap. "
           "A slice is flagged only when it does worse than the rest and its test survives the correction for "
           "testing every slice, so dots just outside the band can stay unflagged.")
box = sections.chart_section(st, "Chart: each tested slice against the band of chance", "chart_noise")
if box is not None:
    from audit.faces import charts

    box.plotly_chart(charts.noise_band(result), key="noise")

# ----------------------------------------------------------------------------- fairness
if result.fairness is not None:
    st.header("8 · Group fairness")
    st.caption(SENSITIVE + " The four-fifths rule is a US rule of thumb from employment-selection guidelines, not a "
               "legal test everywhere.")
    fairness_view.show(result.fairness, st, key=run_id, result=result)

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
box = st.expander("The same audit from the command line, for the whole table however large", key="cli_open",
                  on_change="rerun")
if box.open:
    box.markdown("Add `--chunk-rows 1000000` to bound memory, or `--engine dask --scheduler ADDRESS` for a cluster:")
    box.code(cli_command(settings, name), language="bash")
st.caption(CAUTION)
_tick("rest of the page", t)
TIMINGS["total"] = time.perf_counter() - T0
st.session_state["_timings"] = dict(TIMINGS, reader=table.reader)
