"""The audit: one call from a table to the result every output is a view of.

Pipeline: intake (validate outcomes) → encode (attributes, bins) → tally (sums per slice)
→ measure (metrics) → intervals and slice-vs-rest tests → correction → ranking.
"""
from __future__ import annotations

import platform
import time
from dataclasses import dataclass, field, fields, replace
from typing import Any, Callable, Mapping, Sequence

import numpy as np
import pandas as pd

from . import __version__
from .core.auc import slice_auc
from .stats.compare import cohens_d, cohens_h, two_proportion, welch_p
from .settings import AuditConfig
from .stats.correct import CORRECTIONS, adjust
from .core.encoding import Attribute, choose_columns, encode_attributes
from .errors import AuditInputError
from .core.outcomes import Outcomes, check_columns, read_outcomes
from .core.read import SourceInfo
from .stats.intervals import INTERVALS, f1_interval, mean_interval, mover_difference, proportion_interval, welch_difference
from .stats.measure import METRICS, RATE_COLUMNS, RATES, count_frame, metric_values
from .stats.rank import flag_and_rank
from .core.tally import plan_families, row_losses, tally

ALL = "(all)"
Progress = Callable[[str, float], None]

SUPPORT_TITLES = {"n": "rows", "actual_pos": "actual positives", "actual_neg": "actual negatives",
                  "pred_pos": "predicted positives", "pred_neg": "predicted negatives",
                  "tp_fp_fn": "rows positive in truth or prediction"}


@dataclass(frozen=True)
class AttributeInfo:
    name: str
    kind: str
    levels: tuple[str, ...]
    edges: tuple[float, ...] | None
    n_missing: int


@dataclass(frozen=True)
class AuditResult:
    """Everything an audit found; the CLI files, the page, the charts and the report read it.

    ``slices`` has one row per non-empty slice (orders 0, 1, 2), tested or not; its columns
    are documented in DEVELOPERS.md. ``overall`` maps metric names to values and intervals
    for the whole table. ``family_size`` is the number m of tests corrected together.
    """

    slices: pd.DataFrame
    overall: dict[str, Any]
    config: AuditConfig
    source: SourceInfo
    n_rows: int
    classes: tuple[str, str]
    positive_inferred: bool
    prediction_source: str
    attributes: tuple[AttributeInfo, ...]
    skipped: dict[str, str]
    family_size: int
    timings: dict[str, float] = field(default_factory=dict, compare=False)
    version: str = __version__
    fairness: Any = None

    @property
    def metric(self):
        return METRICS[self.config.metric]

    def tested(self) -> pd.DataFrame:
        return self.slices[self.slices["status"] == "tested"]

    def flagged(self) -> pd.DataFrame:
        """Flagged slices, worst first."""
        f = self.slices[self.slices["flagged"]]
        return f.sort_values("rank", kind="stable")

    def ranked(self) -> pd.DataFrame:
        """Tested slices, worst first."""
        return self.tested().sort_values("rank", kind="stable")

    def slice(self, name: str) -> pd.Series:
        hit = self.slices.index[self.slices["slice"] == name]
        if len(hit) == 0:
            raise AuditInputError(f"no slice named '{name}'")
        return self.slices.loc[hit[0]]

    def rest_counts(self, name: str) -> dict[str, int]:
        """Confusion counts of the rows outside slice ``name``."""
        s = self.slice(name)
        whole = self.slice(ALL)
        return {k: int(whole[k] - s[k]) for k in ("tp", "fp", "fn", "tn", "n")}

    def compare(self, name: str) -> pd.DataFrame:
        """Every metric of slice ``name`` beside the same metric for the rest of the rows, with intervals.

        Columns: ``metric``, ``slice``, ``slice_low``, ``slice_high``, ``rest``, ``rest_low``, ``rest_high``.
        """
        s = self.slice(name)
        rest = self.rest_counts(name)
        cells = ("tn", "fp", "fn", "tp")  # the cell order of the tally
        c = count_frame(np.array([[int(s[k]) for k in cells], [rest[k] for k in cells]]))
        v = metric_values(c, None)
        lvl, meth = self.config.level, self.config.interval
        rows = []
        for r, (num, den) in RATES.items():
            lo, hi = proportion_interval(c[num], c[den], method=meth, level=lvl)
            rows.append((r, v[r][0], lo[0], hi[0], v[r][1], lo[1], hi[1]))
        lo, hi = f1_interval(c["tp"], c["fp"], c["fn"], method=meth, level=lvl)
        rows.append(("f1", v["f1"][0], lo[0], hi[0], v["f1"][1], lo[1], hi[1]))
        out = pd.DataFrame(rows, columns=["metric", "slice", "slice_low", "slice_high", "rest", "rest_low",
                                          "rest_high"])
        total_errors = int(self.slice(ALL)["errors"])
        out.attrs["share_of_errors"] = float(s["errors"] / total_errors) if total_errors else float("nan")
        return out

    def status_counts(self) -> dict[str, int]:
        st = self.slices.loc[self.slices["order"] > 0, "status"].value_counts()
        out = {k: int(v) for k, v in st.items()}
        out["flagged"] = int(self.slices["flagged"].sum())
        return out

    @property
    def environment(self) -> dict[str, str]:
        import scipy

        return {"python": platform.python_version(), "fissure": __version__, "numpy": np.__version__,
                "pandas": pd.__version__, "scipy": scipy.__version__}


