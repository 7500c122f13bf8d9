"""Statistics from sums: ``summarize(tally, fitted, config)`` turns a tally (of one table, or
the sum of many chunks' tallies) into the audit's result — every metric, interval, test,
correction, flag, rank, the overall figures and the fairness table. It reads nothing but the
tally and what the first pass fitted, so a tally made anywhere (in memory, in chunks, on
other machines) gives the same result.
"""
from __future__ import annotations

import time
from dataclasses import replace
from typing import Any, Sequence

import numpy as np
import pandas as pd

from ..core.encoding import AttributeCoding, Encoding
from ..core.stream import CALIBRATION_BINS, Fitted, SourceInfo, median_and_above
from ..core.tally import Tally
from ..errors import AuditInputError, shown
from ..settings import AuditConfig
from .compare import cohens_d, cohens_h, two_proportion, welch_p
from .correct import adjust
from .intervals import f1_interval, mean_interval, mean_t, mover_difference, proportion_interval, welch_difference
from .measure import METRICS, RATE_COLUMNS, RATES, count_frame, metric_value, metric_values, same_text
from .methods import COUNT_WORDS, metric_for
from .findings import explain, selection_level, slice_keys
from .rank import badness, flag_and_rank, rank_among
from .result import ALL, AuditResult


def _names(fam: tuple[int, ...], attrs: Sequence[AttributeCoding]) -> tuple[list, list[list]]:
    """Slice names and each position's values for one family, in code order."""
    if not fam:
        return [ALL], []
    if len(fam) == 1:
        a = attrs[fam[0]]
        vals = list(a.levels)
        return [f"{a.name}={v}" for v in vals], [vals]
    a, b = attrs[fam[0]], attrs[fam[1]]
    names = [f"{a.name}={x} & {b.name}={y}" for x in a.levels for y in b.levels]
    return names, [[x for x in a.levels for _ in b.levels], list(b.levels) * a.cardinality]


def _names_at(fam: tuple[int, ...], attrs: Sequence[AttributeCoding], pos: np.ndarray) -> tuple[np.ndarray, list]:
    """Slice names and each position's values (object arrays) of a sparsely stored family."""
    cards = [attrs[a].cardinality for a in fam]
    codes, rest = [], np.asarray(pos, dtype=np.int64)
    for c in reversed(cards):  # mixed radix, first attribute most significant
        codes.append(rest % c)
        rest = rest // c
    codes = codes[::-1]
    # Object arrays indexed by code: the concatenation runs in numpy's loop, not a Python generator.
    levels = [np.array(attrs[a].levels, dtype=object) for a in fam]
    vals = [lv[cs] for lv, cs in zip(levels, codes)]
    parts = [np.array([f"{' & ' if j else ''}{attrs[a].name}={x}" for x in attrs[a].levels], dtype=object)[cs]
             for j, (a, cs) in enumerate(zip(fam, codes))]
    joined = parts[0]
    for part in parts[1:]:
        joined = joined + part
    return joined, vals


def _text_columns(tl: Tally, keep_fam: list[int], attrs: Sequence[AttributeCoding]) -> list[np.ndarray]:
    """The slice name, then attribute and value at positions 1-3 ('' past the family's order), of
    every slice of the kept families, as object arrays filled in place family by family."""
    sizes = [int(tl.offsets[q + 1] - tl.offsets[q]) for q in keep_fam]
    total = sum(sizes)
    names = np.empty(total, dtype=object)
    attr_cols = [same_text(total, "") for _ in range(3)]
    val_cols = [same_text(total, "") for _ in range(3)]
    lo = 0
    for q, size in zip(keep_fam, sizes):
        fam, hi = tl.families[q], lo + size
        nm, vals = _names_at(fam, attrs, tl.positions(q)) if q in tl.slots else _names(fam, attrs)
        names[lo:hi] = nm
        for j, a in enumerate(fam):
            attr_cols[j][lo:hi] = attrs[a].name
            val_cols[j][lo:hi] = vals[j]
        lo = hi
    return [names, attr_cols[0], val_cols[0], attr_cols[1], val_cols[1], attr_cols[2], val_cols[2]]


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
        support, rsupport = d1, d2
    elif m.kind == "f1":
        val, rval = v["f1"], rv["f1"]
        lo1, hi1 = f1_interval(c["tp"], c["fp"], c["fn"], method=meth, level=lvl)
        lo2, hi2 = f1_interval(rc["tp"], rc["fp"], rc["fn"], method=meth, level=lvl)
        diff, dlo, dhi = mover_difference(val, lo1, hi1, rval, lo2, hi2)
        p, test = two_proportion(c["tp"], c["tp_fp_fn"], rc["tp"], rc["tp_fp_fn"])
        eff = cohens_h(val, rval)
        support, rsupport = c["tp_fp_fn"], rc["tp_fp_fn"]
    else:
        j = 0 if m.name == "log_loss" else 2
        val, rval = v[m.name], rv[m.name]
        lo1, hi1 = mean_interval(c["n"], sums[:, j], sums[:, j + 1], level=lvl)
        diff, dlo, dhi, se, df, var1, var2 = welch_difference(
            c["n"], sums[:, j], sums[:, j + 1], rc["n"], rsums[:, j], rsums[:, j + 1], level=lvl)
        p = welch_p(diff, se, df)
        test = same_text(n1, "welch")
        eff = cohens_d(diff, var1, var2)
        support, rsupport = c["n"], rc["n"]
    return {"metric_value": val, "metric_low": lo1, "metric_high": hi1, "rest_value": rval,
            "diff": diff, "diff_low": dlo, "diff_high": dhi, "effect_size": eff,
            "p_value": p, "test": test, "_support": support, "_rsupport": rsupport}


