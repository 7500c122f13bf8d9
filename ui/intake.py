"""The page's intake: read an upload once, profile its columns, guess what they are.

Reading: CSV-like uploads go through pyarrow's multi-threaded reader with text columns
dictionary-encoded (pandas categoricals, which the engine encodes without factorising
strings); anything unusual (another format, a parse problem, duplicate or single columns,
dates) goes to ``audit.core.read.read_table`` so its messages and rules apply. The table,
its profile and its digest are kept together in :data:`ui.memo.TABLES`, keyed on the
file's SHA-256, so one upload is parsed once however many times the page reruns.

Guesses: the label from its name (and from the probability column's name, ``p_churn`` ↔
``churned``) before its position; predicted-label columns are recognised by the engine's rule
and never preselected as attributes (nor sliced by an audit run without ``attributes``);
attributes the engine would skip are not preselected and their reasons are listed.
"""
from __future__ import annotations

import hashlib
import io
import os
import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from audit.core.encoding import is_pred_like  # the engine's rule: named like a predicted label
from audit.core.read import SourceInfo, read_table
from ui.memo import TABLES

# Same missing-value spellings as pandas' CSV reader, so both paths read the same table.
NA_TEXT = ["", "#N/A", "#N/A N/A", "#NA", "-1.#IND", "-1.#QNAN", "-NaN", "-nan", "1.#IND", "1.#QNAN", "<NA>",
           "N/A", "NA", "NULL", "NaN", "None", "n/a", "nan", "null"]
FAST_EXTENSIONS = (".csv", ".tsv", ".txt", "")
DICT_LIMIT = 1000        # text columns with more distinct values stay plain text
MAX_LEVELS = 100         # the engine's default limit for categorical attributes (AuditConfig.max_levels)
MAX_COLUMNS = 10_000     # the engine reader's limit


@dataclass(frozen=True)
class Column:
    """What the page knows about one column without running the audit."""

    name: str
    numeric: bool
    distinct: int | None          # None: more than DICT_LIMIT (not counted)
    n_missing: int
    probability: bool             # float, not just 0/1, every value in [0, 1]
    values: tuple[str, ...] = ()  # the values of a column with at most 20 of them, as text


@dataclass(frozen=True)
class Table:
    df: pd.DataFrame
    source: SourceInfo
    columns: dict[str, Column] = field(repr=False)
    reader: str = "pyarrow"
    seconds: dict[str, float] = field(default_factory=dict, compare=False)
    #: The engine's column profiles (``audit.core.encoding.ColumnProfile``), made when first needed.
    profiles: dict = field(default_factory=dict, compare=False, repr=False)

    @property
    def n_rows(self) -> int:
        return len(self.df)


# ----------------------------------------------------------------------------- reading
def digest(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _fast_csv(data: bytes, name: str) -> pd.DataFrame | None:
    """pyarrow read of a plain CSV/TSV, or None when the engine's reader should decide."""
    import pyarrow as pa
    import pyarrow.csv as pc

    ext = os.path.splitext(name)[1].lower()
    if ext not in FAST_EXTENSIONS:
        return None
    body = memoryview(data)[3:] if data[:3] == b"\xef\xbb\xbf" else memoryview(data)
    delimiter = "\t" if ext == ".tsv" else ","
    if _header_delimiter(bytes(body[:65536])) != delimiter or b"\0" in data:
        return None  # another delimiter, or binary content: the engine's reader decides and explains
    parse = pc.ParseOptions(delimiter=delimiter)
    convert = dict(null_values=NA_TEXT, strings_can_be_null=True, true_values=["True", "TRUE", "true"],
                   false_values=["False", "FALSE", "false"], auto_dict_encode=True,
                   auto_dict_max_cardinality=DICT_LIMIT)
    try:
        table = pc.read_csv(pa.py_buffer(body), parse_options=parse, convert_options=pc.ConvertOptions(**convert))
    except (pa.ArrowInvalid, pa.ArrowTypeError, UnicodeDecodeError, ValueError):
        return None
    names = table.column_names
    if not 2 <= len(names) <= MAX_COLUMNS or len(set(names)) != len(names) or table.num_rows == 0:
        return None
    plain = (pa.types.is_integer, pa.types.is_floating, pa.types.is_boolean, pa.types.is_string,
             pa.types.is_large_string, pa.types.is_dictionary)
    odd = {}
    for f in table.schema:
        if pa.types.is_null(f.type):
            odd[f.name] = pa.float64()          # pandas: an all-missing column is float NaN
        elif not any(test(f.type) for test in plain):
            odd[f.name] = pa.string()           # dates and times stay text, as pandas reads them
    if odd:
        try:
            table = pc.read_csv(pa.py_buffer(body), parse_options=parse,
                                convert_options=pc.ConvertOptions(column_types=odd, **convert))
        except (pa.ArrowInvalid, pa.ArrowTypeError, ValueError):
            return None
    return table.to_pandas()


def _header_delimiter(head: bytes) -> str | None:
    """The most frequent of , ; tab | outside quotes on the header line (None: not clear-cut)."""
    line = head.split(b"\n", 1)[0].decode("utf-8", errors="replace")
    line = re.sub(r'"[^"]*"', "", line)
    counts = {d: line.count(d) for d in (",", ";", "\t", "|")}
    best = max(counts.values())
    winners = [d for d, c in counts.items() if c == best]
    return winners[0] if best and len(winners) == 1 else None


def _profile(df: pd.DataFrame, *, fast: bool) -> dict[str, Column]:
    out = {}
    for c in df.columns:
        s = df[c]
        numeric = pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s)
        n_missing = int(s.isna().sum())
        if isinstance(s.dtype, pd.CategoricalDtype):
            used = np.bincount(s.cat.codes.to_numpy()[s.cat.codes.to_numpy() >= 0], minlength=len(s.cat.categories))
            distinct = int((used > 0).sum())
            vals = [str(v) for v, u in zip(s.cat.categories, used) if u] if distinct <= 20 else []
        elif fast and not numeric and pd.api.types.is_string_dtype(s):
            # On the fast path a text column stays plain text only with more than DICT_LIMIT values.
            distinct, vals = None, []
        else:
            distinct = int(s.nunique(dropna=True))
            vals = [_text(v) for v in s.dropna().unique()[:21]] if distinct <= 20 else []
        prob = False
        if pd.api.types.is_float_dtype(s) and (distinct is None or distinct > 2) and n_missing < len(s):
            lo, hi = s.min(), s.max()
            prob = bool(0.0 <= lo and hi <= 1.0)
        out[c] = Column(c, numeric, distinct, n_missing, prob, tuple(sorted(vals, key=_natural)))
    return out


