"""Step 8: the files an audit leaves behind — ``slices.csv`` and ``summary.json`` — written
so that nothing is ever half-written: every file is built in memory first, written under a
temporary name and renamed into place.
"""
from __future__ import annotations

import datetime as _dt
import io
import json
import os
import tempfile
from typing import Any

import numpy as np
import pandas as pd

from .prose import CAUTION, limitations, method_notes

_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def neutralise(value: Any) -> Any:
    """Make a text cell safe to open in a spreadsheet (OWASP CSV injection guidance).

    Text beginning with ``= + - @``, tab or carriage return gets a leading apostrophe,
    unless the whole cell is a plain number (so ``-0.25`` stays a number).

    >>> neutralise("=HYPERLINK(1)"), neutralise("-0.25"), neutralise("north")
    ("'=HYPERLINK(1)", '-0.25', 'north')
    """
    if isinstance(value, str) and value.startswith(_FORMULA_START) and not _is_number(value):
        return "'" + value
    return value


def slices_csv(result) -> bytes:
    """``slices.csv`` as bytes: one row per slice."""
    return frame_csv(result.slices)


def fairness_csv(result) -> bytes:
    """``fairness.csv`` as bytes: one row per protected group."""
    return frame_csv(result.fairness.groups)


def frame_csv(frame: pd.DataFrame) -> bytes:
    """A table as CSV bytes the way every Fissure export writes it: booleans as true/false, NaN as
    empty, text cells neutralised against spreadsheet formulas, floats to 10 significant digits."""
    df = frame.copy()
    for col in df.columns:
        s = df[col]
        if pd.api.types.is_bool_dtype(s):
            df[col] = np.where(s.to_numpy(), "true", "false")
        elif pd.api.types.is_object_dtype(s) or pd.api.types.is_string_dtype(s):
            df[col] = [neutralise(x) for x in s.tolist()]
    buf = io.StringIO()
    df.to_csv(buf, index=False, na_rep="", lineterminator="\n", float_format="%.10g")
    return buf.getvalue().encode("utf-8")


def summary(result, *, created: str | None = None) -> dict[str, Any]:
    """The machine-readable summary (schema: ``audit/summary.schema.json``)."""
    cfg = result.config
    counts = result.status_counts()
    flagged = result.flagged()
    top = [
        {"rank": int(r["rank"]), "slice": r["slice"], "n": int(r["n"]), "metric_value": _f(r["metric_value"]),
         "metric_low": _f(r["metric_low"]), "metric_high": _f(r["metric_high"]), "rest_value": _f(r["rest_value"]),
         "diff": _f(r["diff"]), "diff_low": _f(r["diff_low"]), "diff_high": _f(r["diff_high"]),
         "p_value": _f(r["p_value"]), "q_value": _f(r["q_value"])}
        for _, r in flagged.iterrows()
    ]
    out: dict[str, Any] = {
        "tool": {"name": "fissure", "version": result.version},
        "created": created or _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat(),
        "model": {"name": cfg.model_name, "version": cfg.model_version, "intended_use": cfg.intended_use},
        "input": {"name": result.source.name, "sha256": result.source.sha256, "bytes": result.source.n_bytes,
                  "rows": result.n_rows},
        "columns": {
            "label": cfg.label, "prediction": cfg.pred, "probability": cfg.score,
            "attributes": [a.name for a in result.attributes],
            "skipped": [{"column": k, "reason": v} for k, v in result.skipped.items()],
        },
        "label_definition": {"classes": list(result.classes), "positive": result.classes[1],
                             "positive_inferred": result.positive_inferred,
                             "prediction_source": result.prediction_source,
                             "threshold": cfg.threshold if result.prediction_source == "threshold" else None},
        "attributes": [{"name": a.name, "kind": a.kind, "levels": list(a.levels),
                        "bin_edges": None if a.edges is None else list(a.edges), "missing_rows": a.n_missing}
                       for a in result.attributes],
        "configuration": cfg.as_dict(),
        "configuration_sha256": cfg.digest(),
        "method": method_notes(result),
        "overall": result.overall,
        "slices": {"total": int((result.slices["order"] > 0).sum()), "tested": counts.get("tested", 0),
                   "below_support": counts.get("below_support", 0), "no_rest": counts.get("no_rest", 0),
                   "undefined": counts.get("undefined", 0), "flagged": counts["flagged"],
                   "family_size": result.family_size},
        "flagged": top,
        "limitations": [{"title": t, "text": x} for t, x in limitations(result)],
        "cautions": CAUTION,
        "environment": result.environment,
    }
    if result.fairness is not None:
        out["fairness"] = result.fairness.to_summary()
    return out


def _f(x) -> float | None:
    x = float(x)
    return None if np.isnan(x) else x


def summary_json(result, **kw) -> bytes:
    return (json.dumps(summary(result, **kw), indent=2, ensure_ascii=False, allow_nan=False) + "\n").encode("utf-8")


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_files(out_dir: str, files: dict[str, bytes]) -> list[str]:
    """Write every file under a temporary name in ``out_dir``, then rename them into place."""
    os.makedirs(out_dir, exist_ok=True)
    temps: list[tuple[str, str]] = []
    try:
        for name, data in files.items():
            fd, tmp = tempfile.mkstemp(prefix=f".{name}.", suffix=".part", dir=out_dir)
            temps.append((tmp, os.path.join(out_dir, name)))
            with os.fdopen(fd, "wb") as fh:
                fh.write(data)
            os.chmod(tmp, 0o666 & ~_umask())
    except BaseException:
        for tmp, _ in temps:
            if os.path.exists(tmp):
                os.unlink(tmp)
        raise
    for tmp, final in temps:
        os.replace(tmp, final)
    return [final for _, final in temps]