def _binary_columns(counts, rest, sums, rsums, auc, cfg, n_rows) -> dict[str, Any]:
    """Counts, every rate with its interval, F1, Jaccard, losses and ROC AUC of each slice (two classes)."""
    c = count_frame(counts)
    v = metric_values(c, sums)
    lvl, meth = cfg.level, cfg.interval
    cols: dict[str, Any] = {
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
        tq = mean_t(c["n"], level=lvl)  # one t quantile per slice for both means
        cols["log_loss_low"], cols["log_loss_high"] = mean_interval(c["n"], sums[:, 0], sums[:, 1], level=lvl, t=tq)
        cols["brier_low"], cols["brier_high"] = mean_interval(c["n"], sums[:, 2], sums[:, 3], level=lvl, t=tq)
    else:
        for k in ("log_loss_low", "log_loss_high", "brier_low", "brier_high"):
            cols[k] = np.full(len(counts), np.nan)
    cols["roc_auc"] = auc

    return cols


def _counted(values: np.ndarray, suffix: str) -> np.ndarray:
    """``"<count><suffix>"`` for many slices at once (a text per distinct count, then indexed)."""
    v = np.asarray(values, dtype=np.int64)
    if not len(v):
        return np.empty(0, dtype=object)
    u, inv = np.unique(v, return_inverse=True)
    return np.array([f"{int(x)}{suffix}" for x in u.tolist()], dtype=object)[inv]


def restated_outcomes(tl: Tally, fitted: Fitted) -> dict[int, str]:
    """Attributes whose values restate the label or the prediction (each value goes with one
    class, different values with different classes): slicing by them audits the outcome itself."""
    k = fitted.outcomes.n_classes
    out: dict[int, str] = {}
    for q, fam in enumerate(tl.families):
        if len(fam) != 1:
            continue
        a = fitted.encoding.attributes[fam[0]]
        cube = tl.family(q)[0].reshape(-1, k, k)
        n = cube.sum(axis=(1, 2))
        cube = cube[n > 0]
        if len(cube) != k or a.has_missing:
            continue
        for what, col, margin in (("label", fitted.outcomes.label, cube.sum(axis=2)),
                                  ("prediction", fitted.outcomes.pred, cube.sum(axis=1))):
            single = (margin > 0).sum(axis=1) == 1
            if single.all() and len(set(margin.argmax(axis=1).tolist())) == k:
                src = f"'{col}'" if col else "(probability ≥ threshold)"
                out[fam[0]] = f"restates the {what} {src}: each value goes with one class, so it describes the outcome"
                break
    return out


def check_protected_kept(fitted: Fitted, restated: dict[int, str]) -> None:
    """A protected attribute the audit leaves out is refused, as one skipped when the encoding was
    fitted is (``stream.fit_evidence``): one that restates the label or the prediction is found only
    once the slices are counted, and its fairness check would compare the outcome with itself
    (every group's selection rate 0 or 1), flags that mean nothing. Raised before any output."""
    for i in fitted.protected:
        if i in restated:
            name = fitted.encoding.attributes[i].name
            raise AuditInputError(f"protected attribute {shown(name)} is not among the audited attributes "
                                  f"({restated[i]})", setting="protected")


def summarize(tl: Tally, fitted: Fitted, cfg: AuditConfig, *, source: SourceInfo | None = None,
              timings: dict[str, float] | None = None, t0: float | None = None) -> AuditResult:
    """The audit's result from a tally alone (see module docstring)."""
    t = time.perf_counter()
    t0 = t if t0 is None else t0
    timings = dict(timings or {})
    attrs = list(fitted.encoding.attributes)
    skipped = dict(fitted.encoding.skipped)
    families = list(tl.families)
    restated = restated_outcomes(tl, fitted)
    for i, why in restated.items():
        skipped[attrs[i].name] = why
    check_protected_kept(fitted, restated)
    keep_fam = [q for q, f in enumerate(families) if not any(a in restated for a in f)]
    rows = np.concatenate([np.arange(tl.offsets[q], tl.offsets[q + 1]) for q in keep_fam])
    has_score = fitted.outcomes.has_probabilities
    k_cls = fitted.outcomes.n_classes
    counts = tl.counts[rows]
    sums = tl.sums[rows] if has_score else None
    order = np.concatenate([np.full(tl.offsets[q + 1] - tl.offsets[q], len(families[q])) for q in keep_fam])
    auc = np.full(len(tl.counts), np.nan)
    auc_bound = None
    if tl.auc is not None:
        pos = np.concatenate([np.arange(tl.offsets[families.index(f)], tl.offsets[families.index(f) + 1])
                              for f in tl.auc.families])
        values, bound = tl.auc.result()
        auc[pos] = values
        if fitted.chunked:
            auc_bound = float(np.nanmax(bound)) if np.isfinite(bound).any() else 0.0
    auc = auc[rows]
    n_rows = int(counts[order == 0][0].sum())
    names, a1, v1, a2, v2, a3, v3 = _text_columns(tl, keep_fam, attrs)
    fam_row = [np.full(int(tl.offsets[q + 1] - tl.offsets[q]), q) for q in keep_fam]
    pos_row = [tl.positions(q) for q in keep_fam]
    keep = (counts.sum(axis=1) > 0) | (order == 0)
    idx = np.flatnonzero(keep)
    counts, order, auc = counts[idx], order[idx], auc[idx]
    fam_row, pos_row = np.concatenate(fam_row)[idx], np.concatenate(pos_row)[idx]
    if sums is not None:
        sums = sums[idx]
    rest = counts[order == 0][0][None, :] - counts
    rsums = None if sums is None else sums[order == 0][0][None, :] - sums
    m = metric_for(cfg.metric)
    cols: dict[str, Any] = {
        "slice": names[idx], "order": order,
        "attribute_1": a1[idx], "value_1": v1[idx], "attribute_2": a2[idx], "value_2": v2[idx],
        "attribute_3": a3[idx], "value_3": v3[idx],
    }
    def contrast(ca, cb, sa, sb, *, level: float | None = None) -> dict:
        """The audited metric's comparison of slices ``ca`` and ``cb`` (counts and sums)."""
        cf = cfg if level is None else replace(cfg, level=level)
        if k_cls == 2:
            x, y = count_frame(ca), count_frame(cb)
            need = "f1" if m.kind == "f1" else m.name  # the one value _metric_block reads
            return _metric_block(cf, x, y, {need: metric_value(x, sa, need)}, {need: metric_value(y, sb, need)},
                                 sa, sb)
        from . import multiclass

        return multiclass.metric_block(cf, m, ca, cb, sa, sb, fitted.outcomes.classes)

    if k_cls == 2:
        cols.update(_binary_columns(counts, rest, sums, rsums, auc, cfg, n_rows))
    else:
        from . import multiclass

        cols.update(multiclass.columns(counts, sums, fitted.outcomes.classes, cfg, n_rows))
    mb = contrast(counts, rest, sums, rsums)
    n_slice, rest_n = counts.sum(axis=1), rest.sum(axis=1)
    cols["metric"] = same_text(len(idx), cfg.metric)
    cols["rest_n"] = rest_n
    for k in ("metric_value", "metric_low", "metric_high", "rest_value", "diff", "diff_low", "diff_high",
              "effect_size"):
        cols[k] = mb[k]

    support, rsupport = mb["_support"], mb["_rsupport"]
    sup_title = COUNT_WORDS[m.denominator]
    status = same_text(len(idx), "tested")
    reason = same_text(len(idx), "")
    ms, mms = cfg.min_support, cfg.min_metric_support
    few_rows = n_slice < ms
    few_metric = support < mms
    rest_small = (rest_n < ms) | (rsupport < mms)
    undefined = np.isnan(mb["metric_value"]) | np.isnan(mb["rest_value"]) | np.isnan(mb["p_value"])
    reason[undefined] = "metric undefined in the slice or the rest"
    status = np.where(undefined, "undefined", status)
    reason[rest_small] = (f"the rest has fewer than {ms} rows (minimum support) or fewer than {mms} {sup_title} "
                          "in the metric's denominator (minimum metric support)")
    status = np.where(rest_small, "no_rest", status)
    idx_m = np.flatnonzero(few_metric)
    reason[idx_m] = _counted(support[idx_m], f" {sup_title} < {mms}")
    status = np.where(few_metric, "below_support", status)
    idx_r = np.flatnonzero(few_rows)
    reason[idx_r] = _counted(n_slice[idx_r], f" rows < {ms}")
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
    roles = _roles(cols, counts, sums, rest, rsums, fam_row, pos_row, families, fitted.cards, contrast, cfg,
                   m.higher_is_worse, m_family)
    # Text columns stay Python-object columns: pandas' inference of its own string type costs more than
    # the rest of the statistics for the 125,000 slices of a triples audit (measured).
    # copy=False: one block per column, not stacked into one array per dtype (a copy of every number).
    df = pd.DataFrame({k: (pd.Series(v, dtype=object) if isinstance(v, np.ndarray) and v.dtype == object else v)
                       for k, v in cols.items()}, copy=False)
    if df.shape[1] > 100:  # ten classes or more: consolidated, so a column added later does not warn
        df = df.copy()

    whole = df.iloc[0]
    if k_cls == 2:
        overall = {"n": int(whole["n"]), "tp": int(whole["tp"]), "fp": int(whole["fp"]), "fn": int(whole["fn"]),
                   "tn": int(whole["tn"])}
        for k in RATE_COLUMNS + ["f1", "jaccard", "log_loss", "brier"]:
            overall[k] = _num(whole[k])
            if f"{k}_low" in df.columns:
                overall[f"{k}_low"], overall[f"{k}_high"] = _num(whole[f"{k}_low"]), _num(whole[f"{k}_high"])
        for k in ("f1_neg", "macro_f1", "roc_auc"):
            overall[k] = _num(whole[k])
    else:
        from . import multiclass

        overall = multiclass.overall(whole, fitted.outcomes.classes)
    kept_attrs = tuple(a for i, a in enumerate(attrs) if i not in restated)
    timings["statistics"] = time.perf_counter() - t
    method: dict[str, Any] = {
        "reading": "in chunks" if fitted.chunked else "in memory",
        "roc_auc": ("exact" if not fitted.chunked else
                    f"from per-slice score histograms of {tl.auc.bins} bins; largest bound on the error: "
                    f"{auc_bound:.2g}") if tl.auc is not None else "not computed",
    }
    if auc_bound is not None:
        method["roc_auc_error_bound"] = auc_bound
    method["explanations"] = roles
    if "triples" in tl.pruning:
        tri = dict(tl.pruning["triples"])
        o3 = df["order"] == 3
        tri.update(listed=int(o3.sum()), tested=int((o3 & (df["status"] == "tested")).sum()),
                   flagged=int((o3 & df["flagged"]).sum()))
        method["triples"] = tri
    fairness = None
    if fitted.protected:
        from .fairness import assess

        scoring = None
        if "score" in tl.groups.sum_names:
            if fitted.chunked:
                scoring = median_and_above(tl.groups, fitted)
            else:
                sums_g = tl.groups.named_sums()["above_median"]
                per = []
                for q, fam in enumerate(tl.groups.families):
                    a_, b_ = tl.groups.offsets[q], tl.groups.offsets[q + 1]
                    per.append(sums_g[a_:b_].reshape(-1, CALIBRATION_BINS).sum(axis=1))
                scoring = (fitted.exact_median, per)
        fairness = assess(tl.groups, fitted, cfg, scoring=scoring)
    timings["total"] = time.perf_counter() - t0
    spec = fitted.outcomes
    return AuditResult(slices=df, overall=overall, config=cfg, source=source or SourceInfo(None, None, None),
                       n_rows=n_rows, classes=spec.classes, positive_inferred=spec.positive_inferred,
                       prediction_source=spec.prediction_source, attributes=kept_attrs, skipped=skipped,
                       family_size=m_family, timings=timings, fairness=fairness,
                       encoding=_as_audited(fitted.encoding, kept_attrs, skipped),
                       n_unlabelled=fitted.n_unlabelled, method=method, tally=tl)




def _roles(cols, counts, sums, rest, rsums, fam_row, pos_row, families, cards, contrast, cfg, higher_is_worse,
           m_family) -> dict[str, Any]:
    """Adds ``diff_low_adj``, ``diff_high_adj``, ``severity_adj``, ``flag_rank``, ``finding``,
    ``explained_by``, ``echo_of``, ``finding_rank`` to ``cols`` (see ``findings``); returns the
    numbers the method notes print."""
    n = len(counts)
    flagged = np.asarray(cols["flagged"], dtype=bool)
    f_idx = np.flatnonzero(flagged)
    # The selection is every rejection of the correction (better or worse than the rest): with
    # BH each has p <= R*alpha/m, so an interval at that level excludes no difference (for the
    # Welch test exactly; for rates up to the difference between the test and the MOVER interval).
    selected = int(np.sum(np.asarray(cols["q_value"], dtype=float) <= cfg.alpha))
    lvl = selection_level(selected, m_family, cfg.alpha)
    lo_adj, hi_adj = np.full(n, np.nan), np.full(n, np.nan)
    if len(f_idx):
        # Benjamini & Yekutieli (2005): level 1 - R*alpha/m for the R selected of m tested.
        adj = contrast(counts[f_idx], rest[f_idx], None if sums is None else sums[f_idx],
                       None if rsums is None else rsums[f_idx], level=lvl)
        lo_adj[f_idx], hi_adj[f_idx] = adj["diff_low"], adj["diff_high"]
    sev_adj = np.where(flagged, badness(lo_adj, hi_adj, higher_is_worse=higher_is_worse), np.nan)
    cols["diff_low_adj"], cols["diff_high_adj"], cols["severity_adj"] = lo_adj, hi_adj, sev_adj
    cols["flag_rank"] = rank_among(flagged, sev_adj, cols["p_value"])
    keys = slice_keys(families, fam_row, pos_row, cards, f_idx)
    rank = np.asarray(cols["rank"].to_numpy(dtype=float, na_value=np.nan))
    ex = explain(keys, counts, sums, whole=counts[0], whole_sums=None if sums is None else sums[0],
                 severity=np.asarray(cols["severity"], dtype=float), rank=rank, contrast=contrast,
                 alpha=cfg.alpha, correction=cfg.correction, higher_is_worse=higher_is_worse,
                 min_rows=cfg.min_support, min_metric_rows=cfg.min_metric_support)
    finding = np.zeros(n, dtype=bool)
    finding[ex["finding"]] = True
    names = np.asarray(cols["slice"], dtype=object)
    by, echo = same_text(n, ""), same_text(n, "")
    for r, o in ex["explained_by"].items():
        by[r] = names[o]
    for r, o in ex["echo_of"].items():
        echo[r] = names[o]
    cols["finding"], cols["explained_by"], cols["echo_of"] = finding, by, echo
    cols["finding_rank"] = rank_among(finding, sev_adj, cols["p_value"])
    return {"flagged": int(len(f_idx)), "selected": selected, "findings": int(finding.sum()), "echoes": int(len(ex["echo_of"])),
            "nested_couples": ex["info"]["couples"], "explanation_tests": ex["info"]["tests"],
            "selection_level": None if lvl != lvl else float(lvl)}


def _num(x) -> float | None:
    x = float(x)
    return None if np.isnan(x) else x


def _as_audited(fitted: Encoding, attributes, skipped: dict) -> Encoding:
    """The encoding as audited: an attribute the statistics left out (one that restates the label or
    the prediction, found only once the slices are counted) moves from the fitted encoding's
    attributes to its skipped columns with the same reason, so ``summary.json``'s encoding, reused
    with ``Encoding.from_dict``, slices exactly what was sliced."""
    enc = Encoding(tuple(attributes), dict(skipped))
    return fitted if enc == fitted else enc
