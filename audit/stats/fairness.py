"""Group fairness across protected attributes and their pairwise intersections.

For every group of a protected attribute (and of each pair of protected attributes):
counts, base rate, selection rate (share receiving the favourable predicted outcome),
true- and false-positive rates, false-negative rate, positive predictive value, accuracy,
calibration with probabilities, each with an interval; and against a reference group the
impact ratio with the four-fifths check, and differences of selection rate, TPR
(equal opportunity), FPR, PPV (predictive parity) and the equalized-odds gap, each with
an interval and a test, corrected across the whole fairness family.

References
----------
1. US Uniform Guidelines on Employee Selection Procedures, 29 CFR 1607.4(D) (four-fifths rule).
2. Hardt, Price & Srebro (2016), Equality of opportunity in supervised learning.
3. Chouldechova (2017), Fair prediction with disparate impact. Big Data 5(2).
4. Kleinberg, Mullainathan & Raghavan (2016), Inherent trade-offs in the fair determination of risk scores.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from fractions import Fraction
from typing import Any

import numpy as np
import pandas as pd

from .compare import two_proportion
from .correct import adjust
from ..core.encoding import MISSING
from ..core.stream import CALIBRATION_BINS
from ..errors import AuditInputError, shown
from .intervals import mover_difference, proportion_interval
from .measure import ratio


#: Why the rows with a missing protected value are left out of ratios and tests.
MISSING_REASON = "unknown or missing protected value"


@dataclass(frozen=True)
class FairnessResult:
    """Per-group fairness table (``groups``) and what it was computed under.

    ``favorable_is_positive``: with two classes, whether the favourable predicted class is the
    positive class (TPR, FPR and PPV are of the positive class either way, so which way a
    difference harms a group depends on it). With three or more classes it is None: there is no
    positive class, and every criterion is one versus the rest for the favourable set
    (``favorable``, e.g. "approve or refer"), which plays the positive class's part.
    """

    groups: pd.DataFrame
    favorable: str
    favorable_is_positive: bool | None
    references: dict[str, str]
    missing: dict[str, int]
    min_group_share: float
    median_score: float | None
    family_size: int
    notes: list[str] = field(default_factory=list)

    def to_summary(self) -> dict[str, Any]:
        recs = []
        for r in self.groups.to_dict(orient="records"):
            recs.append({k: (None if isinstance(v, float) and v != v else
                             (bool(v) if isinstance(v, (bool, np.bool_)) else
                              (int(v) if isinstance(v, (np.integer,)) else
                               (float(v) if isinstance(v, np.floating) else v))))
                         for k, v in r.items()})
        return {"favorable_outcome": self.favorable, "favorable_is_positive": self.favorable_is_positive,
                "references": self.references, "rows_missing_protected_value": self.missing,
                "min_group_share": self.min_group_share, "median_score": self.median_score,
                "family_size": self.family_size, "calibration_bins": CALIBRATION_BINS,
                "notes": self.notes, "groups": recs}


def four_fifths_below(k_group: int, n_group: int, k_ref: int, n_ref: int) -> bool:
    """True when (k_group/n_group) / (k_ref/n_ref) < 4/5, decided in exact integer arithmetic.

    >>> four_fifths_below(6, 10, 15, 20), four_fifths_below(59, 100, 75, 100)
    (False, True)
    """
    if n_group == 0 or n_ref == 0 or k_ref == 0:
        return False
    return Fraction(k_group, n_group) / Fraction(k_ref, n_ref) < Fraction(4, 5)


def scoring_rates(scores: np.ndarray, groups: np.ndarray) -> dict[Any, float]:
    """Share of each group scoring strictly above the whole sample's median score."""
    scores = np.asarray(scores, dtype=float)
    med = float(np.median(scores))
    out = {}
    for g in pd.unique(groups):
        m = groups == g
        out[g] = float(np.mean(scores[m] > med))
    return out


