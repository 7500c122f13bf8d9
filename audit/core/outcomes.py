"""Step 1b: validate the outcome columns (label, prediction, probability) and encode them.

Everything a user can get wrong about the label, prediction and probability columns is
checked here and reported as an :class:`AuditInputError` with one line naming the column,
value or row. The work is split so that a table read in chunks is checked the same way as
one held in memory:

* :func:`profile_outcomes` checks one chunk's rows (missing labels, probabilities that are
  missing, not numbers or outside [0, 1], missing predictions) and returns an
  :class:`OutcomeProfile`, which adds across chunks (each class value with the first data
  row it occurs in);
* :func:`fit_outcomes` turns the whole table's profile into an :class:`OutcomeSpec`: the
  classes in index order, the positive class (stated or inferred), how the prediction is made;
* :meth:`OutcomeSpec.apply` encodes a chunk as class indices.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ..errors import AuditInputError, shown
from .values import canonical, natural_key, numeric_text

#: Most classes a label may have (cells per slice grow as the square).
MAX_CLASSES = 50
#: A row's class probabilities must sum to 1 within this.
PROB_SUM_TOLERANCE = 1e-4

# Label pairs whose positive member is obvious; matched on lower-cased text.
_KNOWN_PAIRS = [
    ("0", "1"), ("false", "true"), ("no", "yes"), ("n", "y"), ("f", "t"),
    ("negative", "positive"), ("neg", "pos"),
]


@dataclass(frozen=True)
class Outcomes:
    """Validated outcome columns of one table or chunk, encoded for counting.

    ``y`` and ``yhat`` hold class indices into ``classes`` (for two classes 0 = negative,
    1 = positive) as int8; ``score`` is the probability of the positive class (float64) or
    ``None``.
    """

    y: np.ndarray
    yhat: np.ndarray
    score: np.ndarray | None
    classes: tuple[str, ...]
    positive: str | None
    positive_inferred: bool
    prediction_source: str  # "column", "threshold" or "most probable class"
    probs: np.ndarray | None = None  # (rows, classes) probabilities of a multi-class audit
    losses: tuple[np.ndarray, np.ndarray] | None = None  # per-row log loss and Brier (multi-class)


def _row(pos: int) -> str:
    return f"data row {pos + 1}"


def _canonical_codes(s: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Codes into an array of canonical texts (the last entry, '', stands for missing)."""
    if (pd.api.types.is_integer_dtype(s.dtype) or pd.api.types.is_bool_dtype(s.dtype)) \
            and isinstance(s.dtype, np.dtype) and len(s):
        v = s.to_numpy()
        if v.dtype == np.bool_:
            v = v.view(np.uint8)
        lo, hi = int(v.min()), int(v.max())
        if hi - lo < 256:  # small integer labels: offsets are the codes (one byte), no hashing
            codes = v.view(np.uint8) if lo == 0 and v.dtype.itemsize == 1 else (v - lo).astype(np.uint8)
            text = np.array([str(lo + i) for i in range(hi - lo + 1)] + [""], dtype=object)
            return codes, text
    codes, uniques = pd.factorize(s, use_na_sentinel=True)
    text = np.array([canonical(u) for u in list(uniques)] + [""], dtype=object)
    return codes, text


def _first_rows(codes: np.ndarray, text: np.ndarray, offset: int, *, rows: bool = True,
                counts: dict[str, int] | None = None) -> dict[str, int]:
    """Each value present in ``codes`` with the first (global) row it occurs in (``rows=False``:
    the values only, each with row 0 — a label's classes need no row). ``counts`` (a dict)
    receives each value's number of rows."""
    size = len(text) - 1
    if codes.dtype == np.uint8:
        per = np.bincount(codes, minlength=size)[:size]
    else:
        per = np.bincount(codes[codes >= 0], minlength=size)
    present = np.flatnonzero(per)
    out: dict[str, int] = {}
    for c in present:
        t = str(text[c])
        row = offset + int(np.argmax(codes == c)) if rows else 0
        if t not in out or row < out[t]:
            out[t] = row
        if counts is not None:
            counts[t] = counts.get(t, 0) + int(per[c])
    return out


