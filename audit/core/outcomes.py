"""Step 1b: validate the outcome columns (label, prediction, probability) and encode them.

Everything a user can get wrong about the label, prediction and probability columns is
checked here, once, and reported as an :class:`AuditInputError` with one line naming the
column, value or row. Later steps may assume clean input.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from ..errors import AuditInputError
from .tally import small_histogram

# Label pairs whose positive member is obvious; matched on lower-cased text.
_KNOWN_PAIRS = [
    ("0", "1"), ("false", "true"), ("no", "yes"), ("n", "y"), ("f", "t"),
    ("negative", "positive"), ("neg", "pos"),
]


@dataclass(frozen=True)
class Outcomes:
    """Validated outcome columns, encoded for counting.

    ``y`` and ``yhat`` hold class indices (0 = negative, 1 = positive) as int8; ``score``
    is the probability of the positive class (float64) or ``None``. ``classes`` names the
    classes in index order, so a multi-class audit can extend the same layout.
    """

    y: np.ndarray
    yhat: np.ndarray
    score: np.ndarray | None
    classes: tuple[str, str]
    positive: str
    positive_inferred: bool
    prediction_source: str  # "column" or "threshold"


def _row(pos: int) -> str:
    return f"data row {pos + 1}"


def canonical(value: Any) -> str:
    """Text form used to compare class values across columns and with ``--positive``.

    Integral floats and booleans map to integer text, so ``1``, ``1.0`` and ``True`` agree.
    """
    if isinstance(value, (bool, np.bool_)):
        return str(int(value))
    if isinstance(value, (float, np.floating)) and float(value).is_integer():
        return str(int(value))
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    return str(value)


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


def _present(codes: np.ndarray, size: int) -> np.ndarray:
    """Which of ``size`` codes occur (missing, -1, is not counted)."""
    if codes.dtype == np.uint8:
        return small_histogram(codes, 256)[:size] > 0
    return np.bincount(codes[codes >= 0], minlength=size) > 0


def _is_text(codes: np.ndarray, text: np.ndarray, value: str) -> np.ndarray:
    """0/1 (int8) per row: does the row's text equal ``value``."""
    hit = np.array([t == value for t in text], dtype=np.int8)
    return np.take(hit, codes)


def check_columns(df: pd.DataFrame) -> None:
    dup = df.columns[df.columns.duplicated()]
    if len(dup):
        raise AuditInputError(f"the table has the column name '{dup[0]}' more than once")
    if len(df) == 0:
        raise AuditInputError("the table has no rows")


def _need(df: pd.DataFrame, col: str | None, role: str) -> None:
    if col is not None and col not in df.columns:
        shown = ", ".join(map(str, list(df.columns)[:8]))
        more = ", ..." if len(df.columns) > 8 else ""
        raise AuditInputError(f"{role} column '{col}' is not in the table (columns: {shown}{more})")


def _first_bad(mask: np.ndarray) -> int:
    return int(np.flatnonzero(mask)[0])


def _infer_positive(classes: list[str], column: str) -> str:
    low = sorted(c.lower() for c in classes)
    for neg, pos in _KNOWN_PAIRS:
        if low == sorted([neg, pos]):
            return next(c for c in classes if c.lower() == pos)
    raise AuditInputError(
        f"label column '{column}' has classes {classes[0]!r} and {classes[1]!r}; "
        "cannot tell which is positive — pass positive=... (CLI: --positive VALUE)"
    )


def read_outcomes(
    df: pd.DataFrame,
    *,
    label: str,
    pred: str | None = None,
    score: str | None = None,
    positive: Any = None,
    threshold: float = 0.5,
) -> Outcomes:
    """Validate the label, prediction and probability columns and encode them.

    If only ``score`` is given, the prediction is ``score >= threshold``. If both are given,
    counts use ``pred`` and the losses use ``score``.
    """
    check_columns(df)
    _need(df, label, "label")
    _need(df, pred, "prediction")
    _need(df, score, "probability")
    if pred is None and score is None:
        raise AuditInputError("give a prediction column (pred=..., --pred) or a probability column (score=..., --score)")
    for role, col in (("prediction", pred), ("probability", score)):
        if col is not None and col == label:
            raise AuditInputError(f"{role} column '{col}' is the label column; pick a different column")
    if not (isinstance(threshold, (int, float)) and 0.0 <= float(threshold) <= 1.0):
        raise AuditInputError(f"threshold must be a number in [0, 1]; received {threshold!r}")

    ys = df[label]
    missing = ys.isna().to_numpy()
    if missing.any():
        raise AuditInputError(f"label column '{label}' has a missing value at {_row(_first_bad(missing))}")
    ycodes, ytext_u = _canonical_codes(ys)
    present = _present(ycodes, len(ytext_u))
    classes = sorted(set(ytext_u[np.flatnonzero(present)].tolist()))
    if len(classes) != 2:
        shown = ", ".join(classes[:5]) + (", ..." if len(classes) > 5 else "")
        raise AuditInputError(
            f"label column '{label}' has {len(classes)} distinct value{'s' if len(classes) != 1 else ''} ({shown}); "
            "expected two (binary audit)"
        )
    if positive is None:
        pos = _infer_positive(classes, label)
        inferred = True
    else:
        pos = canonical(positive)
        inferred = False
        if pos not in classes:
            raise AuditInputError(
                f"positive class {positive!r} does not occur in label column '{label}' (classes: {classes[0]}, {classes[1]})"
            )
    neg = classes[0] if classes[1] == pos else classes[1]
    y = _is_text(ycodes, ytext_u, pos)

    p = None
    if score is not None:
        raw = df[score]
        if not pd.api.types.is_numeric_dtype(raw) or pd.api.types.is_bool_dtype(raw):
            conv = pd.to_numeric(raw, errors="coerce")
            bad = conv.isna().to_numpy() & raw.notna().to_numpy()
            if bad.any():
                i = _first_bad(bad)
                raise AuditInputError(
                    f"probability column '{score}' has a non-numeric value {str(raw.iloc[i])!r} at {_row(i)}"
                )
            raw = conv
        p = raw.to_numpy(dtype=float)
        lo, hi = float(p.min()), float(p.max())  # both NaN if any value is NaN
        if np.isnan(lo) or np.isnan(hi):
            raise AuditInputError(f"probability column '{score}' has a missing value at {_row(_first_bad(np.isnan(p)))}")
        if lo < 0 or hi > 1:
            out = (p < 0) | (p > 1)
            i = _first_bad(out)
            raise AuditInputError(
                f"probability column '{score}' has value {p[i]:g} at {_row(i)}; probabilities must lie in [0, 1]"
            )

    if pred is not None:
        ps = df[pred]
        pmiss = ps.isna().to_numpy()
        if pmiss.any():
            raise AuditInputError(f"prediction column '{pred}' has a missing value at {_row(_first_bad(pmiss))}")
        pcodes, ptext_u = _canonical_codes(ps)
        unknown = ~np.array([t in classes for t in ptext_u], dtype=bool)[pcodes]
        if unknown.any():
            i = _first_bad(unknown)
            raise AuditInputError(
                f"prediction column '{pred}' has value {ptext_u[pcodes[i]]!r} at {_row(i)}, which is not a class of "
                f"label column '{label}' ({classes[0]}, {classes[1]})"
            )
        yhat = _is_text(pcodes, ptext_u, pos)
        source = "column"
    else:
        yhat = (p >= float(threshold)).view(np.int8)
        source = "threshold"
    return Outcomes(y=y, yhat=yhat, score=p, classes=(neg, pos), positive=pos,
                    positive_inferred=inferred, prediction_source=source)