def _names(fam: tuple[int, ...], attrs: Sequence[Attribute]) -> tuple[list, list, list, list, list]:
    """Slice names and per-position attribute/value columns for one family, in code order."""
    if not fam:
        return [ALL], [""], [""], [""], [""]
    if len(fam) == 1:
        a = attrs[fam[0]]
        vals = list(a.levels)
        return [f"{a.name}={v}" for v in vals], [a.name] * len(vals), vals, [""] * len(vals), [""] * len(vals)
    a, b = attrs[fam[0]], attrs[fam[1]]
    size = a.cardinality * b.cardinality
    names = [f"{a.name}={x} & {b.name}={y}" for x in a.levels for y in b.levels]
    va = [x for x in a.levels for _ in b.levels]
    return names, [a.name] * size, va, [b.name] * size, list(b.levels) * a.cardinality


def _check_settings(cfg: AuditConfig, has_score: bool) -> None:
    if cfg.metric not in METRICS:
        raise AuditInputError(f"metric '{cfg.metric}' is not known; choose one of {', '.join(METRICS)}")
    if METRICS[cfg.metric].needs_score and not has_score:
        raise AuditInputError(f"metric '{cfg.metric}' needs a probability column (score=..., --score)")
    if cfg.correction not in CORRECTIONS:
        raise AuditInputError(f"correction '{cfg.correction}' is not known; choose one of {', '.join(CORRECTIONS)}")
    if cfg.interval not in INTERVALS:
        raise AuditInputError(f"interval '{cfg.interval}' is not known; choose one of {', '.join(INTERVALS)}")
    if not (0 < cfg.alpha < 1):
        raise AuditInputError(f"alpha must lie strictly between 0 and 1; received {cfg.alpha!r}")
    if not (0.5 <= cfg.level < 1):
        raise AuditInputError(f"interval level must lie in [0.5, 1); received {cfg.level!r}")
    for name in ("min_support", "min_metric_support"):
        v = getattr(cfg, name)
        if not isinstance(v, (int, np.integer)) or isinstance(v, bool) or v < 1:
            raise AuditInputError(f"{name} must be a whole number of at least 1; received {v!r}")
    if cfg.max_order not in (1, 2):
        raise AuditInputError(f"max_order must be 1 or 2; received {cfg.max_order!r}")
    if cfg.auc_max_order not in (-1, 0, 1, 2):
        raise AuditInputError(f"auc_max_order must be -1 (none), 0, 1 or 2; received {cfg.auc_max_order!r}")


