"""The two passes over a table read as chunks (``audit.core.sources``): fit, then tally.

:func:`fit` makes the first pass: it checks every row's outcome columns and profiles every
attribute column, then fits the outcome classes and the :class:`~audit.core.encoding.Encoding`.
:func:`tally_source` makes the second pass: each chunk is encoded with that one encoding and
tallied, and the chunk tallies are added. Memory is bounded by the chunk, not the table.

What is not a sum is handled so that a chunked run equals the in-memory run: quantile bin
edges come from the first ``FIT_SAMPLE`` values in both; ROC AUC comes from per-slice score
histograms with a stated error bound (``audit.core.auc``); the fairness module's median
score is exact in both (the first pass finds the histogram bins holding the median, the
second keeps the few values in those bins).
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np
import pandas as pd

from ..errors import AuditInputError, shown
from .auc import ExactAuc, hist_bins, score_histogram, slice_auc
from .encoding import (ID_MIN_DISTINCT, AttributeCoding, Encoding, choose_columns, fit_encoding, prediction_like,
                       profile_column)
from .outcomes import (OutcomeSpec, check_columns, fit_outcomes, labelled_rows, need_columns, profile_outcomes)
from .tally import (LOSS_SUMS, Tally, cell_codes, plan_families, plan_triples, row_losses, tally, tally_numpy,
                    tally_triples, use_compiled)

#: Equal-width probability bins of the fairness module's calibration error.
CALIBRATION_BINS = 10
#: Bins of the first pass's score histogram (to find the median exactly in the second pass).
MEDIAN_BINS = 1 << 20

Progress = Callable[[str, float], None]


# ----------------------------------------------------------------------------- sources
from .sources import (CsvSource, FrameSource, ParquetSource, Source, SourceInfo, _digest, _expand,  # noqa: F401
                      csv_column_types, open_source, read_parquet_part)


@dataclass
class Fitted:
    """Everything fitted in the first pass: the outcome classes, the attribute encoding, the
    slice families, and what the fairness module needs (protected attributes, median bins)."""

    outcomes: OutcomeSpec
    encoding: Encoding
    families: list[tuple[int, ...]]
    protected: list[int]
    n_rows: int
    n_unlabelled: int
    chunked: bool
    score_hist: np.ndarray | None = None
    median_bins: tuple[int, int] | None = None
    exact_median: float | None = None
    notes: list[str] = field(default_factory=list)

    @property
    def cards(self) -> list[int]:
        return self.encoding.cards


def _order_stat_bins(hist: np.ndarray, n: int) -> tuple[int, int]:
    c = np.cumsum(hist)
    lo = int(np.searchsorted(c, (n - 1) // 2, side="right"))
    hi = int(np.searchsorted(c, n // 2, side="right"))
    return lo, hi


def fit(source: Source | pd.DataFrame, cfg, *, progress: Progress | None = None, keep: dict | None = None,
        chunked: bool | None = None) -> Fitted:
    """First pass: check outcomes row by row, profile attributes, fit classes and encoding.

    ``source`` is a :class:`Source` or a DataFrame; ``cfg`` an ``AuditConfig`` (``audit.make_config``).
    ``chunked=True`` fits for tallies that will be added (AUC from score histograms, the exact
    median from candidates) even when the source is one DataFrame. ``keep`` (a dict) receives the
    single chunk of a DataFrame source and its caches, so the in-memory run encodes and tallies
    without reading the table twice.
    """
    if isinstance(source, pd.DataFrame):
        source = FrameSource(source)
    if chunked is not None:
        source.chunked = chunked
    return fit_evidence(profile_source(source, cfg, progress=progress, keep=keep), cfg)


@dataclass
class Evidence:
    """What the first pass learned from some rows: the table's columns, the attributes chosen,
    the outcome and column profiles, the score histogram (for the fairness median) and the
    unlabelled rows left out. ``a + b`` is the evidence of a's rows followed by b's (the order
    matters: numeric columns keep their first values for bin edges), so parts of a table
    profiled on different workers merge into what one pass over the table would learn."""

    columns: list[str] | None
    attributes: list[str] | None
    outcomes: Any = None
    profiles: list | None = None
    hist: np.ndarray | None = None
    n_unlabelled: int = 0
    chunked: bool = True

    def __add__(self, other: "Evidence") -> "Evidence":
        if self.columns is None:
            return Evidence(other.columns, other.attributes, other.outcomes, other.profiles, other.hist,
                            self.n_unlabelled + other.n_unlabelled, self.chunked and other.chunked)
        if other.columns is None:
            return Evidence(self.columns, self.attributes, self.outcomes, self.profiles, self.hist,
                            self.n_unlabelled + other.n_unlabelled, self.chunked and other.chunked)
        if list(self.columns) != list(other.columns):
            raise AuditInputError("parts of the table have different columns "
                                  f"({', '.join(map(shown, self.columns[:6]))} and "
                                  f"{', '.join(map(shown, other.columns[:6]))})")

        def add(a, b):
            return b if a is None else (a if b is None else a + b)

        profiles = other.profiles if self.profiles is None else (
            self.profiles if other.profiles is None else [a + b for a, b in zip(self.profiles, other.profiles)])
        return Evidence(self.columns, self.attributes, add(self.outcomes, other.outcomes), profiles,
                        add(self.hist, other.hist), self.n_unlabelled + other.n_unlabelled,
                        self.chunked and other.chunked)


def profile_source(source: Source, cfg, *, progress: Progress | None = None, keep: dict | None = None) -> Evidence:
    """The first pass over a source (or over one part of a table): checks and profiles, no fitting."""
    note = progress or (lambda stage, frac: None)
    source_columns = None
    prof_out = None
    profiles = None
    cols: list[str] | None = None
    hist = None
    n_unlabelled = 0
    for offset, df in source.chunks():
        if cols is None:
            check_columns(df)
            need_columns(df.columns, cfg)
            from .outcomes import _score_columns

            reserved = [c for c in (cfg.label, cfg.pred) if c is not None] + _score_columns(cfg)
            cols = choose_columns(df.columns, cfg.attributes, reserved=reserved)
            if cfg.protected:
                for p in cfg.protected:
                    if p not in df.columns:
                        raise AuditInputError(f"protected attribute {shown(p)} is not among the audited attributes "
                                              "(it is not in the table)", setting="protected")
                    if p not in cols:
                        raise AuditInputError(f"protected attribute {shown(p)} is not among the audited attributes",
                                              setting="protected")
        elif list(df.columns) != list(source_columns):
            raise AuditInputError(f"data row {offset + 1} starts a part of the table with other columns")
        source_columns = list(df.columns)
        if len(df) == 0:
            continue
        rows = labelled_rows(df, cfg, offset=offset)
        if rows is not None:
            n_unlabelled += int((~rows).sum())
            df = df[rows]
            rowpos = np.flatnonzero(rows)
        else:
            rowpos = None
        po, ocache = profile_outcomes(df, cfg, offset=offset, rows=rowpos)
        acache: dict = {}
        a = len(cols)
        compiled = use_compiled(len(df), 1 + a + (a * (a - 1) // 2 if cfg.max_order >= 2 else 0))
        cap = max(1000, cfg.max_levels + 1, ID_MIN_DISTINCT + 1)  # past it a text column is skipped anyway
        pc = [profile_column(df[c], c, as_text=c in cfg.categorical, cache=acache, compiled=compiled, cap=cap)
              for c in cols]
        prof_out = po if prof_out is None else prof_out + po
        profiles = pc if profiles is None else [a + b for a, b in zip(profiles, pc)]
        if "score" in ocache and cfg.protected and source.chunked:
            b = np.minimum((ocache["score"] * MEDIAN_BINS).astype(np.int64), MEDIAN_BINS - 1)
            h = np.bincount(b, minlength=MEDIAN_BINS)
            hist = h if hist is None else hist + h
        if keep is not None and not source.chunked:
            keep.update(df=df, outcomes=ocache, attributes=acache)
        note("reading and checking", _share(source, offset + len(df)))
    return Evidence(source_columns, cols, prof_out, profiles, hist, n_unlabelled, source.chunked)


def _share(source: Source, rows_done: int) -> float:
    """Progress through a pass, 0..1 (rows done over the rows expected; 1 when not known)."""
    expected = getattr(source, "expected_rows", None)
    return min(1.0, rows_done / expected) if expected else 1.0


def fit_evidence(ev: Evidence, cfg) -> Fitted:
    """Fit the outcome classes and the attribute encoding from the first pass's evidence."""
    cols, prof_out, profiles, hist, n_unlabelled = ev.attributes, ev.outcomes, ev.profiles, ev.hist, ev.n_unlabelled
    if cols is None or prof_out is None:
        raise AuditInputError("the table has no rows" if not n_unlabelled else "the table has no labelled rows")
    prof_out.n_unlabelled = n_unlabelled
    spec = fit_outcomes(prof_out, cfg)
    enc = _fit_attributes(profiles, cfg, spec)
    if not enc.attributes:
        why = "; ".join(f"{shown(k)[1:-1]}: {v}" for k, v in enc.skipped.items()) or "the table has no other columns"
        raise AuditInputError(f"no attribute column left to slice by ({why})", setting="attributes")
    names = enc.names
    protected = []
    for p in cfg.protected or ():
        if p not in names:
            raise AuditInputError(f"protected attribute {shown(p)} is not among the audited attributes "
                                  f"({enc.skipped.get(p, 'not sliced')})", setting="protected")
        protected.append(names.index(p))
    check_metric(cfg, spec)
    _check_fairness_settings(cfg, spec, enc)
    fams = plan_families(len(names), min(cfg.max_order, 2))  # triples are planned after the pairs are counted
    fitted = Fitted(spec, enc, fams, protected, prof_out.n_rows, n_unlabelled, ev.chunked)
    if hist is not None:
        fitted.score_hist = hist
        fitted.median_bins = _order_stat_bins(hist, prof_out.n_rows)
    return fitted


