"""Step 2: choose the attribute columns and encode each as small integer codes.

Categorical columns keep their values; numeric columns are cut into half-open bins;
integer columns with few distinct values are kept as categories; missing values get a
level of their own, ``(missing)``. Columns that cannot be sliced meaningfully (identifier-
like, a single value, too many values) are skipped with a stated reason.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from ..errors import AuditInputError
from .tally import small_histogram

MISSING = "(missing)"
OUT_OF_RANGE = "(out of range)"


@dataclass(frozen=True)
class Attribute:
    """One attribute column encoded for slicing.

    ``codes[i]`` indexes ``levels`` for row ``i``. ``kind`` is ``"category"``, ``"integer
    category"`` or ``"binned"``; ``edges`` holds the bin edges of a binned column.
    """

    name: str
    kind: str
    levels: tuple[str, ...]
    codes: np.ndarray = field(repr=False)
    edges: tuple[float, ...] | None = None
    n_missing: int = 0

    @property
    def cardinality(self) -> int:
        return len(self.levels)


def _fmt(x: float, digits: int) -> str:
    if float(x).is_integer() and abs(x) < 1e15:
        return str(int(x))
    return f"{x:.{digits}g}"


def edge_labels(edges: Sequence[float]) -> list[str]:
    """Labels ``[a, b)`` for each bin; the last bin is closed, ``[a, b]``."""
    for digits in range(3, 17):
        txt = [_fmt(e, digits) for e in edges]
        if len(set(txt)) == len(txt):
            break
    k = len(edges) - 1
    return [f"[{txt[i]}, {txt[i + 1]}{']' if i == k - 1 else ')'}" for i in range(k)]


def _natural_key(v: str):
    try:
        return (0, float(v), v)
    except ValueError:
        return (1, 0.0, v)


def _raw_levels(s: pd.Series):
    """Raw codes (-1 = missing), their texts and per-code row counts, without copying the column."""
    if isinstance(s.dtype, pd.CategoricalDtype):
        raw = s.array.codes  # a read-only view of the column's codes, no copy
        text = [str(c) for c in s.cat.categories]
    else:
        raw, uniques = pd.factorize(s, use_na_sentinel=True)
        text = [str(int(u)) if isinstance(u, (float, np.floating)) and float(u).is_integer() else str(u)
                for u in list(uniques)]
    # Viewing the signed codes as unsigned puts -1 (missing) in the last bin of the histogram.
    unsigned = raw.view(np.dtype(f"u{raw.dtype.itemsize}"))
    if raw.dtype.itemsize <= 2:
        hist = small_histogram(unsigned, 1 << (8 * raw.dtype.itemsize))
        counts, n_missing = hist[:len(text)], int(hist[-1])
    else:
        n_missing = int((raw < 0).sum())
        counts = np.bincount(raw[raw >= 0], minlength=len(text)) if n_missing else np.bincount(raw, minlength=len(text))
    return raw, text, counts, n_missing


def _categorical(name: str, s: pd.Series, kind: str, raw_levels=None) -> Attribute:
    raw, text, counts, n_missing = raw_levels or _raw_levels(s)
    order = sorted({t for t, c in zip(text, counts) if c > 0}, key=_natural_key)
    pos = {t: i for i, t in enumerate(order)}
    levels = order + ([MISSING] if n_missing else [])
    # remap[-1] (taken with mode="wrap") is the missing level.
    remap = np.array([pos.get(t, -1) for t in text] + [len(order) if n_missing else -1], dtype=np.int32)
    if n_missing:
        codes = np.take(remap, raw, mode="wrap")
    elif np.array_equal(remap[:-1], np.arange(len(text))) and raw.dtype.itemsize == 1:
        codes = raw.view(np.uint8)  # already in level order: reuse the column's own codes, no copy
    else:
        codes = np.take(remap[:-1].astype(np.uint8 if len(levels) <= 255 else np.int32), raw)
    return Attribute(name=name, kind=kind, levels=tuple(levels), codes=codes, n_missing=n_missing)


def _binned(name: str, v: np.ndarray, edges: Sequence[float] | None, n_bins: int) -> Attribute:
    miss = np.isnan(v)
    vals = v[~miss]
    explicit = edges is not None
    if explicit:
        e = np.asarray(edges, dtype=float)
        if e.ndim != 1 or len(e) < 2 or not np.all(np.diff(e) > 0):
            raise AuditInputError(f"bin edges for '{name}' must be at least two increasing numbers; received {list(edges)}")
    else:
        e = np.unique(np.quantile(vals, np.linspace(0.0, 1.0, n_bins + 1)))
        if len(e) < 2:
            e = np.array([vals.min(), vals.max()])
    labels = edge_labels(e.tolist())
    k = len(labels)
    codes = np.empty(len(v), dtype=np.int32)
    inner = np.searchsorted(e[1:-1], vals, side="right").astype(np.int32)
    codes[~miss] = inner
    extra: list[str] = []
    if explicit:
        outside = (vals < e[0]) | (vals > e[-1])
        if outside.any():
            idx = np.flatnonzero(~miss)[outside]
            codes[idx] = k
            extra.append(OUT_OF_RANGE)
    n_missing = int(miss.sum())
    if n_missing:
        codes[miss] = k + len(extra)
        extra.append(MISSING)
    used = np.bincount(codes, minlength=k + len(extra)) > 0
    levels = labels + extra
    if not used.all():  # drop empty bins so every level is a real slice
        keep = np.flatnonzero(used)
        remap = np.full(len(levels), -1, dtype=np.int32)
        remap[keep] = np.arange(len(keep), dtype=np.int32)
        codes = remap[codes]
        levels = [levels[i] for i in keep]
    return Attribute(name=name, kind="binned", levels=tuple(levels), codes=codes,
                     edges=tuple(float(x) for x in e), n_missing=n_missing)


def encode_attributes(
    df: pd.DataFrame,
    columns: Sequence[str],
    *,
    explicit: bool,
    n_bins: int = 5,
    bin_edges: Mapping[str, Sequence[float]] | None = None,
    max_levels: int = 100,
    max_integer_levels: int = 12,
) -> tuple[list[Attribute], dict[str, str]]:
    """Encode ``columns`` of ``df``; return the attributes and ``{column: reason}`` for skipped ones.

    Identifier-like columns (non-numeric, more than 20 values and at least 90% of them
    distinct), columns with a single value and categorical columns with more than
    ``max_levels`` values are skipped with a reason, whether or not the user named them
    (``explicit``), so the reason is always reported.
    """
    if not isinstance(n_bins, (int, np.integer)) or isinstance(n_bins, bool) or n_bins < 1:
        raise AuditInputError(f"bins must be a whole number of at least 1; received {n_bins!r}")
    bin_edges = dict(bin_edges or {})
    for col in bin_edges:
        if col not in columns:
            raise AuditInputError(f"bin edges were given for '{col}', which is not an audited attribute")
    attrs: list[Attribute] = []
    skipped: dict[str, str] = {}
    n = len(df)
    for col in columns:
        s = df[col]
        raw_levels = None
        if isinstance(s.dtype, pd.CategoricalDtype):
            raw_levels = _raw_levels(s)
            n_nonmiss = n - raw_levels[3]
            nu = int((raw_levels[2] > 0).sum())
        else:
            n_nonmiss = int(s.notna().sum())
            nu = int(s.nunique(dropna=True))
        if nu == 0:
            skipped[col] = "every value is missing"
            continue
        is_bool = pd.api.types.is_bool_dtype(s)
        is_num = pd.api.types.is_numeric_dtype(s) and not is_bool
        if nu == 1 and not s.isna().any():
            skipped[col] = "a single value in every row"
            continue
        if col in bin_edges:
            if not is_num:
                raise AuditInputError(f"bin edges were given for '{col}', which is not numeric")
            attrs.append(_binned(col, s.to_numpy(dtype=float), bin_edges[col], n_bins))
            continue
        if is_num:
            v = s.to_numpy(dtype=float)
            fin = v[~np.isnan(v)]
            if np.isinf(fin).any():
                raise AuditInputError(f"attribute column '{col}' has an infinite value; bin or clean it first")
            integral = bool(np.all(fin == np.round(fin)))
            if integral and nu <= max_integer_levels:
                attrs.append(_categorical(col, s, "integer category"))
            else:
                attrs.append(_binned(col, v, None, n_bins))
            continue
        if nu >= 0.9 * n_nonmiss and nu > 20:
            skipped[col] = f"looks like an identifier ({nu} distinct values in {n_nonmiss} rows)"
            continue
        if nu > max_levels:
            skipped[col] = f"{nu} distinct values, more than max_levels={max_levels}; bin or group it first"
            continue
        attrs.append(_categorical(col, s, "category", raw_levels))
    del explicit
    return attrs, skipped


def choose_columns(df: pd.DataFrame, attributes: Iterable[str] | None, *, reserved: Sequence[str]) -> tuple[list[str], bool]:
    """The attribute columns to encode: the user's list (checked) or every non-reserved column."""
    if attributes is None:
        return [c for c in df.columns if c not in reserved], False
    cols = list(attributes)
    if not cols:
        raise AuditInputError("the attribute list is empty; leave it out to use every other column")
    seen: set[str] = set()
    for c in cols:
        if c not in df.columns:
            raise AuditInputError(f"attribute column '{c}' is not in the table")
        if c in reserved:
            raise AuditInputError(f"attribute column '{c}' is the label, prediction or probability column")
        if c in seen:
            raise AuditInputError(f"attribute column '{c}' is listed twice")
        seen.add(c)
    order = {c: i for i, c in enumerate(df.columns)}
    return sorted(cols, key=order.__getitem__), True
