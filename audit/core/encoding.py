"""Step 2: choose the attribute columns and encode each as small integer codes, with an
encoding fitted once and applied to any table or chunk.

Fitting works from :class:`ColumnProfile` objects, which add across chunks, so a table read in
chunks gets exactly the encoding the same table held in memory gets:

* categorical columns keep their values as levels (sorted, numbers in numeric order);
  integer columns with few distinct values are categories too; a value missing anywhere
  gets a level of its own, ``(missing)``;
* numeric columns are cut into half-open bins ``[a, b)``. Quantile bins take their inner
  edges from the quantiles of the first :data:`FIT_SAMPLE` non-missing values, rounded to a
  few significant digits *before* any row is assigned, and the outer bins are open-ended:
  ``(-inf, e1)``, ``[e1, e2)``, ..., ``[ek, inf)``. A value that quantile edges collapse onto
  (a mass point, such as the zeros of a column that is mostly 0) gets a bin of its own, cut
  at the next distinct value above it (``audit.core.bins``). Explicit edges ``e0 < ... < ek`` give
  ``[e0, e1)`` ... ``[e(k-1), ek)`` plus the open tails ``(-inf, e0)`` and ``[ek, inf)``
  when rows fall there. Every printed label is exactly the rule that assigns rows;
* columns that cannot be sliced meaningfully (identifier-like text or whole numbers, a single
  value, too many values, a numeric column whose values all fall in one bin) are skipped with
  a stated reason.

Values never seen at fit time (a category, or a missing value where none was seen), met when
a fitted encoding is applied to another table, are an error naming the attribute and value:
the slice layout never changes silently.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from ..errors import AuditInputError, shown
from .bins import bin_labels, plain, quantile_edges, round_edges  # noqa: F401  (public here too)
from .values import natural_key, numeric_text

MISSING = "(missing)"
#: Numeric values used to fit quantile bin edges: the first this many non-missing values.
FIT_SAMPLE = 1_000_000
#: Distinct text values tracked per column; beyond it a column is too varied to slice.
TEXT_CAP = 100_000
#: Whole-number columns with at most this many distinct values are categories, not bins.
MAX_INTEGER_LEVELS = 12
#: Identifier rule: more than this many distinct values, covering at least this share of rows.
ID_MIN_DISTINCT, ID_SHARE = 20, 0.9


# ----------------------------------------------------------------------------- profiles
@dataclass
class ColumnProfile:
    """What one column holds over some rows; ``a + b`` profiles the union of the rows.

    Text columns (and pandas categoricals, booleans) keep each value's row count, up to
    :data:`TEXT_CAP` distinct values. Numeric columns keep up to ``MAX_INTEGER_LEVELS + 1``
    distinct values, whether every value is whole, the range, and the first
    :data:`FIT_SAMPLE` non-missing values (for quantile edges and the identifier rule).
    """

    name: str
    kind: str  # "numeric" or "text"
    n: int = 0
    n_missing: int = 0
    counts: dict[str, int] | None = field(default_factory=dict)
    distinct: set[float] | None = field(default_factory=set)
    integral: bool = True
    has_inf: bool = False
    lo: float = np.inf
    hi: float = -np.inf
    sample: list[np.ndarray] = field(default_factory=list)
    sample_size: int = 0
    #: Distinct text values seen when ``counts`` was not kept (too many to slice); exact for one
    #: chunk, a lower bound once chunks are added (the most any one part held).
    distinct_seen: int = 0
    distinct_exact: bool = True
    #: With ``counts`` not kept: the parts' distinct values added up, an upper bound on the
    #: union's (0 = not recorded).
    distinct_sum: int = 0

    def __add__(self, other: "ColumnProfile") -> "ColumnProfile":
        if self.kind != other.kind:
            raise AuditInputError(f"attribute column {shown(self.name)} holds numbers in some rows and text in "
                                  "others; clean it or list it with categorical=[...] (--categorical)",
                                  setting="attributes")
        out = ColumnProfile(self.name, self.kind, self.n + other.n, self.n_missing + other.n_missing)
        if self.kind == "text":
            if self.counts is None or other.counts is None:
                out.counts = None
                parts = [x for x in (self, other) if x.n]
                out.distinct_seen = max((x.distinct_bounds[0] for x in parts), default=0)
                out.distinct_exact = len(parts) <= 1 and all(x.distinct_exact for x in parts)
                highs = [x.distinct_bounds[1] for x in parts]
                out.distinct_sum = 0 if None in highs else sum(highs)
            else:
                merged = dict(self.counts)
                for k, v in other.counts.items():
                    merged[k] = merged.get(k, 0) + v
                out.counts = merged if len(merged) <= TEXT_CAP else None
                if out.counts is None:
                    out.distinct_seen, out.distinct_exact = len(merged), True
                    out.distinct_sum = len(merged)
            return out
        out.distinct = None if self.distinct is None or other.distinct is None else self.distinct | other.distinct
        if out.distinct is not None and len(out.distinct) > MAX_INTEGER_LEVELS + 1:
            out.distinct = None
        out.integral = self.integral and other.integral
        out.has_inf = self.has_inf or other.has_inf
        out.lo, out.hi = min(self.lo, other.lo), max(self.hi, other.hi)
        out.sample, out.sample_size = list(self.sample), self.sample_size
        for part in other.sample:
            room = FIT_SAMPLE - out.sample_size
            if room <= 0:
                break
            out.sample.append(part[:room])
            out.sample_size += min(room, len(part))
        return out

    @property
    def n_distinct(self) -> int | None:
        if self.kind == "text":
            if self.counts is None:
                return self.distinct_seen if self.distinct_exact and self.distinct_seen else None
            return sum(1 for c in self.counts.values() if c > 0)
        return None if self.distinct is None else len(self.distinct)

    @property
    def distinct_bounds(self) -> tuple[int, int | None]:
        """A text column's distinct non-missing values as ``(at least, at most)``; equal when
        known exactly, ``at most`` None when no bound was recorded. Parts profiled apart (chunks)
        that each held too many values to list give the most one part held and the parts' sum."""
        nu = self.n_distinct
        if nu is not None:
            return nu, nu
        # A profile that dropped its values without counting them (one built outside
        # profile_column) had more than TEXT_CAP: the only reason profile_column drops them uncounted.
        low = self.distinct_seen or (TEXT_CAP + 1 if self.n > self.n_missing else 0)
        high = min(self.distinct_sum, self.n - self.n_missing) if self.distinct_sum else None
        return low, high