def chouldechova_fpr(prevalence: float, ppv: float, fnr: float) -> float:
    """The false-positive rate implied by prevalence, PPV and FNR (Chouldechova 2017, eq. 2.6):
    FPR = p / (1 − p) · (1 − PPV) / PPV · (1 − FNR)."""
    return prevalence / (1 - prevalence) * (1 - ppv) / ppv * (1 - fnr)


def assess(groups, fitted, cfg, *, scoring=None) -> FairnessResult:
    """Fairness table for ``cfg.protected`` from the fairness tally ``groups`` (protected
    attributes and their pairs, by probability bin when there are probabilities).

    ``fitted`` is the first pass's result (classes, encoding, protected attribute indices);
    ``scoring`` is ``(median score, [rows above it per group, one array per family])``.
    """
    attrs = fitted.encoding.attributes
    protected = list(cfg.protected or ())
    classes = fitted.outcomes.classes
    k_cls = len(classes)
    from ..core.outcomes import _match_class

    favs = () if cfg.favorable is None else (cfg.favorable if isinstance(cfg.favorable, tuple) else (cfg.favorable,))
    fav_set = [classes.index(_match_class(f, classes)) for f in favs] or [1]
    fav_idx = fav_set[0]
    fav_pos = fav_set == [1] if k_cls == 2 else None  # no positive class among three or more
    favorable = " or ".join(classes[i] for i in fav_set)
    # Two classes: the criteria use the positive class. Three or more: one-vs-rest for the
    # favourable set F (a row is "positive" when its class is in F).
    in_f = np.zeros(k_cls, dtype=bool)
    in_f[fav_set] = True
    has_score = "score" in groups.sum_names
    sums = groups.named_sums()
    n_total = int(groups.family(0)[0].sum())
    median = None if scoring is None else scoring[0]

    tables = []
    references: dict[str, str] = {}
    missing = {p: int(attrs[fitted.protected[i]].n_missing) for i, p in enumerate(protected)}
    for q, fam in enumerate(groups.families):
        parts = [attrs[a] for a in (fam[:-1] if has_score else fam)]
        label = " & ".join(a.name for a in parts)
        combos = _product([a.levels for a in parts])
        # A group of one attribute is its value; a group of a pair is named in the slice notation,
        # in the attribute's order ('Marital=married & Age=(-inf, 27)' under 'Marital & Age').
        levels = [c[0] for c in combos] if len(parts) == 1 else [pair_group_name(parts, c) for c in combos]
        # A pair's chosen reference arrives as its two values (engine.run turns the slice notation,
        # either order, into that form with plain_references, for the first pass's check).
        aliases = {} if len(parts) == 1 else {" & ".join(c): name for c, name in zip(combos, levels)}
        k = len(levels)
        lo_, hi_ = groups.offsets[q], groups.offsets[q + 1]
        cells = groups.counts[lo_:hi_]
        if has_score:
            by_bin = cells.reshape(k, CALIBRATION_BINS, k_cls * k_cls)
            cells = by_bin.sum(axis=1)
        cube = cells.reshape(k, k_cls, k_cls)  # [group, true class, predicted class]
        if k_cls == 2:
            tp, fp, fn, tn = (cube[:, i, j].astype(np.int64) for i, j in ((1, 1), (0, 1), (1, 0), (0, 0)))
            sel = cube[:, :, fav_idx].sum(axis=1).astype(np.int64)
        else:
            tp = cube[:, in_f][:, :, in_f].sum(axis=(1, 2)).astype(np.int64)
            fp = cube[:, ~in_f][:, :, in_f].sum(axis=(1, 2)).astype(np.int64)
            fn = cube[:, in_f][:, :, ~in_f].sum(axis=(1, 2)).astype(np.int64)
            tn = cube[:, ~in_f][:, :, ~in_f].sum(axis=(1, 2)).astype(np.int64)
            sel = tp + fp
        n = cube.sum(axis=(1, 2)).astype(np.int64)
        df = pd.DataFrame({"attribute": label, "group": levels, "n": n})
        keep = n > 0
        df = df[keep].reset_index(drop=True)
        tp, fp, fn, tn, sel, n = tp[keep], fp[keep], fn[keep], tn[keep], sel[keep], n[keep]
        df["share"] = n / n_total
        df["tp"], df["fp"], df["fn"], df["tn"], df["selected"] = tp, fp, fn, tn, sel
        rates = {
            "base_rate": (tp + fn, n), "selection_rate": (sel, n), "tpr": (tp, tp + fn), "fpr": (fp, fp + tn),
            "fnr": (fn, tp + fn), "ppv": (tp, tp + fp), "accuracy": (tp + tn, n),
        }
        for r, (num, den) in rates.items():
            df[r] = ratio(num, den)
            df[f"{r}_low"], df[f"{r}_high"] = proportion_interval(num, den, method=cfg.interval, level=cfg.level)
        if has_score:
            sb = sums["score"][lo_:hi_].reshape(k, CALIBRATION_BINS)
            nb = by_bin.sum(axis=2)
            yb = by_bin.reshape(k, CALIBRATION_BINS, k_cls, k_cls)[:, :, 1, :].sum(axis=2)
            df["mean_score"] = sb.sum(axis=1)[keep] / n
            df["calibration_gap"] = df["mean_score"] - df["base_rate"]
            with np.errstate(invalid="ignore", divide="ignore"):
                # Σ_b (n_b / n) |mean predicted_b − observed rate_b| = Σ_b |Σp_b − Σy_b| / n
                df["calibration_error"] = (np.abs(sb - yb).sum(axis=1) / nb.sum(axis=1))[keep]
            df["scoring_rate"] = scoring[1][q][keep] / n
        miss = np.array([MISSING in c for c in combos], dtype=bool)[keep]
        small = df["share"].to_numpy() < cfg.min_group_share
        df["excluded"] = miss | small
        df["exclusion_reason"] = np.where(miss, MISSING_REASON,
                                          np.where(small, f"share below {cfg.min_group_share:g}", ""))
        ref = _reference(cfg, label, df, aliases)
        references[label] = ref
        df["is_reference"] = df["group"] == ref
        r = df.index[df["is_reference"]]
        if len(r) and not df.loc[r[0], "excluded"]:
            ri = r[0]
            rk, rn = int(df.loc[ri, "selected"]), int(df.loc[ri, "n"])
            df["impact_ratio"] = df["selection_rate"] / df.loc[ri, "selection_rate"] if rk else np.nan
            df["below_four_fifths"] = [(not ex) and (not isref) and four_fifths_below(int(k_), int(n_), rk, rn)
                                       for k_, n_, ex, isref in zip(df["selected"], df["n"], df["excluded"],
                                                                     df["is_reference"])]
            for r_name, (num_col, den_fn) in {
                "selection": ("selected", lambda d: d["n"]),
                "tpr": ("tp", lambda d: d["tp"] + d["fn"]),
                "fpr": ("fp", lambda d: d["fp"] + d["tn"]),
                "ppv": ("tp", lambda d: d["tp"] + d["fp"]),
            }.items():
                k1 = df[num_col].to_numpy(dtype=float)
                n1 = den_fn(df).to_numpy(dtype=float)
                k2, n2 = float(k1[ri]), float(n1[ri])
                col = "selection_rate" if r_name == "selection" else r_name
                est1 = df[col].to_numpy(dtype=float)
                est2 = est1[ri]
                lo1, hi1 = proportion_interval(k1, n1, method=cfg.interval, level=cfg.level)
                lo2, hi2 = proportion_interval(k2, n2, method=cfg.interval, level=cfg.level)
                d, dl, dh = mover_difference(est1, lo1, hi1, est2, lo2, hi2)
                pv, _ = two_proportion(k1, n1, np.full_like(k1, k2), np.full_like(n1, n2))
                testable = (~df["excluded"].to_numpy()) & (~df["is_reference"].to_numpy()) & (n1 > 0) & (n2 > 0)
                df[f"{r_name}_diff"] = np.where(df["is_reference"], 0.0, d)
                df[f"{r_name}_diff_low"], df[f"{r_name}_diff_high"] = dl, dh
                df[f"{r_name}_p"] = np.where(testable, pv, np.nan)
            df["equalized_odds_gap"] = np.maximum(df["tpr_diff"].abs(), df["fpr_diff"].abs())
        else:
            df["impact_ratio"] = np.nan
            df["below_four_fifths"] = False
            for r_name in ("selection", "tpr", "fpr", "ppv"):
                for suffix in ("_diff", "_diff_low", "_diff_high", "_p"):
                    df[f"{r_name}{suffix}"] = np.nan
            df["equalized_odds_gap"] = np.nan
        df["impact_ratio"] = np.where(df["excluded"], np.nan, df["impact_ratio"])
        if has_score:
            rs = df.loc[df["is_reference"], "scoring_rate"]
            rsv = float(rs.iloc[0]) if len(rs) else np.nan
            df["scoring_impact_ratio"] = np.where(df["excluded"] | (rsv == 0), np.nan, df["scoring_rate"] / rsv)
        tables.append(df)

    groups_df = pd.concat(tables, ignore_index=True)
    groups = groups_df
    pcols = [c for c in ("selection_p", "tpr_p", "fpr_p", "ppv_p") if c in groups.columns]
    flat = groups[pcols].to_numpy(dtype=float).ravel()
    q, m = adjust(flat, method=cfg.correction)
    q = q.reshape(len(groups), len(pcols))
    for i, c in enumerate(pcols):
        groups[c.replace("_p", "_q")] = q[:, i]
    eo_p = np.minimum(1.0, 2 * np.fmin(groups["tpr_p"], groups["fpr_p"]))  # Bonferroni over the two components
    groups["equalized_odds_p"] = eo_p
    groups["fairness_flag"] = (groups[[c.replace("_p", "_q") for c in pcols]].min(axis=1) <= cfg.alpha) | \
        groups["below_four_fifths"]
    notes = _notes(groups, cfg)
    return FairnessResult(groups=groups, favorable=favorable, favorable_is_positive=fav_pos, references=references,
                          missing=missing, min_group_share=cfg.min_group_share, median_score=median, family_size=m,
                          notes=notes)