def _metric_block(cfg: AuditConfig, c: dict, rc: dict, v: dict, rv: dict, sums, rsums) -> dict[str, np.ndarray]:
    """Value, interval, rest value, difference with interval, test and effect size for the audited metric."""
    m = METRICS[cfg.metric]
    lvl, meth = cfg.level, cfg.interval
    n1 = len(c["n"])
    if m.kind == "rate":
        k1, d1 = c[m.numerator], c[m.denominator]
        k2, d2 = rc[m.numerator], rc[m.denominator]
        val, rval = v[m.name], rv[m.name]
        lo1, hi1 = proportion_interval(k1, d1, method=meth, level=lvl)
        lo2, hi2 = proportion_interval(k2, d2, method=meth, level=lvl)
        diff, dlo, dhi = mover_difference(val, lo1, hi1, rval, lo2, hi2)
        p, test = two_proportion(k1, d1, k2, d2)
        eff = cohens_h(val, rval)
        eff_name = "cohens_h"
        support, rsupport = d1, d2
    elif m.kind == "f1":
        val, rval = v["f1"], rv["f1"]
        lo1, hi1 = f1_interval(c["tp"], c["fp"], c["fn"], method=meth, level=lvl)
        lo2, hi2 = f1_interval(rc["tp"], rc["fp"], rc["fn"], method=meth, level=lvl)
        diff, dlo, dhi = mover_difference(val, lo1, hi1, rval, lo2, hi2)
        p, test = two_proportion(c["tp"], c["tp_fp_fn"], rc["tp"], rc["tp_fp_fn"])
        eff = cohens_h(val, rval)
        eff_name = "cohens_h"
        support, rsupport = c["tp_fp_fn"], rc["tp_fp_fn"]
    else:
        j = 0 if m.name == "log_loss" else 2
        val, rval = v[m.name], rv[m.name]
        lo1, hi1 = mean_interval(c["n"], sums[:, j], sums[:, j + 1], level=lvl)
        diff, dlo, dhi, se, df, var1, var2 = welch_difference(
            c["n"], sums[:, j], sums[:, j + 1], rc["n"], rsums[:, j], rsums[:, j + 1], level=lvl)
        p = welch_p(diff, se, df)
        test = np.full(n1, "welch", dtype=object)
        eff = cohens_d(diff, var1, var2)
        eff_name = "cohens_d"
        support, rsupport = c["n"], rc["n"]
    return {"metric_value": val, "metric_low": lo1, "metric_high": hi1, "rest_value": rval,
            "diff": diff, "diff_low": dlo, "diff_high": dhi, "effect_size": eff,
            "p_value": p, "test": test, "_support": support, "_rsupport": rsupport, "_eff_name": eff_name}