def _fit_attributes(profiles: list, cfg, spec: OutcomeSpec) -> Encoding:
    """The attribute encoding. With the attributes not given explicitly, a column that looks like a
    predicted label (``encoding.prediction_like``, the rule the page's preselection uses too) is
    left out with its reason: slicing by the model's own decisions audits the outcome, not a group."""
    left_out = prediction_like(profiles, spec.classes) if cfg.attributes is None else {}
    for col in left_out:
        if col in cfg.bin_edges or col in cfg.categorical or col in cfg.numeric:
            what = "bin edges were" if col in cfg.bin_edges else "a column type was"
            raise AuditInputError(f"{what} given for {shown(col)}, which is not an audited attribute "
                                  f"({left_out[col]})", setting="attributes")
    kept = [p for p in profiles if p.name not in left_out]
    enc = fit_encoding(kept, n_bins=cfg.bins, bin_edges=cfg.bin_edges, max_levels=cfg.max_levels,
                       categorical=cfg.categorical, numeric=cfg.numeric)
    if not left_out:
        return enc
    skipped = {p.name: left_out.get(p.name) or enc.skipped[p.name] for p in profiles
               if p.name in left_out or p.name in enc.skipped}
    return Encoding(enc.attributes, skipped)


#: Metrics a multi-class audit can be audited on (besides ``NAME:CLASS`` per-class rates).
MULTICLASS_METRICS = ("error_rate", "accuracy", "macro_f1", "log_loss", "brier")