def _product(level_lists):
    out = [()]
    for levels in level_lists:
        out = [o + (x,) for o in out for x in levels]
    return out


def pair_group_name(parts, values) -> str:
    """A pair's group in the slice notation: ``Marital=married & Age=(-inf, 27)``."""
    return " & ".join(f"{a.name}={x}" for a, x in zip(parts, values))


def plain_references(cfg):
    """The configuration with each pair's reference group written as its two values
    (``{"Marital & Age": "married & [27, 33)"}``, the form the first pass checks) when it was given
    in the slice notation fairness.csv uses (``"Marital=married & Age=[27, 33)"``, either order)."""
    from dataclasses import replace

    prot = list(cfg.protected or ())
    out = dict(cfg.reference or {})
    for key, value in out.items():
        for i, a in enumerate(prot):
            for b in prot[i + 1:]:
                if key != f"{a} & {b}":
                    continue
                for first, second in ((a, b), (b, a)):
                    head, cut = f"{first}=", value.find(f" & {second}=", len(first) + 1)
                    if value.startswith(head) and cut > 0:
                        x, z = value[len(head):cut], value[cut + len(f" & {second}="):]
                        out[key] = f"{x} & {z}" if first == a else f"{z} & {x}"
                        break
    return cfg if out == cfg.reference else replace(cfg, reference=out)