def _text(v) -> str:
    if isinstance(v, (float, np.floating)) and float(v).is_integer():
        return str(int(v))
    return str(v)


def _natural(v: str):
    try:
        return (0, float(v), v)
    except ValueError:
        return (1, 0.0, v)


def read_upload(data: bytes, name: str, sha256: str | None = None) -> Table:
    """The parsed table for an upload, from the cache when this file was read before."""
    sha = sha256 or digest(data)
    return TABLES.get_or_make(("table", sha, name), lambda: _read(data, name, sha))


def _read(data: bytes, name: str, sha: str) -> Table:
    import time

    t0 = time.perf_counter()
    df = _fast_csv(data, name) if data.strip() else None
    reader = "pyarrow"
    if df is None:
        df, _ = read_table(data, name=name)  # the engine's reader: its rules and messages
        reader = "pandas"
    t1 = time.perf_counter()
    cols = _profile(df, fast=reader == "pyarrow")
    t2 = time.perf_counter()
    return Table(df=df, source=SourceInfo(name=name, sha256=sha, n_bytes=len(data)), columns=cols, reader=reader,
                 seconds={"parse": t1 - t0, "profile": t2 - t1})


# ----------------------------------------------------------------------------- guesses
LABEL_WORDS = ("label", "target", "outcome", "actual", "truth", "true", "y", "y_true", "ytrue", "class", "default",
               "defaulted", "status", "churn", "churned", "delinquent", "fraud", "response", "event", "bad")
PRED_WORDS = ("pred", "yhat", "y_hat", "prediction", "predicted", "decision", "forecast")
SCORE_WORDS = ("p_", "prob", "score", "proba", "likelihood", "risk")
OUTCOME_VALUES = ({"0", "1"}, {"no", "yes"}, {"false", "true"}, {"n", "y"}, {"-1", "1"})


def _norm(name: str) -> str:
    return re.sub(r"[^a-z0-9]+", "_", str(name).lower()).strip("_")


def _stem(score_name: str) -> str:
    """``p_churn`` → ``churn``; ``prob_default`` → ``default``; ``churn_probability`` → ``churn``."""
    s = _norm(score_name)
    for pre in ("predicted_probability_", "pred_prob_", "probability_", "proba_", "prob_", "score_", "pred_", "p_",
                "pr_"):
        if s.startswith(pre) and len(s) > len(pre):
            s = s[len(pre):]
            break
    for suf in ("_probability", "_proba", "_prob", "_score", "_pred", "_p", "_pr"):
        if s.endswith(suf) and len(s) > len(suf):
            s = s[: -len(suf)]
            break
    return s


def _names_match(col: str, stem: str) -> bool:
    c = _norm(col)
    if not stem or not c:
        return False
    short, long_ = sorted((c, stem), key=len)
    return c == stem or (len(short) >= 3 and long_.startswith(short) and len(long_) - len(short) <= 3)