def check_metric(cfg, spec: OutcomeSpec) -> None:
    """The audited metric exists for this many classes (and names one of them, if per class)."""
    from ..stats.methods import METRICS

    k = spec.n_classes
    name = cfg.metric
    if k == 2:
        if name not in METRICS:
            raise AuditInputError(f"metric {shown(name)} is for labels with three or more classes; choose one of "
                                  f"{', '.join(METRICS)}", setting="metric")
        return
    base, sep, cls = name.partition(":")
    if sep:
        if cls not in spec.classes:
            raise AuditInputError(f"metric {shown(name)} names class {shown(cls)}, which is not a class of label "
                                  f"column {shown(spec.label)} ({', '.join(spec.classes[:8])})", setting="metric")
        return
    if name not in MULTICLASS_METRICS:
        raise AuditInputError(f"metric {shown(name)} is for two classes; with {k} classes choose one of "
                              f"{', '.join(MULTICLASS_METRICS)}, or recall:CLASS, precision:CLASS, f1:CLASS",
                              setting="metric")
    if name in ("log_loss", "brier") and spec.probs is None:
        raise AuditInputError(f"metric '{name}' needs the class probabilities (score={{class: column}})",
                              setting="metric")


def _check_fairness_settings(cfg, spec: OutcomeSpec, enc: Encoding) -> None:
    """Favourable outcome and reference groups name real classes and groups (before any counting)."""
    if not cfg.protected:
        return
    from .outcomes import _match_class

    favs = cfg.favorable if isinstance(cfg.favorable, tuple) else ((cfg.favorable,) if cfg.favorable else ())
    for f in favs:
        if _match_class(f, spec.classes) is None:
            raise AuditInputError(f"favourable outcome {shown(f)} is not a class of the label "
                                  f"({', '.join(spec.classes)})", setting="favorable")
    if spec.n_classes > 2 and not favs:
        raise AuditInputError("with three or more classes, say which predicted class (or classes) is favourable to "
                              "the person: favorable=... (--favorable CLASS[,CLASS])", setting="favorable")
    if not favs:  # no silent default: being predicted positive is not always good for the person
        raise AuditInputError("with protected attributes, say which predicted class is favourable to the person: "
                              f"favorable=... (--favorable VALUE), one of {', '.join(spec.classes)}",
                              setting="favorable")
    by_name = {a.name: a for a in enc.attributes}
    labels = {p: by_name[p].levels for p in cfg.protected}
    pairs: dict[str, tuple[AttributeCoding, AttributeCoding]] = {}
    prot = list(cfg.protected)
    for i in range(len(prot)):
        for j in range(i + 1, len(prot)):
            a, b = by_name[prot[i]], by_name[prot[j]]
            labels[f"{a.name} & {b.name}"] = tuple(f"{x} & {z}" for x in a.levels for z in b.levels)
            pairs[f"{a.name} & {b.name}"] = (a, b)
    for attr, group in cfg.reference.items():
        if attr not in labels:
            raise AuditInputError(f"reference group given for {shown(attr)}, which is not a protected attribute or "
                                  f"a pair of them ({', '.join(labels)})", setting="reference")
        if group not in labels[attr]:
            named = _pair_group_name(group, *pairs[attr]) if attr in pairs else group
            raise AuditInputError(f"reference group {shown(named)} does not occur in protected attribute {shown(attr)}",
                                  setting="reference")