def run(
    data: pd.DataFrame,
    *,
    label: str,
    pred: str | None = None,
    score: str | None = None,
    positive: Any = None,
    threshold: float = 0.5,
    attributes: Sequence[str] | None = None,
    bins: int = 5,
    bin_edges: Mapping[str, Sequence[float]] | None = None,
    metric: str = "error_rate",
    min_support: int = 30,
    min_metric_support: int = 10,
    alpha: float = 0.05,
    correction: str = "bh",
    level: float = 0.95,
    interval: str = "wilson",
    max_order: int = 2,
    auc_max_order: int = 1,
    max_levels: int = 100,
    source: SourceInfo | None = None,
    progress: Progress | None = None,
    kernel: str = "auto",
    **extra: Any,
) -> AuditResult:
    """Audit a binary classifier's predictions slice by slice.

    Parameters
    ----------
    data : DataFrame
        One row per scored case: the label, a prediction and/or a probability, attributes.
    label, pred, score : str
        Column names: true label; predicted label; predicted probability of the positive
        class. Give ``pred`` or ``score`` (or both: counts then use ``pred``).
    positive : optional
        The positive class. Inferred for {0, 1}, {False, True}, {no, yes} and similar.
    threshold : float
        With ``score`` only, the prediction is ``score >= threshold``.
    attributes : list of str, optional
        Columns to slice by (default: every other column, identifier-like ones skipped).
    bins, bin_edges
        Quantile bins per numeric column, or explicit edges ``{column: [e0, e1, ...]}``.
    metric : str
        The audited metric (see ``audit.measure.METRICS``); default ``error_rate``.
    min_support, min_metric_support : int
        A slice (and its rest) is tested only with at least ``min_support`` rows and at
        least ``min_metric_support`` rows in the metric's denominator (e.g. actual positives
        for recall). Others are listed with status ``below_support``.
    alpha : float
        Flag when the adjusted p-value is at most ``alpha`` and the slice is worse.
    correction : {"bh", "by", "holm", "bonferroni", "none"}
    level : float
        Confidence level of every interval.
    interval : {"wilson", "clopper-pearson"}
    max_order : {1, 2}
        Single attributes only, or pairs too.
    auc_max_order : {-1, 0, 1, 2}
        Highest slice order for which ROC AUC is computed (needs ``score``; -1: none).

    Returns
    -------
    AuditResult

    Examples
    --------
    >>> import pandas as pd
    >>> df = pd.DataFrame({"y": [0, 1] * 50, "p": [0.2, 0.7] * 45 + [0.9, 0.1] * 5,
    ...                    "region": ["north"] * 60 + ["south"] * 40})
    >>> res = run(df, label="y", score="p")
    >>> s = res.slice("region=south")
    >>> int(s["n"]), int(s["errors"]), float(s["error_rate"])
    (40, 10, 0.25)
    """
    t0 = time.perf_counter()
    timings: dict[str, float] = {}
    note = progress or (lambda stage, frac: None)
    if not isinstance(data, pd.DataFrame):
        raise AuditInputError(f"data must be a pandas DataFrame; received {type(data).__name__}")
    unknown = set(extra) - {f.name for f in fields(AuditConfig)}
    if unknown:
        raise TypeError(f"run() got unexpected keyword argument '{sorted(unknown)[0]}'")
    cfg = AuditConfig(
        label=label, pred=pred, score=score, positive=None if positive is None else str(positive),
        threshold=float(threshold) if isinstance(threshold, (int, float)) else threshold,
        attributes=None if attributes is None else tuple(attributes), bins=bins,
        bin_edges={k: tuple(float(x) for x in v) for k, v in (bin_edges or {}).items()},
        max_levels=max_levels, metric=metric, min_support=min_support, min_metric_support=min_metric_support,
        alpha=alpha, correction=correction, level=level, interval=interval, max_order=max_order,
        auc_max_order=auc_max_order,
        **{k: (tuple(v) if isinstance(v, list) else v) for k, v in extra.items()},
    )
    check_columns(data)
    note("checking input", 0.0)
    out = read_outcomes(data, label=label, pred=pred, score=score, positive=positive, threshold=threshold)
    if positive is None:
        cfg = replace(cfg, positive=out.positive)
    _check_settings(cfg, out.score is not None)
    reserved = [c for c in (label, pred, score) if c is not None]
    cols, explicit = choose_columns(data, attributes, reserved=reserved)
    note("encoding attributes", 0.1)
    attrs, skipped = encode_attributes(data, cols, explicit=explicit, n_bins=bins, bin_edges=bin_edges,
                                       max_levels=max_levels)
    if not attrs:
        why = "; ".join(f"{k}: {v}" for k, v in skipped.items()) or "the table has no other columns"
        raise AuditInputError(f"no attribute column left to slice by ({why})")
    timings["input"] = time.perf_counter() - t0
    return _audit(out, attrs, skipped, cfg, source or SourceInfo(None, None, None), note, timings, t0, kernel)