def _is_text(codes: np.ndarray, text: np.ndarray, values) -> np.ndarray:
    """Index into ``values`` (int8) per row; -1 where the row's text is not among them."""
    pos = {v: i for i, v in enumerate(values)}
    hit = np.array([pos.get(t, -1) for t in text], dtype=np.int8)
    return np.take(hit, codes)


def check_columns(df: pd.DataFrame) -> None:
    dup = df.columns[df.columns.duplicated()]
    if len(dup):
        raise AuditInputError(f"the table has the column name {shown(dup[0])} more than once")
    if len(df) == 0:
        raise AuditInputError("the table has no rows")


def _score_columns(cfg) -> list[str]:
    if cfg.score is None:
        return []
    return list(cfg.score.values()) if isinstance(cfg.score, dict) else [cfg.score]


def need_columns(columns, cfg) -> None:
    """Each named outcome column exists (one line naming the first that does not)."""
    cols = list(columns)
    for role, setting, col in [("label", "label", cfg.label), ("prediction", "pred", cfg.pred)] + \
            [("probability", "score", c) for c in _score_columns(cfg)]:
        if col is not None and col not in cols:
            listed = ", ".join(shown(c, 30)[1:-1] for c in cols[:8])
            more = ", ..." if len(cols) > 8 else ""
            raise AuditInputError(f"{role} column {shown(col)} is not in the table (columns: {listed}{more})",
                                  setting=setting)


def _first_bad(mask: np.ndarray) -> int:
    return int(np.flatnonzero(mask)[0])


@dataclass
class OutcomeProfile:
    """What the outcome columns of some rows hold; ``a + b`` profiles the union of rows."""

    #: Each label value with its first data row (0 for every value unless one probability column
    #: is given: then a third value is an error that names its row).
    label_first: dict[str, int] = field(default_factory=dict)
    pred_first: dict[str, int] = field(default_factory=dict)
    n_rows: int = 0
    n_unlabelled: int = 0
    sum_off: tuple[int, float] | None = None  # first row whose class probabilities do not sum to 1
    label_counts: dict[str, int] = field(default_factory=dict)  # rows per label value

    def __add__(self, other: "OutcomeProfile") -> "OutcomeProfile":
        offs = [x for x in (self.sum_off, other.sum_off) if x is not None]
        counts = dict(self.label_counts)
        for k, v in other.label_counts.items():
            counts[k] = counts.get(k, 0) + v
        return OutcomeProfile(_merge_first(self.label_first, other.label_first),
                              _merge_first(self.pred_first, other.pred_first),
                              self.n_rows + other.n_rows, self.n_unlabelled + other.n_unlabelled,
                              min(offs) if offs else None, counts)


def _merge_first(a: dict[str, int], b: dict[str, int]) -> dict[str, int]:
    out = dict(a)
    for k, v in b.items():
        if k not in out or v < out[k]:
            out[k] = v
    return out


def labelled_rows(df: pd.DataFrame, cfg, *, offset: int = 0) -> np.ndarray | None:
    """Rows to keep: ``None`` when every row has a label. A missing label is an error naming
    the row unless ``cfg.drop_unlabelled`` is set."""
    missing = df[cfg.label].isna().to_numpy()
    if not missing.any():
        return None
    if not cfg.drop_unlabelled:
        raise AuditInputError(f"label column {shown(cfg.label)} has a missing value at "
                              f"{_row(offset + _first_bad(missing))} (drop_unlabelled=True, --drop-unlabelled, "
                              "leaves such rows out and counts them)", setting="label")
    return ~missing