def _pair_group_name(group: str, a: AttributeCoding, b: AttributeCoding) -> str:
    """A pair's group written as its two values (``'maybe & no'``, the form the reference check
    reads) named in the slice notation fairness.csv and slices.csv use (``'afam=maybe & single=no'``).
    A value may hold ' & ' itself: the split that names a level of either attribute is preferred."""
    cuts = [i for i in range(len(group)) if group.startswith(" & ", i)]
    if not cuts:
        return group
    splits = [(group[:i], group[i + 3:]) for i in cuts]
    known = [s for s in splits if s[0] in a.levels or s[1] in b.levels]
    x, z = (known or splits)[0]
    return f"{a.name}={x} & {b.name}={z}"


# ----------------------------------------------------------------------------- the tally pass
def _fair_families(fitted: Fitted, has_score: bool) -> tuple[list[tuple[int, ...]], int | None]:
    """Families of the fairness tally: each protected attribute and each pair, by probability bin."""
    p = fitted.protected
    sb = len(fitted.cards) if has_score else None
    fams = [(a,) for a in p] + [(p[i], p[j]) for i in range(len(p)) for j in range(i + 1, len(p))]
    if sb is not None:
        fams = [f + (sb,) for f in fams]
    return fams, sb


def tally_chunk(df: pd.DataFrame, fitted: Fitted, cfg, *, offset: int = 0, caches: dict | None = None,
                kernel: str = "auto", rows_out: dict | None = None) -> Tally:
    """Encode one chunk with the fitted encoding and tally it (slices, AUC evidence, fairness).
    ``rows_out`` (a dict) receives the chunk's codes, cells and losses for the triple pass."""
    caches = caches or {}
    out = fitted.outcomes.apply(df, caches.get("outcomes"))
    codes = fitted.encoding.apply(df, caches.get("attributes"), offset=offset)
    cards = fitted.cards
    k = fitted.outcomes.n_classes
    cell = cell_codes(out.y, out.yhat, k)
    n = len(cell)
    compiled = use_compiled(n, len(fitted.families), kernel)
    ll = br = None
    if out.score is not None:
        ll, br = row_losses(out.y, out.score, compiled=compiled and n > 100_000)
    elif out.losses is not None:
        ll, br = out.losses
    t = tally(codes, cards, cell, ll, br, families=fitted.families, n_classes=k,
              kernel="compiled" if compiled else "numpy")
    if rows_out is not None:
        rows_out.update(codes=codes, cell=cell, ll=ll, br=br)
    if out.score is not None and cfg.auc_max_order >= 0:
        sel = [i for i, f in enumerate(fitted.families) if len(f) <= cfg.auc_max_order]
        fams = [fitted.families[i] for i in sel]
        if fitted.chunked:
            n_slices = sum(int(t.offsets[i + 1] - t.offsets[i]) for i in sel)
            t.auc = score_histogram(codes, cards, out.y, out.score, families=fams, bins=hist_bins(n_slices))
        else:
            sub_counts = np.concatenate([t.family(i)[0] for i in sel])
            t.auc = ExactAuc(tuple(fams), slice_auc(codes, cards, out.y, out.score, families=fams,
                                                    counts=sub_counts, compiled=compiled))
    if fitted.protected:
        t.groups = _fair_tally(codes, cards, cell, out, fitted, k)
    return t


