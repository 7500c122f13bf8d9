"""Statistics of a label with three or more classes, from a K × K tally.

Per slice: the K × K confusion counts; for each class c, one-vs-rest precision, recall, F1,
Jaccard index and support; accuracy and error rate; macro, micro and support-weighted averages
of precision, recall and F1; with probabilities, multi-class log loss and Brier score.

Undefined values follow two stated policies. The per-class columns keep Fissure's rule: a ratio
with a zero denominator is NaN. The averages follow scikit-learn's ``precision_recall_fscore_support``
with its default labels (the classes present in the slice's truth or predictions) and
``zero_division=0``: a present class with no predicted rows has precision 0, one with no true
rows recall 0; ``micro`` equals accuracy for single-label data.

Slice-versus-rest tests by metric: error rate, accuracy and per-class recall and precision are
proportions (two-proportion z test, Fisher when an expected count is below 5, Newcombe's
interval of the difference); per-class F1 goes through its Jaccard index as for two classes;
macro-F1 gets a normal interval and z test with standard errors from the multinomial delta
method (its coverage and test size are checked by simulation in the tests); mean losses get
Welch's t test from n, Σx, Σx².
"""
from __future__ import annotations

import numpy as np

from .compare import cohens_d, cohens_h, two_proportion, welch_p
from .intervals import _z, f1_interval, mean_interval, mean_t, mover_difference, proportion_interval, welch_difference
from .measure import ratio, same_text


def cube(counts: np.ndarray, k: int) -> np.ndarray:
    """(slices, true class, predicted class) counts from the tally's (slices, K·K) cells."""
    return counts.reshape(-1, k, k).astype(np.int64)


def class_counts(c: np.ndarray) -> dict[str, np.ndarray]:
    """Per class (slices × K): support (true rows), predicted rows, tp, fp, fn."""
    tp = np.diagonal(c, axis1=1, axis2=2)
    support = c.sum(axis=2)
    pred = c.sum(axis=1)
    return {"tp": tp, "support": support, "pred": pred, "fp": pred - tp, "fn": support - tp}