def profile_outcomes(df: pd.DataFrame, cfg, *, offset: int = 0, rows: np.ndarray | None = None):
    """Check the outcome columns of one chunk (labelled rows only) and profile them.

    ``offset`` is the chunk's first data row in the whole table (for messages); ``rows`` maps
    the chunk's rows to their positions before unlabelled rows were dropped. Returns the
    profile and a cache that :meth:`OutcomeSpec.apply` may reuse for the same chunk.
    """
    where = (lambda i: offset + int(rows[i])) if rows is not None else (lambda i: offset + i)
    ycodes, ytext = _canonical_codes(df[cfg.label])
    prof = OutcomeProfile(n_rows=len(df))
    one_score = isinstance(cfg.score, str)  # two classes expected: a third value's row is named
    prof.label_first = {k: where(v) if one_score else 0 for k, v in
                        _first_rows(ycodes, ytext, 0, rows=one_score, counts=prof.label_counts).items()}
    cache: dict[str, Any] = {"y": (ycodes, ytext)}
    if isinstance(cfg.score, dict):
        probs = _probabilities_if_fit(df, list(cfg.score.values()))
        if probs is None:  # something to report (or a small table): the checks that say which row
            cols = [_check_score(df[c], c, where) for c in cfg.score.values()]
            probs = np.stack(cols)  # classes × rows: each class's column stays contiguous
            total = probs.sum(axis=0)
            off = np.abs(total - 1.0) > PROB_SUM_TOLERANCE
            if off.any():  # reported after the classes are known (a missing class explains it better)
                i = _first_bad(off)
                prof.sum_off = (where(i), float(total[i]))
        cache["probs"] = probs
    elif cfg.score is not None:
        cache["score"] = _check_score(df[cfg.score], cfg.score, where)
    if cfg.pred is not None:
        ps = df[cfg.pred]
        pmiss = ps.isna().to_numpy()
        if pmiss.any():
            raise AuditInputError(f"prediction column {shown(cfg.pred)} has a missing value at "
                                  f"{_row(where(_first_bad(pmiss)))}", setting="pred")
        pcodes, ptext = _canonical_codes(ps)
        prof.pred_first = {k: where(v) for k, v in _first_rows(pcodes, ptext, 0).items()}
        cache["pred"] = (pcodes, ptext)
    return prof, cache


def _probabilities_if_fit(df: pd.DataFrame, names: list[str]) -> np.ndarray | None:
    """The (classes × rows) probability matrix of a large table whose columns are floats, every
    value in [0, 1] and every row summing to 1, checked in one compiled pass; ``None`` otherwise
    (then the column-by-column checks run and name the first bad row)."""
    from .tally import use_compiled

    if not use_compiled(len(df), 40) or not all(df[c].dtype == np.float64 for c in names):
        return None
    from .kernels import probabilities_fit

    probs = np.empty((len(names), len(df)))
    for i, c in enumerate(names):
        probs[i] = df[c].to_numpy()
    bad, off = probabilities_fit(probs, PROB_SUM_TOLERANCE)
    return probs if bad == 0 and off == 0 else None


def _check_score(raw: pd.Series, name: str, where) -> np.ndarray:
    if not pd.api.types.is_numeric_dtype(raw) or pd.api.types.is_bool_dtype(raw):
        conv = pd.to_numeric(raw, errors="coerce")
        bad = conv.isna().to_numpy() & raw.notna().to_numpy()
        if bad.any():
            i = _first_bad(bad)
            raise AuditInputError(f"probability column {shown(name)} has a non-numeric value "
                                  f"{shown(raw.iloc[i])} at {_row(where(i))}", setting="score")
        raw = conv
    p = raw.to_numpy(dtype=float)
    lo, hi = float(p.min()), float(p.max())  # both NaN if any value is NaN
    if np.isnan(lo) or np.isnan(hi):
        raise AuditInputError(f"probability column {shown(name)} has a missing value at "
                              f"{_row(where(_first_bad(np.isnan(p))))}", setting="score")
    if lo < 0 or hi > 1:
        i = _first_bad((p < 0) | (p > 1))
        raise AuditInputError(f"probability column {shown(name)} has value {p[i]:g} at {_row(where(i))}; "
                              "probabilities must lie in [0, 1]", setting="score")
    return p


def _infer_positive(classes: list[str], column: str) -> str:
    low = sorted(c.lower() for c in classes)
    for neg, pos in _KNOWN_PAIRS:
        if low == sorted([neg, pos]):
            return next(c for c in classes if c.lower() == pos)
    raise AuditInputError(
        f"label column {shown(column)} has classes {shown(classes[0])} and {shown(classes[1])}; "
        "cannot tell which is positive — pass positive=... (CLI: --positive VALUE)", setting="positive")


def _match_class(value: str, classes) -> str | None:
    """The class a stated value names: its text, or the integral number it spells ("1.0" -> "1")."""
    if value in classes:
        return value
    alt = numeric_text(value)
    return alt if alt in classes else None