def _fair_tally(codes, cards, cell, out, fitted: Fitted, k: int) -> Tally:
    fams, sb = _fair_families(fitted, out.score is not None)
    weights: dict[str, np.ndarray] = {}
    codes = list(codes)
    cards = list(cards)
    extra = {}
    if sb is not None:
        score = out.score
        codes.append(np.minimum((score * CALIBRATION_BINS).astype(np.int64), CALIBRATION_BINS - 1))
        cards.append(CALIBRATION_BINS)
        weights["score"] = score
        if fitted.chunked:
            lo, hi = fitted.median_bins
            b = np.minimum((score * MEDIAN_BINS).astype(np.int64), MEDIAN_BINS - 1)
            weights["above_median_bins"] = (b > hi).astype(float)
            near = np.flatnonzero((b >= lo) & (b <= hi))
            extra["median_candidates"] = _Candidates.of(codes, cards, fams, near, score[near])
        else:
            med = float(np.median(score))
            fitted.exact_median = med
            weights["above_median"] = (score > med).astype(float)
    t = tally_numpy(codes, cards, cell, families=fams, n_classes=k, weights=weights)
    t.extra = extra
    return t


@dataclass
class _Candidates:
    """Scores near the median (in the histogram bins holding it) with each row's fairness slice:
    a few values that settle the exact median and each group's count above it. Adds by joining."""

    values: np.ndarray
    slots: np.ndarray  # (rows, families): slice index within each family

    @classmethod
    def of(cls, codes, cards, fams, rows, values):
        slots = np.zeros((len(rows), len(fams)), dtype=np.int64)
        for q, fam in enumerate(fams):
            idx = np.zeros(len(rows), dtype=np.int64)
            for a in fam[:-1]:  # leave out the probability bin: counts are per group
                idx = idx * cards[a] + np.asarray(codes[a])[rows]
            slots[:, q] = idx
        return cls(np.asarray(values, dtype=float), slots)

    def __add__(self, other):
        if isinstance(other, int) and other == 0:
            return self
        return _Candidates(np.concatenate([self.values, other.values]), np.concatenate([self.slots, other.slots]))

    def __radd__(self, other):
        return self.__add__(other)


def median_and_above(tally_groups: Tally, fitted: Fitted) -> tuple[float, list[np.ndarray]]:
    """The exact median score and, per fairness family, each group's rows scoring above it."""
    hist = fitted.score_hist
    n = int(hist.sum())
    lo, hi = fitted.median_bins
    cand: _Candidates = tally_groups.extra["median_candidates"]
    below = int(hist[:lo].sum())
    vals = np.sort(cand.values)
    k_lo, k_hi = (n - 1) // 2 - below, n // 2 - below
    med = float((vals[k_lo] + vals[k_hi]) / 2.0)
    above_bins = tally_groups.named_sums()["above_median_bins"]
    out = []
    cards = fitted.cards
    for q, fam in enumerate(tally_groups.families):
        a, b = tally_groups.offsets[q], tally_groups.offsets[q + 1]
        per = above_bins[a:b].reshape(-1, CALIBRATION_BINS).sum(axis=1)
        size = int(np.prod([cards[x] for x in fam[:-1]]))
        near = np.bincount(cand.slots[:, q][cand.values > med], minlength=size)
        out.append(per + near)
    return med, out