def _text_of(u) -> str:
    if isinstance(u, (float, np.floating)) and float(u).is_integer():
        return str(int(u))
    return str(u)


def _raw_levels(s: pd.Series, *, compiled: bool = False):
    """Raw codes (-1 = missing), their texts and per-code row counts."""
    if isinstance(s.dtype, pd.CategoricalDtype):
        raw = np.asarray(s.array.codes)  # the column's own codes, no copy
        text = [str(c) for c in s.cat.categories]
    else:
        raw, uniques = pd.factorize(s, use_na_sentinel=True)
        text = [_text_of(u) for u in list(uniques)]
    if raw.dtype.itemsize <= 2:
        # Viewing the signed codes as unsigned puts -1 (missing) in the histogram's last bin.
        from .tally import small_histogram

        hist = small_histogram(raw.view(np.dtype(f"u{raw.dtype.itemsize}")), 1 << (8 * raw.dtype.itemsize),
                               compiled=compiled)
        counts, n_missing = hist[:len(text)], int(hist[-1])
    else:
        n_missing = int((raw < 0).sum())
        counts = np.bincount(raw[raw >= 0] if n_missing else raw, minlength=len(text))
    return raw, text, counts, n_missing


def is_numeric(s: pd.Series) -> bool:
    return pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s)