def binary_columns(table: Table) -> list[str]:
    return [c for c, info in table.columns.items() if info.distinct == 2]


def _score_named(c: str) -> bool:
    """Whether a column's name holds a word of :data:`SCORE_WORDS` (``p_deny``, ``churn_prob``)."""
    n = _norm(c)
    return any(w in n for w in SCORE_WORDS)


def guess_score(table: Table, exclude: tuple[str, ...] = ()) -> str | None:
    cands = [c for c, info in table.columns.items() if info.probability and c not in exclude]
    named = [c for c in cands if _score_named(c) or _norm(c).startswith("p")]
    return (named or cands or [None])[0]


def passed_over_scores(table: Table) -> dict[str, str]:
    """Columns named like a probability that are not guessed as one, each with why: the first
    value outside [0, 1] (or a missing one), with its data row as the engine would name it."""
    out = {}
    for c, info in table.columns.items():
        if info.probability or not info.numeric or not _score_named(c):
            continue
        v = pd.to_numeric(table.df[c], errors="coerce").to_numpy(dtype=float)
        bad = np.flatnonzero(~((v >= 0) & (v <= 1)))
        if not len(bad):
            continue
        i = int(bad[0])
        why = "a missing value" if np.isnan(v[i]) else f"value {v[i]:g}"
        out[c] = f"{why} at data row {i + 1}, outside [0, 1]"
    return out


def guess_label(table: Table, score: str | None = None) -> str:
    """The true-label column: named after the probability column, then by name, then by its values,
    then the first two-valued column."""
    binary = [c for c in binary_columns(table) if not is_pred_like(c) and c != score]
    if score is None:
        score = guess_score(table)
    if score is not None:
        stem = _stem(score)
        for c in binary:
            if _names_match(c, stem):
                return c
    multi = classed_label(table, exclude=(score,) if score else ())
    if multi is not None:
        return multi
    for c in binary:
        if _norm(c) in LABEL_WORDS or any(_norm(c).startswith(w + "_") or _norm(c).endswith("_" + w)
                                          for w in LABEL_WORDS if len(w) > 2):
            return c
    for c in binary:
        if {v.lower() for v in table.columns[c].values} in OUTCOME_VALUES:
            return c
    if binary:
        return binary[0]
    return next(iter(table.columns))


MAX_PAGE_CLASSES = 20   # the page offers one probability column per class up to this many classes


def label_classes(table: Table, label: str) -> list[str]:
    """The label's classes as text (empty when the column has more than 20 values)."""
    info = table.columns.get(label)
    if info is None or info.distinct is None or info.distinct > MAX_PAGE_CLASSES:
        return []
    return label_values(table, label)


def class_score_columns(table: Table, classes: list[str], exclude: tuple[str, ...] = ()) -> dict[str, str | None]:
    """One probability column per class, guessed from the names (``p_refer`` for class ``refer``)."""
    out: dict[str, str | None] = {}
    probs = [c for c, info in table.columns.items() if info.probability and c not in exclude]
    for k in classes:
        hit = [c for c in probs if _stem(c) == _norm(k) and c not in out.values()]
        out[k] = hit[0] if hit else None
    return out


def classed_label(table: Table, exclude: tuple[str, ...] = ()) -> str | None:
    """A column with three or more values for at least two of which there is a probability column
    named after the value (``desk`` with ``p_approve``, ``p_refer``)."""
    for c, info in table.columns.items():
        if c in exclude or info.distinct is None or not 3 <= info.distinct <= MAX_PAGE_CLASSES or info.probability:
            continue
        found = class_score_columns(table, list(info.values), exclude=(c,))
        if sum(v is not None for v in found.values()) >= 2:
            return c
    return None


def guess_pred(table: Table, label: str, score: str | None) -> str | None:
    """A predicted-label column, offered only when there is no probability column."""
    cands = pred_like_columns(table, label)
    return cands[0] if cands and score is None else None


def pred_like_columns(table: Table, label: str) -> list[str]:
    """Columns that look like a predicted label of ``label``: the engine's one rule
    (``audit.core.encoding.looks_like_prediction``), which also leaves them out of ``audit.run``'s
    default attributes, so the page's preselection and a command-line audit without
    ``--attributes`` slice by the same columns."""
    from audit.core.encoding import looks_like_prediction

    named = [c for c in table.columns if c != label and is_pred_like(c)]
    if not named:
        return []
    classes = _distinct_texts(table, label) if label in table.columns else []
    out = []
    for c in named:
        info = table.columns[c]
        if info.distinct is not None and info.distinct > max(2, len(classes)):
            continue  # more values than the label has classes (known without looking at them)
        if looks_like_prediction(c, _distinct_texts(table, c), classes):
            out.append(c)
    return out