def tally_source(source: Source, fitted: Fitted, cfg, *, keep: dict | None = None, kernel: str = "auto",
                 progress: Progress | None = None) -> Tally:
    """Second pass: the sum of every chunk's tally (the kept chunk of a DataFrame is reused)."""
    note = progress or (lambda stage, frac: None)
    if keep and "df" in keep:
        rows: dict = {}
        t = tally_chunk(keep["df"], fitted, cfg, caches=keep, kernel=kernel, rows_out=rows if cfg.max_order >= 3
                        else None)
        if cfg.max_order >= 3:
            plan = plan_triples(t, fitted.cards, min_rows=cfg.min_support)
            t = t.joined(_triples(rows, fitted, cfg, plan, kernel))
        return t
    total = None
    n_all = max(fitted.n_rows + fitted.n_unlabelled, 1)
    for offset, df in source.chunks(columns=needed_columns(fitted, cfg)):
        t = tally_part(df, fitted, cfg, offset=offset, kernel=kernel)
        if t is not None:
            total = t if total is None else total + t
        note("counting slices", min(1.0, (offset + len(df)) / n_all))
    total.n_unlabelled = fitted.n_unlabelled
    if cfg.max_order >= 3:
        # A third pass: which triples to count depends on the pairs' counts over the whole table.
        plan = plan_triples(total, fitted.cards, min_rows=cfg.min_support)
        tri = None
        for offset, df in source.chunks(columns=needed_columns(fitted, cfg)):
            part = triple_part(df, fitted, cfg, plan, offset=offset, kernel=kernel)
            if part is not None:
                tri = part if tri is None else tri + part
        total = total.joined(tri)
    return total


def triple_part(df: pd.DataFrame, fitted: Fitted, cfg, plan, *, offset: int = 0, kernel: str = "auto") -> Tally | None:
    """One chunk of the third pass (here and on a cluster's workers): unlabelled rows left out,
    the rest encoded and their planned triples tallied; ``None`` for a chunk with no rows."""
    if len(df) == 0:
        return None
    rows_ok = labelled_rows(df, cfg, offset=offset)
    if rows_ok is not None:
        df = df[rows_ok]
    out = fitted.outcomes.apply(df, None)
    rows = {"codes": fitted.encoding.apply(df, None, offset=offset),
            "cell": cell_codes(out.y, out.yhat, fitted.outcomes.n_classes), "ll": None, "br": None}
    if out.score is not None:
        rows["ll"], rows["br"] = row_losses(out.y, out.score)
    elif out.losses is not None:
        rows["ll"], rows["br"] = out.losses
    return _triples(rows, fitted, cfg, plan, kernel)


def _triples(rows: dict, fitted: Fitted, cfg, plan, kernel: str) -> Tally:
    """The planned triples of one chunk (loss sums only when the audited metric is a loss)."""
    return tally_triples(rows["codes"], fitted.cards, rows["cell"], rows["ll"], rows["br"], plan=plan,
                         n_classes=fitted.outcomes.n_classes, loss_sums=cfg.metric in LOSS_SUMS, kernel=kernel)


def tally_part(df: pd.DataFrame, fitted: Fitted, cfg, *, offset: int = 0, kernel: str = "auto") -> Tally | None:
    """One chunk of the second pass: unlabelled rows left out (the first pass counted them), the
    rest tallied; ``None`` for a chunk with no rows."""
    if len(df) == 0:
        return None
    rows = labelled_rows(df, cfg, offset=offset)
    if rows is not None:
        df = df[rows]
    return tally_chunk(df, fitted, cfg, offset=offset, kernel=kernel)


def needed_columns(fitted: Fitted, cfg) -> list[str]:
    """The columns the second pass reads: the outcome columns and the fitted attributes."""
    scores = [cfg.score] if isinstance(cfg.score, str) else list((cfg.score or {}).values())
    outcome = [c for c in (cfg.label, cfg.pred) if c is not None] + scores
    return list(dict.fromkeys(outcome + list(fitted.encoding.names)))