def profile_column(s: pd.Series, name: str, *, as_text: bool = False, cache: dict | None = None,
                   compiled: bool = False, cap: int | None = None) -> ColumnProfile:
    """Profile one column of one chunk. ``cache`` (a dict) receives work that
    :meth:`Encoding.apply` can reuse on the same chunk. A text column with more than ``cap``
    distinct values (too many to slice whatever they are) keeps only their number."""
    if cap is not None and not (is_numeric(s) and not as_text) and not isinstance(s.dtype, pd.CategoricalDtype):
        raw, uniques = pd.factorize(s, use_na_sentinel=True)
        if len(uniques) > cap:
            p = ColumnProfile(name, "text", len(raw), int((raw < 0).sum()), counts=None)
            p.distinct_seen = p.distinct_sum = len(uniques)
            return p
    if is_numeric(s) and not as_text:
        v = s.to_numpy(dtype=float)
        miss = np.isnan(v)
        fin = v[~miss]
        p = ColumnProfile(name, "numeric", len(v), int(miss.sum()))
        if len(fin):
            finite = fin[np.isfinite(fin)]
            p.has_inf = len(finite) < len(fin)
            p.integral = bool(np.all(finite == np.round(finite)))
            p.lo, p.hi = float(fin.min()), float(fin.max())
            u = pd.unique(fin)
            p.distinct = set(u.tolist()) if len(u) <= MAX_INTEGER_LEVELS + 1 else None
            p.sample = [fin[:FIT_SAMPLE]]
            p.sample_size = min(len(fin), FIT_SAMPLE)
        if cache is not None:
            cache[name] = ("numeric", v)
        return p
    raw, text, counts, n_missing = _raw_levels(s, compiled=compiled)
    p = ColumnProfile(name, "text", len(raw), n_missing)
    if len(text) > TEXT_CAP:
        p.counts = None
        p.distinct_seen = p.distinct_sum = len({t for t, c in zip(text, counts.tolist()) if c})
    else:
        merged: dict[str, int] = {}
        for t, c in zip(text, counts.tolist()):
            if c:
                merged[t] = merged.get(t, 0) + c  # two raw values may share a text (1 and "1")
        p.counts = merged
    if cache is not None:
        cache[name] = ("text", (raw, text))
    return p


# ----------------------------------------------------------------------------- fitted encoding
@dataclass(frozen=True)
class AttributeCoding:
    """How one attribute column becomes codes: its kind, levels and (for bins) cut points.

    ``kind`` is ``"category"``, ``"integer category"`` or ``"binned"``. For a binned column a
    row's code is the number of ``cuts`` at or below its value (plus one when the levels start
    with a lower tail); ``(missing)``, when present, is the last level.
    """

    name: str
    kind: str
    levels: tuple[str, ...]
    edges: tuple[float, ...] | None = None
    n_missing: int = 0
    cuts: tuple[float, ...] = ()
    first_code: int = 0

    @property
    def cardinality(self) -> int:
        return len(self.levels)

    @property
    def has_missing(self) -> bool:
        return bool(self.levels) and self.levels[-1] == MISSING

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "kind": self.kind, "levels": list(self.levels),
                "bin_edges": None if self.edges is None else list(self.edges),
                "cuts": list(self.cuts), "first_code": self.first_code, "missing_rows": self.n_missing}

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> "AttributeCoding":
        return cls(name=d["name"], kind=d["kind"], levels=tuple(d["levels"]),
                   edges=None if d.get("bin_edges") is None else tuple(float(x) for x in d["bin_edges"]),
                   n_missing=int(d.get("missing_rows", 0)), cuts=tuple(float(x) for x in d.get("cuts", ())),
                   first_code=int(d.get("first_code", 0)))

    def codes(self, s: pd.Series, cached=None, *, offset: int = 0) -> np.ndarray:
        """Codes of one chunk's column (``cached``: what :func:`profile_column` kept for it)."""
        dt = np.uint8 if self.cardinality <= 255 else np.int32
        if self.kind == "binned":
            v = cached[1] if cached is not None and cached[0] == "numeric" else _as_float(s, self.name)
            miss = np.isnan(v)
            codes = np.searchsorted(np.asarray(self.cuts), v, side="right").astype(np.int32) + self.first_code
            bad = ~miss & ((codes < 0) | (codes >= self.cardinality - (1 if self.has_missing else 0)))
            if bad.any():
                i = int(np.flatnonzero(bad)[0])
                raise _unseen(self.name, plain(v[i]), offset + i)
            if miss.any():
                if not self.has_missing:
                    raise _unseen(self.name, MISSING, offset + int(np.flatnonzero(miss)[0]))
                codes[miss] = self.cardinality - 1
            return codes.astype(dt)
        if cached is not None and cached[0] == "text":
            raw, text = cached[1]
        else:
            raw, text, _, _ = _raw_levels(s)
        pos = {t: i for i, t in enumerate(self.levels) if t != MISSING or not self.has_missing}
        miss_code = self.cardinality - 1 if self.has_missing else -1
        remap = np.array([pos.get(t, -1) for t in text] + [miss_code], dtype=np.int32)
        if raw.dtype.itemsize == 1 and dt == np.uint8 and miss_code == -1 and \
                np.array_equal(remap[:-1], np.arange(len(text))):
            if len(raw) and int(raw.min()) < 0:
                raise _unseen(self.name, MISSING, offset + int(np.flatnonzero(raw < 0)[0]))
            return raw.view(np.uint8)  # already in level order: the column's own codes, no copy
        codes = np.take(remap, raw, mode="wrap")  # raw -1 (missing) takes the last entry
        if (codes < 0).any():
            i = int(np.flatnonzero(codes < 0)[0])
            value = MISSING if raw[i] < 0 else text[raw[i]]
            raise _unseen(self.name, value, offset + i)
        if remap.max() < 256 and dt == np.uint8:
            return codes.astype(np.uint8)
        return codes.astype(dt)