def group_slice_name(attribute: str, group: str) -> str:
    """A fairness group as a slice is named: 'Marital=married' for a group of one attribute; a
    pair's group already is ('Age=(-inf, 27) & Marital=married')."""
    names = attribute.split(" & ")
    for i in range(1, len(names)):
        a, b = " & ".join(names[:i]), " & ".join(names[i:])
        for first, second in ((a, b), (b, a)):
            if group.startswith(f"{first}=") and f" & {second}=" in group[len(first) + 1:]:
                return group
    return f"{attribute}={group}"


def _reference(cfg, label: str, df: pd.DataFrame, aliases: dict[str, str] | None = None) -> str:
    chosen = (cfg.reference or {}).get(label)
    if chosen is not None:
        # A pair's reference is written as its two values ('married & (-inf, 27)'): its group's name.
        chosen = (aliases or {}).get(chosen, chosen)
        if chosen not in set(df["group"]):
            raise AuditInputError(f"reference group {shown(chosen)} does not occur in protected attribute "
                                  f"{shown(label)}", setting="reference")
        _check_chosen_reference(cfg, label, df[df["group"] == chosen].iloc[0])
        return chosen
    ok = df[~df["excluded"]]
    if not len(ok):
        return ""
    # The impact-ratio convention: the group with the highest selection rate (ties: larger group, then name).
    best = ok.sort_values(["selection_rate", "n", "group"], ascending=[False, False, True], kind="stable")
    return str(best.iloc[0]["group"])