def averages(c: np.ndarray) -> dict[str, np.ndarray]:
    """Macro, micro and weighted averages as scikit-learn defines them (see module docstring)."""
    cc = class_counts(c)
    tp, sup, pred, fp, fn = cc["tp"], cc["support"], cc["pred"], cc["fp"], cc["fn"]
    present = (sup > 0) | (pred > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        prec = np.where(pred > 0, tp / np.maximum(pred, 1), 0.0)
        rec = np.where(sup > 0, tp / np.maximum(sup, 1), 0.0)
        f1 = np.where(present, 2 * tp / np.maximum(2 * tp + fp + fn, 1), 0.0)
        k_present = present.sum(axis=1)
        n = c.sum(axis=(1, 2))

        def macro(x):
            return np.where(k_present > 0, (x * present).sum(axis=1) / np.maximum(k_present, 1), np.nan)

        weighted = np.where(n > 0, (f1 * sup).sum(axis=1) / np.maximum(sup.sum(axis=1), 1), np.nan)
        w_prec = np.where(n > 0, (prec * sup).sum(axis=1) / np.maximum(sup.sum(axis=1), 1), np.nan)
        w_rec = np.where(n > 0, (rec * sup).sum(axis=1) / np.maximum(sup.sum(axis=1), 1), np.nan)
        micro = ratio(np.trace(c, axis1=1, axis2=2), n)
    return {"macro_f1": macro(f1), "macro_precision": macro(prec), "macro_recall": macro(rec),
            "micro_f1": micro, "weighted_f1": weighted, "weighted_precision": w_prec, "weighted_recall": w_rec}


def macro_f1_variance(c: np.ndarray) -> np.ndarray:
    """Delta-method variance of macro-F1 for multinomial counts (per slice).

    With cell shares p, F1_c = 2 p_cc / (r_c + s_c) (r: true-class share, s: predicted share), the
    gradient of the macro mean over the K' present classes is G_ij = a_i + a_j + [i = j] b_i with
    a_c = −2 p_cc / (K' d_c²), b_c = 2 / (K' d_c), d_c = r_c + s_c; Var = (Σ G² p − (Σ G p)²) / n.
    """
    n = c.sum(axis=(1, 2)).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        p = c / n[:, None, None]
        r, s = p.sum(axis=2), p.sum(axis=1)
        d = r + s
        present = d > 0
        kp = present.sum(axis=1)[:, None]
        pcc = np.diagonal(p, axis1=1, axis2=2)
        a = np.where(present, -2 * pcc / (kp * d * d), 0.0)
        b = np.where(present, 2 / (kp * d), 0.0)
        g = a[:, :, None] + a[:, None, :] + b[:, :, None] * np.eye(c.shape[1])[None]
        m1 = (g * p).sum(axis=(1, 2))
        m2 = (g * g * p).sum(axis=(1, 2))
        var = (m2 - m1 * m1) / n
    return np.where(n > 0, np.maximum(var, 0.0), np.nan)


def macro_f1_interval(c: np.ndarray, *, level: float):
    m = averages(c)["macro_f1"]
    se = np.sqrt(macro_f1_variance(c))
    z = _z(level)
    return np.clip(m - z * se, 0.0, 1.0), np.clip(m + z * se, 0.0, 1.0)


def columns(counts, sums, classes, cfg, n_rows):
    """The per-slice columns of a multi-class audit (before the audited metric's block)."""
    k = len(classes)
    c = cube(counts, k)
    n = c.sum(axis=(1, 2))
    lvl, meth = cfg.level, cfg.interval
    cols: dict[str, np.ndarray] = {"n": n, "share": n / n_rows}
    for i, t in enumerate(classes):
        for j, p in enumerate(classes):
            cols[f"true_{t}_pred_{p}"] = c[:, i, j]
    correct = np.trace(c, axis1=1, axis2=2)
    cols["errors"] = n - correct
    cc = class_counts(c)
    for i, t in enumerate(classes):
        tp, sup, pred, fp, fn = (cc[x][:, i] for x in ("tp", "support", "pred", "fp", "fn"))
        cols[f"support_{t}"] = sup
        cols[f"predicted_{t}"] = pred
        cols[f"precision_{t}"] = ratio(tp, pred)
        cols[f"recall_{t}"] = ratio(tp, sup)
        cols[f"f1_{t}"] = ratio(2 * tp, 2 * tp + fp + fn)
        cols[f"jaccard_{t}"] = ratio(tp, tp + fp + fn)
    for name, num in (("accuracy", correct), ("error_rate", n - correct)):
        cols[name] = ratio(num, n)
        cols[f"{name}_low"], cols[f"{name}_high"] = proportion_interval(num, n, method=meth, level=lvl)
    av = averages(c)
    cols["macro_f1"] = av["macro_f1"]
    cols["macro_f1_low"], cols["macro_f1_high"] = macro_f1_interval(c, level=lvl)
    for key in ("micro_f1", "weighted_f1", "macro_precision", "macro_recall"):
        cols[key] = av[key]
    if sums is not None:
        cols["log_loss"], cols["brier"] = ratio(sums[:, 0], n), ratio(sums[:, 2], n)
        tq = mean_t(n, level=lvl)  # one t quantile per slice for both means
        cols["log_loss_low"], cols["log_loss_high"] = mean_interval(n, sums[:, 0], sums[:, 1], level=lvl, t=tq)
        cols["brier_low"], cols["brier_high"] = mean_interval(n, sums[:, 2], sums[:, 3], level=lvl, t=tq)
    else:
        for key in ("log_loss", "brier", "log_loss_low", "log_loss_high", "brier_low", "brier_high"):
            cols[key] = np.full(len(n), np.nan)
    return cols


def metric_block(cfg, metric, counts, rest, sums, rsums, classes):
    """Value, interval, rest value, difference with interval, test, effect size and support of the
    audited metric for each slice (``rest``: the rest's counts)."""
    k = len(classes)
    c, rc = cube(counts, k), cube(rest, k)
    lvl, meth = cfg.level, cfg.interval
    name = metric.name
    n, rn = c.sum(axis=(1, 2)), rc.sum(axis=(1, 2))
    base, _, cls = name.partition(":")
    if name in ("error_rate", "accuracy"):
        corr, rcorr = np.trace(c, axis1=1, axis2=2), np.trace(rc, axis1=1, axis2=2)
        k1, k2 = (n - corr, rn - rcorr) if name == "error_rate" else (corr, rcorr)
        d1, d2 = n, rn
    elif base in ("recall", "precision"):
        i = classes.index(cls)
        cc, rcc = class_counts(c), class_counts(rc)
        k1, k2 = cc["tp"][:, i], rcc["tp"][:, i]
        key = "support" if base == "recall" else "pred"
        d1, d2 = cc[key][:, i], rcc[key][:, i]
    elif base == "f1":
        i = classes.index(cls)
        cc, rcc = class_counts(c), class_counts(rc)
        tp, fp, fn = cc["tp"][:, i], cc["fp"][:, i], cc["fn"][:, i]
        rtp, rfp, rfn = rcc["tp"][:, i], rcc["fp"][:, i], rcc["fn"][:, i]
        val, rval = ratio(2 * tp, 2 * tp + fp + fn), ratio(2 * rtp, 2 * rtp + rfp + rfn)
        lo1, hi1 = f1_interval(tp, fp, fn, method=meth, level=lvl)
        lo2, hi2 = f1_interval(rtp, rfp, rfn, method=meth, level=lvl)
        diff, dlo, dhi = mover_difference(val, lo1, hi1, rval, lo2, hi2)
        p, test = two_proportion(tp, tp + fp + fn, rtp, rtp + rfp + rfn)
        return _block(val, lo1, hi1, rval, diff, dlo, dhi, cohens_h(val, rval), p, test, tp + fp + fn,
                      rtp + rfp + rfn)
    elif name == "macro_f1":
        val, rval = averages(c)["macro_f1"], averages(rc)["macro_f1"]
        v1, v2 = macro_f1_variance(c), macro_f1_variance(rc)
        lo1, hi1 = macro_f1_interval(c, level=lvl)
        z = _z(lvl)
        diff = val - rval
        se = np.sqrt(v1 + v2)
        from .compare import _normal_sf

        with np.errstate(invalid="ignore", divide="ignore"):
            p = np.where(se > 0, 2 * _normal_sf(np.abs(diff) / se), np.where(diff == 0, 1.0, np.nan))
        test = same_text(len(n), "delta")
        return _block(val, lo1, hi1, rval, diff, diff - z * se, diff + z * se, cohens_h(val, rval), p, test, n, rn)
    else:  # mean losses
        j = 0 if name == "log_loss" else 2
        val, rval = ratio(sums[:, j], n), ratio(rsums[:, j], rn)
        lo1, hi1 = mean_interval(n, sums[:, j], sums[:, j + 1], level=lvl)
        diff, dlo, dhi, se, df, var1, var2 = welch_difference(n, sums[:, j], sums[:, j + 1], rn, rsums[:, j],
                                                              rsums[:, j + 1], level=lvl)
        p = welch_p(diff, se, df)
        return _block(val, lo1, hi1, rval, diff, dlo, dhi, cohens_d(diff, var1, var2), p,
                      same_text(len(n), "welch"), n, rn)
    val, rval = ratio(k1, d1), ratio(k2, d2)
    lo1, hi1 = proportion_interval(k1, d1, method=meth, level=lvl)
    lo2, hi2 = proportion_interval(k2, d2, method=meth, level=lvl)
    diff, dlo, dhi = mover_difference(val, lo1, hi1, rval, lo2, hi2)
    p, test = two_proportion(k1, d1, k2, d2)
    return _block(val, lo1, hi1, rval, diff, dlo, dhi, cohens_h(val, rval), p, test, d1, d2)


def _block(val, lo, hi, rval, diff, dlo, dhi, eff, p, test, support, rsupport):
    return {"metric_value": val, "metric_low": lo, "metric_high": hi, "rest_value": rval, "diff": diff,
            "diff_low": dlo, "diff_high": dhi, "effect_size": eff, "p_value": p, "test": test,
            "_support": support, "_rsupport": rsupport}


def overall(row, classes) -> dict:
    """The whole table's figures for ``summary.json``, the terminal and the page."""
    def num(x):
        x = float(x)
        return None if x != x else x

    out = {"n": int(row["n"]), "classes": list(classes)}
    for key in ("accuracy", "error_rate", "macro_f1", "log_loss", "brier"):
        out[key] = num(row[key])
        out[f"{key}_low"], out[f"{key}_high"] = num(row[f"{key}_low"]), num(row[f"{key}_high"])
    for key in ("micro_f1", "weighted_f1", "macro_precision", "macro_recall"):
        out[key] = num(row[key])
    out["per_class"] = {t: {"support": int(row[f"support_{t}"]), "predicted": int(row[f"predicted_{t}"]),
                            "precision": num(row[f"precision_{t}"]), "recall": num(row[f"recall_{t}"]),
                            "f1": num(row[f"f1_{t}"]), "jaccard": num(row[f"jaccard_{t}"])} for t in classes}
    out["confusion"] = [[int(row[f"true_{t}_pred_{p}"]) for p in classes] for t in classes]
    return out