def _as_float(s: pd.Series, name: str) -> np.ndarray:
    try:
        return s.to_numpy(dtype=float)
    except (TypeError, ValueError):
        raise AuditInputError(f"attribute column {shown(name)} was numeric when the encoding was fitted but holds "
                              "text here", setting="attributes") from None


def _unseen(name: str, value: str, row: int) -> AuditInputError:
    return AuditInputError(f"attribute column {shown(name)} has value {shown(value)} at data row {row + 1}, which "
                           "was not seen when the encoding was fitted; fit the encoding on this table",
                           setting="attributes")


@dataclass(frozen=True)
class Encoding:
    """Every attribute's coding plus the columns skipped and why; fitted once, applied to any
    table or chunk (``encoding.apply(df)``) and written to ``summary.json`` (``to_dict``)."""

    attributes: tuple[AttributeCoding, ...]
    skipped: dict[str, str]

    @property
    def names(self) -> list[str]:
        return [a.name for a in self.attributes]

    @property
    def cards(self) -> list[int]:
        return [a.cardinality for a in self.attributes]

    def apply(self, df: pd.DataFrame, cache: dict | None = None, *, offset: int = 0) -> list[np.ndarray]:
        cache = cache or {}
        return [a.codes(df[a.name], cache.get(a.name), offset=offset) for a in self.attributes]

    def to_dict(self) -> dict[str, Any]:
        return {"attributes": [a.to_dict() for a in self.attributes],
                "skipped": [{"column": k, "reason": v} for k, v in self.skipped.items()]}

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> "Encoding":
        return cls(tuple(AttributeCoding.from_dict(a) for a in d["attributes"]),
                   {s["column"]: s["reason"] for s in d.get("skipped", [])})


def _categorical(p: ColumnProfile, kind: str) -> AttributeCoding:
    if p.kind == "numeric":
        values = sorted(p.distinct or ())
        levels = [_text_of(v) for v in values]
    else:
        levels = sorted((t for t, c in (p.counts or {}).items() if c > 0), key=natural_key)
    return AttributeCoding(p.name, kind, tuple(levels + ([MISSING] if p.n_missing else [])), n_missing=p.n_missing)