def _distinct_texts(table: Table, c: str) -> list[str]:
    """Every distinct non-missing value of column ``c`` as text (the profile's, when it lists them all)."""
    info = table.columns[c]
    if info.values and info.distinct is not None and len(info.values) == info.distinct:
        return list(info.values)
    return [_text(v) for v in table.df[c].dropna().unique()]


def is_number_column(table: Table, c: str) -> bool:
    """Whether column ``c`` holds numbers (the columns whose coding the page lets a user choose)."""
    s = table.df[c]
    return pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s)


def screen(table: Table, candidates: list[str], *, label: str | None = None, bins: int = 5,
           max_levels: int = MAX_LEVELS, categorical=(), numeric=()) -> tuple[list[str], dict[str, str]]:
    """Split attribute candidates into those the engine will slice and those it skips (with why).

    The decision is the engine's own: each column is profiled by
    ``audit.core.encoding.profile_column`` and the encoding fitted by ``fit_encoding`` with the
    page's settings, exactly as ``audit.run`` does in its first pass, so the page's preselection
    and the audit cannot drift apart. A column that looks like a predicted label is not preselected:
    the engine's rule too (``audit.core.encoding.looks_like_prediction``), which leaves such a column
    out of the default attributes of an audit run without ``attributes``; the page words its reason
    for the page. Profiles are kept with the table (one per column).
    """
    from audit.core.encoding import fit_encoding, profile_column
    from audit.errors import AuditInputError

    keep, skip = [], {}
    pred_like = set(pred_like_columns(table, label)) if label is not None else set()
    rest = []
    for c in candidates:
        if c in pred_like:
            skip[c] = "looks like a predicted label; choose it as the predicted label column instead"
        else:
            rest.append(c)
    profiles = table.profiles
    cat = set(categorical) & set(rest)
    num = set(numeric) & set(rest) - cat
    for c in rest:
        if (c, c in cat) not in profiles:  # a column of codes is profiled as text, as the engine does
            profiles[(c, c in cat)] = (profile_column(table.df[c], c, as_text=True) if c in cat
                                       else _profile_for_screen(table, c, profile_column))
    chosen = [profiles[(c, c in cat)] for c in rest]
    try:
        encs = [fit_encoding(chosen, n_bins=bins, max_levels=max_levels, categorical=cat, numeric=num)]
    except AuditInputError:  # one column cannot be encoded: fit one by one to say which and why
        encs = []
        for p in chosen:
            try:
                encs.append(fit_encoding([p], n_bins=bins, max_levels=max_levels, categorical=cat & {p.name},
                                         numeric=num & {p.name}))
            except AuditInputError as exc:
                skip[p.name] = str(exc).split(";")[0]
    fitted = {a.name for e in encs for a in e.attributes}
    reasons = {k: v for e in encs for k, v in e.skipped.items()}
    for c in rest:
        if c in fitted:
            keep.append(c)
        elif c in reasons:
            skip[c] = reasons[c]
    return keep, skip


class _Distinct:
    """Stands for the per-value row counts of a text column that has more than ``DICT_LIMIT``
    values: ``fit_encoding`` reads only how many values have rows, and such a column is skipped
    whatever its values are (too many levels, or an identifier)."""

    def __init__(self, n: int):
        self.n = n

    def values(self):
        import itertools

        return itertools.repeat(1, self.n)


def _profile_for_screen(table: Table, c: str, profile_column):
    """The engine's profile of column ``c``; for a plain text column the fast reader left with
    more than ``DICT_LIMIT`` values (an identifier, typically), the same profile built from an
    exact distinct count instead of a dict of every value (1.4 s for a million ids, 0.1 s)."""
    from audit.core.encoding import TEXT_CAP, ColumnProfile

    info = table.columns.get(c)
    s = table.df[c]
    if info is not None and info.distinct is None and not info.numeric and pd.api.types.is_string_dtype(s) \
            and not isinstance(s.dtype, pd.CategoricalDtype):
        nu = int(s.nunique(dropna=True))
        if nu > TEXT_CAP:  # too many to keep: the exact count, worded as the engine words it
            return ColumnProfile(c, "text", len(s), info.n_missing, counts=None, distinct_seen=nu, distinct_sum=nu)
        return ColumnProfile(c, "text", len(s), info.n_missing, counts=_Distinct(nu))
    return profile_column(s, c)


def label_values(table: Table, label: str) -> list[str]:
    info = table.columns.get(label)
    if info is None:
        return []
    if info.values:
        return list(info.values)
    s = table.df[label].dropna()
    return sorted({_text(v) for v in s.unique()[:20]}, key=_natural)


__all__ = ["Column", "Table", "read_upload", "digest", "guess_label", "guess_score", "guess_pred", "screen",
           "pred_like_columns", "label_values", "is_pred_like", "binary_columns", "label_classes",
           "class_score_columns", "classed_label"]