@dataclass(frozen=True)
class OutcomeSpec:
    """How the outcome columns are read: classes in index order, the positive class, the
    prediction's source. Fitted once from the whole table's :class:`OutcomeProfile`."""

    label: str
    pred: str | None
    score: str | None
    classes: tuple[str, ...]
    positive: str | None
    positive_inferred: bool
    prediction_source: str
    threshold: float
    probs: dict[str, str] | None = None  # class -> probability column (multi-class)

    @property
    def n_classes(self) -> int:
        return len(self.classes)

    @property
    def has_probabilities(self) -> bool:
        return self.score is not None or self.probs is not None

    def apply(self, df: pd.DataFrame, cache: dict | None = None) -> Outcomes:
        """Encode a chunk (already checked by :func:`profile_outcomes`) as class indices."""
        cache = cache or {}
        ycodes, ytext = cache.get("y") or _canonical_codes(df[self.label])
        y = _is_text(ycodes, ytext, self.classes)
        p = probs = None
        if self.score is not None:
            p = cache.get("score")
            if p is None:
                p = pd.to_numeric(df[self.score], errors="coerce").to_numpy(dtype=float)
        losses = None
        if self.probs is not None:
            by_class = cache.get("probs")
            if by_class is None:
                by_class = np.stack([pd.to_numeric(df[c], errors="coerce").to_numpy(dtype=float)
                                     for c in self.probs.values()])
            order = [list(self.probs).index(c) for c in self.classes]  # rows in class order
            if order != list(range(len(order))):
                by_class = by_class[order]
            from .tally import class_rows, use_compiled

            top, ll, br = class_rows(y, by_class, compiled=use_compiled(len(y), 40))
            probs, losses = by_class.T, (ll, br)
        if self.pred is not None:
            pcodes, ptext = cache.get("pred") or _canonical_codes(df[self.pred])
            yhat = _is_text(pcodes, ptext, self.classes)
        elif probs is not None:
            yhat = top  # the most probable class; ties: the class that sorts first
        else:
            yhat = (p >= self.threshold).view(np.int8)
        return Outcomes(y=y, yhat=yhat, score=p, classes=self.classes, positive=self.positive,
                        positive_inferred=self.positive_inferred, prediction_source=self.prediction_source,
                        probs=probs, losses=losses)