def _binned(p: ColumnProfile, edges: Sequence[float] | None, n_bins: int) -> AttributeCoding:
    has_values = p.n > p.n_missing
    if edges is not None:
        e = np.asarray(edges, dtype=float)
        lower = has_values and p.lo < e[0]
        upper = has_values and p.hi >= e[-1]
        labels = bin_labels(e.tolist(), lower_tail=lower, upper_tail=upper)
        cuts, first, shown_edges = e, (0 if lower else -1), e
    else:
        sample = np.concatenate(p.sample) if p.sample else np.empty(0)
        inner = quantile_edges(sample, p.lo, p.hi, n_bins)
        labels = bin_labels(inner.tolist(), lower_tail=True, upper_tail=True) if len(inner) else ["(-inf, inf)"]
        cuts, first, shown_edges = inner, 0, inner
    levels = labels + ([MISSING] if p.n_missing else [])
    return AttributeCoding(p.name, "binned", tuple(levels), edges=tuple(float(x) for x in shown_edges),
                           n_missing=p.n_missing, cuts=tuple(float(x) for x in cuts), first_code=first)


def _one_bin(a: AttributeCoding, *, given: bool, n_bins: int) -> str | None:
    """Why a binned column whose values all fall in one bin is skipped (None: it has two or more).
    Its slice would be the whole table, or with missing values only restate "not missing"."""
    bins = [lv for lv in a.levels if lv != MISSING]
    if len(bins) > 1:
        return None
    cause = ("bin_edges put every value in it" if given else "bins=1" if n_bins == 1
             else "every value is the same")
    then = ("a slice of it would only restate that the value is not missing" if a.has_missing
            else "a slice of it would be the whole table")
    return f"one bin, {bins[0]}, holds every value ({cause}); {then}"


def fit_encoding(profiles: Sequence[ColumnProfile], *, n_bins: int = 5, bin_edges: Mapping[str, Sequence[float]]
                 | None = None, max_levels: int = 100, categorical: Iterable[str] = (),
                 numeric: Iterable[str] = ()) -> Encoding:
    """Decide each profiled column's coding (or why it is skipped); see the module docstring."""
    bin_edges = dict(bin_edges or {})
    categorical, numeric = set(categorical), set(numeric)
    names = {p.name for p in profiles}
    for col in list(bin_edges) + sorted(categorical | numeric):
        if col not in names:
            raise AuditInputError(f"{'bin edges were' if col in bin_edges else 'a column type was'} given for "
                                  f"{shown(col)}, which is not an audited attribute", setting="bin_edges")
    attrs: list[AttributeCoding] = []
    skipped: dict[str, str] = {}
    for p in profiles:
        col = p.name
        n_nonmiss = p.n - p.n_missing
        if n_nonmiss == 0:
            skipped[col] = "every value is missing"
            continue
        nu = p.n_distinct
        if nu == 1 and not p.n_missing:
            skipped[col] = "a single value in every row"
            continue
        if col in bin_edges or col in numeric:
            if p.kind != "numeric":
                raise AuditInputError(f"{'bin edges were' if col in bin_edges else 'numeric binning was'} asked for "
                                      f"{shown(col)}, which is not numeric", setting="bin_edges")
            if p.has_inf:
                raise AuditInputError(f"attribute column {shown(col)} has an infinite value; bin or clean it first",
                                      setting="attributes")
            coding = _binned(p, bin_edges.get(col), n_bins)
            why = _one_bin(coding, given=col in bin_edges, n_bins=n_bins)
            if why:
                skipped[col] = why
                continue
            attrs.append(coding)
            continue
        if p.kind == "numeric":
            if p.has_inf:
                raise AuditInputError(f"attribute column {shown(col)} has an infinite value; bin or clean it first",
                                      setting="attributes")
            if p.integral and nu is not None and nu <= MAX_INTEGER_LEVELS:
                attrs.append(_categorical(p, "integer category"))
                continue
            if p.integral and p.sample_size:
                sample = np.concatenate(p.sample)
                distinct = len(np.unique(sample))
                # Whole numbers, nearly all distinct, that run almost consecutively (row numbers) or
                # sit in a column named like an identifier (account numbers): not a population trait.
                run = float(sample.max() - sample.min() + 1) <= 2.0 * distinct
                if distinct > ID_MIN_DISTINCT and distinct >= ID_SHARE * p.sample_size and (run or _id_name(col)):
                    skipped[col] = (f"looks like a numeric identifier ({distinct} distinct whole numbers in "
                                    f"{p.sample_size} rows); list it with categorical=[...] (--categorical) to slice it "
                                    "anyway")
                    continue
            coding = _binned(p, None, n_bins)
            why = _one_bin(coding, given=False, n_bins=n_bins)
            if why:
                skipped[col] = why
                continue
            attrs.append(coding)
            continue
        reason = _text_skip(p, n_nonmiss, max_levels, forced=col in categorical)
        if reason:
            skipped[col] = reason
            continue
        attrs.append(_categorical(p, "category"))
    return Encoding(tuple(attrs), skipped)