def _check_chosen_reference(cfg, label: str, row) -> None:
    """A reference group the user chose must take part in ratios: one left out (too small a share,
    or the rows with a missing value) would leave every ratio and test of the attribute empty, and
    a release gate reading the flags would pass without a check having been made."""
    if not row["excluded"]:
        return
    group = shown(row["group"])
    if row["exclusion_reason"] == MISSING_REASON:
        raise AuditInputError(f"reference group {group} of protected attribute {shown(label)} holds the rows with a "
                              "missing value, which are left out of ratios and tests; choose another group",
                              setting="reference")
    raise AuditInputError(f"reference group {group} of protected attribute {shown(label)} has {int(row['n']):,} "
                          f"rows ({row['share']:.2%} of the table), under the minimum group share "
                          f"{cfg.min_group_share:g}, so it would be left out of ratios and tests; choose a larger "
                          "group as reference or lower the minimum group share (--min-group-share, "
                          "min_group_share=...)", setting="reference")


def _base_rates_differ(g: pd.DataFrame, alpha: float) -> bool:
    """Pearson's chi-square test of equal base rates across the groups (groups × 2 table, no
    continuity correction)."""
    from scipy.special import chdtrc  # upper tail of the chi-square distribution

    pos = (g["tp"] + g["fn"]).to_numpy(dtype=float)
    table = np.stack([pos, g["n"].to_numpy(dtype=float) - pos], axis=1)
    col = table.sum(axis=0)
    if (col == 0).any():
        return False
    expected = table.sum(axis=1, keepdims=True) * col[None, :] / table.sum()
    stat = float(((table - expected) ** 2 / expected).sum())
    return bool(chdtrc(len(table) - 1, stat) < alpha)


def _notes(groups: pd.DataFrame, cfg) -> list[str]:
    notes = []
    for attr, g in groups.groupby("attribute", sort=False):
        ok = g[~g["excluded"]]
        if len(ok) >= 2 and _base_rates_differ(ok, cfg.alpha):
            notes.append(
                f"{attr}: base rates differ between groups ({ok['base_rate'].min():.3f} to {ok['base_rate'].max():.3f}). "
                "When base rates differ, an imperfect classifier cannot be calibrated within groups and have equal "
                "false-positive and false-negative rates across them at the same time (Chouldechova 2017; Kleinberg, "
                "Mullainathan & Raghavan 2016): read the criteria below as a trade-off, not as contradictions.")
        ex = g[g["excluded"]]
        if len(ex):
            notes.append(f"{attr}: {len(ex)} group(s) left out of ratios and tests ("
                         + "; ".join(f"{x} — {r}" for x, r in zip(ex["group"], ex["exclusion_reason"])) + ").")
    return notes