def fit_outcomes(profile: OutcomeProfile, cfg) -> OutcomeSpec:
    """Classes and (for two classes) the positive class from the whole table's profile.

    Two classes: index 0 is the negative class, 1 the positive (stated or inferred). Three or
    more: the classes in natural order (numbers numerically, then text); the prediction is the
    predicted-label column or else the most probable class (ties: the class that sorts first).
    """
    if profile.n_rows == 0:
        raise AuditInputError("the table has no labelled rows" if profile.n_unlabelled else "the table has no rows")
    label = cfg.label
    classes = sorted(profile.label_first, key=natural_key)
    if len(classes) < 2:
        listed = ", ".join(shown(c, 20)[1:-1] for c in classes)
        raise AuditInputError(f"label column {shown(label)} has {len(classes)} distinct value ({listed}); "
                              "expected two or more classes", setting="label")
    probs = dict(cfg.score) if isinstance(cfg.score, dict) else None
    extra = lacking = []
    if probs is not None:
        extra = [c for c in probs if c not in classes]
        lacking = [c for c in classes if c not in probs]
        if extra:
            raise AuditInputError(f"probability column {shown(probs[extra[0]])} is given for class {shown(extra[0])}, "
                                  f"which does not occur in label column {shown(label)} ({', '.join(classes[:8])})",
                                  setting="score")
        if lacking:
            raise AuditInputError(f"class {shown(lacking[0])} of label column {shown(label)} has no probability "
                                  "column; give one per class: score={class: column} (--score CLASS=COL,...)",
                                  setting="score")
    if cfg.pred is not None:
        unknown = {k: v for k, v in profile.pred_first.items() if k not in classes}
        if unknown:
            value, row = min(unknown.items(), key=lambda kv: kv[1])
            raise AuditInputError(f"prediction column {shown(cfg.pred)} has value {shown(value)} at {_row(row)}, "
                                  f"which is not a class of label column {shown(label)} ({', '.join(classes[:8])})",
                                  setting="pred")
    if profile.sum_off is not None and probs is not None and not extra and not lacking:
        row, total = profile.sum_off
        raise AuditInputError(f"the probability columns ({', '.join(probs.values())}) sum to {total:.6g} at "
                              f"{_row(row)}; each row must sum to 1 within {PROB_SUM_TOLERANCE:g}", setting="score")
    if len(classes) > 2 and isinstance(cfg.score, str):
        raise AuditInputError(_two_expected(profile, cfg, classes), setting="label")
    if len(classes) > 2:
        if cfg.positive is not None:
            raise AuditInputError(f"label column {shown(label)} has {len(classes)} classes; a positive class applies "
                                  "to two classes only — leave positive out for a multi-class audit",
                                  setting="positive")
        if len(classes) > MAX_CLASSES:
            raise AuditInputError(f"label column {shown(label)} has {len(classes)} classes; at most {MAX_CLASSES} "
                                  "are supported", setting="label")
        return OutcomeSpec(label=label, pred=cfg.pred, score=None, classes=tuple(classes), positive=None,
                           positive_inferred=False,
                           prediction_source="column" if cfg.pred is not None else "most probable class",
                           threshold=cfg.threshold, probs=probs)
    classes = sorted(classes)
    if probs is not None:
        raise AuditInputError(f"label column {shown(label)} has two classes; give the positive class's probability "
                              "as one column: score=COLUMN (--score COLUMN)", setting="score")
    if cfg.positive is None:
        pos = _infer_positive(classes, label)
        inferred = True
    else:
        pos = _match_class(cfg.positive, classes)
        inferred = False
        if pos is None:
            raise AuditInputError(f"positive class {shown(cfg.positive)} does not occur in label column "
                                  f"{shown(label)} (classes: {classes[0]}, {classes[1]})", setting="positive")
    neg = classes[0] if classes[1] == pos else classes[1]
    return OutcomeSpec(label=label, pred=cfg.pred, score=cfg.score, classes=(neg, pos), positive=pos,
                       positive_inferred=inferred, prediction_source="column" if cfg.pred is not None else "threshold",
                       threshold=cfg.threshold)


def _two_expected(profile: OutcomeProfile, cfg, classes: list[str]) -> str:
    """The message for a label with three or more values when one probability column says the
    audit is of two classes: the two expected values are the positive class (when stated) and
    the most frequent; the rarest of the others is named with its first data row."""
    counts = profile.label_counts
    by_rows = sorted(classes, key=lambda c: (-counts.get(c, 0), profile.label_first.get(c, 0)))
    pos = _match_class(cfg.positive, classes) if cfg.positive is not None else None
    expected = ([pos] + [c for c in by_rows if c != pos][:1]) if pos is not None else by_rows[:2]
    odd = min((c for c in classes if c not in expected),
              key=lambda c: (counts.get(c, 0), profile.label_first.get(c, 0)))
    n = counts.get(odd, 0)
    listed = ", ".join(shown(c, 20)[1:-1] for c in classes[:5]) + (", ..." if len(classes) > 5 else "")
    return (f"label column {shown(cfg.label)} has {len(classes)} distinct values ({listed}) where a two-class audit "
            f"(one probability column, {shown(cfg.score)}) expects two: the rarest other value, {shown(odd, 20)} "
            f"({n} row{'s' if n != 1 else ''}), is first at {_row(profile.label_first[odd])}; for a multi-class "
            "audit give one probability column per class: score={class: column} (--score CLASS=COL,...)")


def read_outcomes(df: pd.DataFrame, **settings: Any) -> Outcomes:
    """Validate and encode the outcome columns of one table (profile, fit and apply at once).

    If only ``score`` is given, the prediction is ``score >= threshold``. If both are given,
    counts use ``pred`` and the losses use ``score``.
    """
    from ..settings import make_config

    cfg = make_config(**settings)
    check_columns(df)
    need_columns(df.columns, cfg)
    keep = labelled_rows(df, cfg)
    if keep is not None:
        df = df[keep]
    prof, cache = profile_outcomes(df, cfg, rows=None if keep is None else np.flatnonzero(keep))
    return fit_outcomes(prof, cfg).apply(df, cache)