def _text_skip(p: ColumnProfile, n_nonmiss: int, max_levels: int, *, forced: bool) -> str | None:
    """Why a text column is skipped (None: it is sliced). The identifier rule: more than
    ``ID_MIN_DISTINCT`` distinct values, at least ``ID_SHARE`` as many as non-missing rows (unless
    listed as categorical); then at most ``max_levels`` values. A count not known exactly (a
    chunked read keeps no values of a column with too many) is stated as "at least N", and the
    identifier rule is claimed only when its lower bound meets it."""
    low, high = p.distinct_bounds
    exact = low == high
    count = f"{low}" if exact else f"at least {low}"

    def meets(k):
        return k is None or (k > ID_MIN_DISTINCT and k >= ID_SHARE * n_nonmiss)

    if not forced and meets(low):
        return f"looks like an identifier ({count} distinct values in {n_nonmiss} rows)"
    if forced or not meets(high):
        if low > max_levels:
            return f"{count} distinct values, more than max_levels={max_levels}; bin or group it first"
        if p.counts is None:  # only when max_levels is above what a profile lists
            return f"{count} distinct values, more than the {TEXT_CAP} a profile lists; bin or group it first"
        return None
    # The bounds straddle the identifier rule; the column is skipped as too varied either way.
    how = "not counted exactly" if high is None else "counted chunk by chunk"
    most = "" if high is None else f" and at most {high}"
    return (f"at least {low}{most} distinct values in {n_nonmiss} rows ({how}), more than "
            f"max_levels={max_levels}: an identifier or too varied to slice")


_ID_WORDS = ("id", "key", "number", "no", "num", "nr", "rownames", "index", "idx", "account", "uuid", "ref")


def _id_name(col: str) -> bool:
    import re

    words = [w for w in re.split(r"[^a-z0-9]+", re.sub(r"([a-z])([A-Z])", r"\1_\2", str(col)).lower()) if w]
    return any(w in _ID_WORDS for w in words)


def choose_columns(columns: Sequence[str], attributes: Iterable[str] | None, *,
                   reserved: Sequence[str]) -> list[str]:
    """The attribute columns to profile: the user's list (checked) or every non-reserved column."""
    columns = list(columns)
    if attributes is None:
        return [c for c in columns if c not in reserved]
    cols = list(attributes)
    seen: set[str] = set()
    for c in cols:
        if c not in columns:
            raise AuditInputError(f"attribute column {shown(c)} is not in the table", setting="attributes")
        if c in reserved:
            raise AuditInputError(f"attribute column {shown(c)} is the label, prediction or probability column",
                                  setting="attributes")
        if c in seen:
            raise AuditInputError(f"attribute column {shown(c)} is listed twice", setting="attributes")
        seen.add(c)
    order = {c: i for i, c in enumerate(columns)}
    return sorted(cols, key=order.__getitem__)


# ----------------------------------------------------------------------------- predicted-label columns
#: Words that name a predicted label (``pred_deny``, ``model_decision``, ``y_hat``).
PRED_NAME_WORDS = ("pred", "yhat", "prediction", "predicted", "decision")