def _audit(out: Outcomes, attrs: list[Attribute], skipped, cfg: AuditConfig, source, note, timings, t0,
           kernel) -> AuditResult:
    n_rows = len(out.y)
    codes = [a.codes for a in attrs]
    cards = [a.cardinality for a in attrs]
    cell = (out.y * 2 + out.yhat).astype(np.int8)
    ll = br = None
    if out.score is not None:
        ll, br = row_losses(out.y, out.score)
    families = plan_families(len(attrs), cfg.max_order)
    note("counting slices", 0.2)
    t = time.perf_counter()
    tl = tally(codes, cards, cell, ll, br, families=families, kernel=kernel)
    timings["tally"] = time.perf_counter() - t

    counts, sums = tl.counts, (tl.sums if out.score is not None else None)
    order = np.concatenate([np.full(tl.offsets[k + 1] - tl.offsets[k], len(f)) for k, f in enumerate(families)])
    auc = np.full(len(order), np.nan)
    if out.score is not None and cfg.auc_max_order >= 0:
        note("ranking scores for ROC AUC", 0.5)
        t = time.perf_counter()
        sel = [k for k, f in enumerate(families) if len(f) <= cfg.auc_max_order]
        sub = [families[k] for k in sel]
        sub_counts = np.concatenate([tl.family(k)[0] for k in sel])
        a = slice_auc(codes, cards, out.y, out.score, families=sub, counts=sub_counts)
        pos = np.concatenate([np.arange(tl.offsets[k], tl.offsets[k + 1]) for k in sel])
        auc[pos] = a
        timings["auc"] = time.perf_counter() - t

    note("intervals and tests", 0.7)
    t = time.perf_counter()
    names, a1, v1, a2, v2 = [], [], [], [], []
    for f in families:
        nm, x1, y1, x2, y2 = _names(f, attrs)
        names += nm; a1 += x1; v1 += y1; a2 += x2; v2 += y2
    c = count_frame(counts)
    keep = (c["n"] > 0) | (order == 0)
    idx = np.flatnonzero(keep)
    counts, order, auc = counts[idx], order[idx], auc[idx]
    if sums is not None:
        sums = sums[idx]
    c = {k: val[idx] for k, val in c.items()}
    whole_counts = counts[order == 0][0]
    rest = whole_counts[None, :] - counts
    rc = count_frame(rest)
    rsums = None if sums is None else sums[order == 0][0][None, :] - sums
    v = metric_values(c, sums)
    rv = metric_values(rc, rsums)
    lvl, meth = cfg.level, cfg.interval

    cols: dict[str, Any] = {
        "slice": np.asarray(names, dtype=object)[idx], "order": order,
        "attribute_1": np.asarray(a1, dtype=object)[idx], "value_1": np.asarray(v1, dtype=object)[idx],
        "attribute_2": np.asarray(a2, dtype=object)[idx], "value_2": np.asarray(v2, dtype=object)[idx],
        "n": c["n"], "share": c["n"] / n_rows,
        "actual_pos": c["actual_pos"], "pred_pos": c["pred_pos"],
        "tp": c["tp"], "fp": c["fp"], "fn": c["fn"], "tn": c["tn"], "errors": c["errors"],
    }
    for r, (num, den) in RATES.items():
        cols[r] = v[r]
        cols[f"{r}_low"], cols[f"{r}_high"] = proportion_interval(c[num], c[den], method=meth, level=lvl)
    cols["f1"] = v["f1"]
    cols["f1_low"], cols["f1_high"] = f1_interval(c["tp"], c["fp"], c["fn"], method=meth, level=lvl)
    cols["f1_neg"], cols["macro_f1"], cols["jaccard"] = v["f1_neg"], v["macro_f1"], v["jaccard"]
    cols["jaccard_low"], cols["jaccard_high"] = proportion_interval(c["tp"], c["tp_fp_fn"], method=meth, level=lvl)
    cols["log_loss"], cols["brier"] = v["log_loss"], v["brier"]
    if sums is not None:
        cols["log_loss_low"], cols["log_loss_high"] = mean_interval(c["n"], sums[:, 0], sums[:, 1], level=lvl)
        cols["brier_low"], cols["brier_high"] = mean_interval(c["n"], sums[:, 2], sums[:, 3], level=lvl)
    else:
        for k in ("log_loss_low", "log_loss_high", "brier_low", "brier_high"):
            cols[k] = np.full(len(idx), np.nan)
    cols["roc_auc"] = auc

    mb = _metric_block(cfg, c, rc, v, rv, sums, rsums)
    m = METRICS[cfg.metric]
    cols["metric"] = np.full(len(idx), cfg.metric, dtype=object)
    cols["rest_n"] = rc["n"]
    for k in ("metric_value", "metric_low", "metric_high", "rest_value", "diff", "diff_low", "diff_high",
              "effect_size"):
        cols[k] = mb[k]

    support, rsupport = mb["_support"], mb["_rsupport"]
    sup_title = SUPPORT_TITLES[m.denominator]
    status = np.full(len(idx), "tested", dtype=object)
    reason = np.full(len(idx), "", dtype=object)
    ms, mms = cfg.min_support, cfg.min_metric_support
    few_rows = c["n"] < ms
    few_metric = support < mms
    rest_small = (rc["n"] < ms) | (rsupport < mms)
    undefined = np.isnan(mb["metric_value"]) | np.isnan(mb["rest_value"]) | np.isnan(mb["p_value"])
    reason[undefined] = "metric undefined in the slice or the rest"
    status = np.where(undefined, "undefined", status)
    reason[rest_small] = f"the rest has fewer than {ms} rows or {mms} {sup_title}"
    status = np.where(rest_small, "no_rest", status)
    idx_m = np.flatnonzero(few_metric)
    reason[idx_m] = [f"{int(v)} {sup_title} < {mms}" for v in support[idx_m]]
    status = np.where(few_metric, "below_support", status)
    idx_r = np.flatnonzero(few_rows)
    reason[idx_r] = [f"{int(v)} rows < {ms}" for v in c["n"][idx_r]]
    status = np.where(few_rows, "below_support", status)
    status = np.where(order == 0, "whole_table", status)
    reason[order == 0] = "the reference population"
    tested = status == "tested"
    p = np.where(tested, mb["p_value"], np.nan)
    cols["test"] = np.where(tested, mb["test"], "")
    cols["p_value"] = p
    q, m_family = adjust(p, method=cfg.correction)
    cols["q_value"] = q
    cols["status"] = status
    cols["status_reason"] = reason
    cols.update(flag_and_rank(cols, alpha=cfg.alpha, higher_is_worse=m.higher_is_worse))
    df = pd.DataFrame(cols)
    timings["statistics"] = time.perf_counter() - t

    whole = df.iloc[0]
    overall = {"n": int(whole["n"]), "tp": int(whole["tp"]), "fp": int(whole["fp"]), "fn": int(whole["fn"]),
               "tn": int(whole["tn"])}
    for k in RATE_COLUMNS + ["f1", "jaccard", "log_loss", "brier"]:
        overall[k] = _num(whole[k])
        if f"{k}_low" in df.columns:
            overall[f"{k}_low"], overall[f"{k}_high"] = _num(whole[f"{k}_low"]), _num(whole[f"{k}_high"])
    for k in ("f1_neg", "macro_f1", "roc_auc"):
        overall[k] = _num(whole[k])
    info = tuple(AttributeInfo(a.name, a.kind, a.levels, a.edges, a.n_missing) for a in attrs)
    timings["total"] = time.perf_counter() - t0
    note("done", 1.0)
    res = AuditResult(slices=df, overall=overall, config=cfg, source=source, n_rows=n_rows, classes=out.classes,
                      positive_inferred=out.positive_inferred, prediction_source=out.prediction_source,
                      attributes=info, skipped=dict(skipped), family_size=m_family, timings=timings)
    if cfg.protected:
        from .stats.fairness import assess

        note("group fairness", 0.9)
        res = replace(res, fairness=assess(attrs, out, cfg))
    return res


def _num(x) -> float | None:
    x = float(x)
    return None if np.isnan(x) else x