#: Why a column that looks like a predicted label is left out of the default attributes.
PREDICTION_LIKE = ("looks like a predicted label: named like one, with values among the label's classes; give it as "
                   "the prediction column (pred=..., --pred) to audit those decisions, or list it with "
                   "attributes=[...] (--attributes) to slice by it anyway")


def is_pred_like(name: str) -> bool:
    """Whether a column is named like a predicted label: a word of :data:`PRED_NAME_WORDS`, a name
    starting with ``pred`` or ending with ``_hat``."""
    n = re.sub(r"[^a-z0-9]+", "_", str(name).lower()).strip("_")
    return bool(set(n.split("_")) & set(PRED_NAME_WORDS)) or n.startswith("pred") or n.endswith("_hat") \
        or n in ("y_hat", "yhat")


def _class_key(v: str) -> str:
    """A value as a class is compared: ``1.0`` and ``True`` read ``1``, ``false`` reads ``0``."""
    t = str(v)
    return numeric_text(t) or {"true": "1", "false": "0"}.get(t.lower(), t)


def looks_like_prediction(name: str, values: Iterable[str] | None, classes: Iterable[str]) -> bool:
    """The one rule (engine and page) for a column that looks like a predicted label: named like
    one (:func:`is_pred_like`), with at most as many distinct values as the label has classes (two
    at least) and every value one of the label's classes (any values when the classes are not
    known). ``values`` are the column's distinct non-missing values as text (None: too many to list)."""
    if values is None or not is_pred_like(name):
        return False
    vals = {_class_key(v) for v in values}
    known = {_class_key(c) for c in classes}
    if not vals or len(vals) > max(2, len(known)):
        return False
    return not known or vals <= known


def profile_values(p: ColumnProfile) -> list[str] | None:
    """A profiled column's distinct non-missing values as text (None: more than a profile lists)."""
    if p.kind == "text":
        return None if p.counts is None else [t for t, c in p.counts.items() if c > 0]
    return None if p.distinct is None else [_text_of(v) for v in p.distinct]


def prediction_like(profiles: Sequence[ColumnProfile], classes: Iterable[str]) -> dict[str, str]:
    """The profiled columns that look like a predicted label (:func:`looks_like_prediction`), each
    with the reason it is left out when the attributes are not given explicitly."""
    classes = list(classes)
    return {p.name: PREDICTION_LIKE for p in profiles if looks_like_prediction(p.name, profile_values(p), classes)}


@dataclass(frozen=True)
class Attribute:
    """An attribute encoded for one table: its coding and the table's codes (convenience view)."""

    coding: AttributeCoding
    codes: np.ndarray = field(repr=False)

    def __getattr__(self, name):
        return getattr(self.coding, name)

    @property
    def cardinality(self) -> int:
        return self.coding.cardinality


def encode_attributes(df: pd.DataFrame, columns: Sequence[str], *, explicit: bool = False, n_bins: int = 5,
                      bin_edges: Mapping[str, Sequence[float]] | None = None, max_levels: int = 100,
                      categorical: Iterable[str] = (), numeric: Iterable[str] = ()):
    """Profile, fit and apply in one step for one table: ``(attributes, {column: reason})``."""
    del explicit
    if not isinstance(n_bins, (int, np.integer)) or isinstance(n_bins, bool) or n_bins < 1:
        raise AuditInputError(f"bins must be a whole number of at least 1; received {n_bins!r}", setting="bins")
    for col, e in (bin_edges or {}).items():
        e = list(e)
        if len(e) < 2 or any(b <= a for a, b in zip(e, e[1:])):
            raise AuditInputError(f"bin edges for {shown(col)} must be at least two increasing numbers; received {e}",
                                  setting="bin_edges")
    cache: dict = {}
    cat = set(categorical)
    profiles = [profile_column(df[c], c, as_text=c in cat, cache=cache) for c in columns]
    enc = fit_encoding(profiles, n_bins=n_bins, bin_edges=bin_edges, max_levels=max_levels, categorical=cat,
                       numeric=numeric)
    codes = enc.apply(df, cache)
    return [Attribute(a, c) for a, c in zip(enc.attributes, codes)], dict(enc.skipped)
