"""Open the output folder of a finished run (``fissure audit ... --out FOLDER``) read-only.

A table larger than the page's upload limit is audited from the command line (in chunks, from a
folder of Parquet files, or on a Dask cluster); its folder can then be browsed here without
recomputing: ``slices.csv`` and ``summary.json`` are read back into an ``AuditResult`` (no
engine call), so the findings, the ranked list and the fairness flags are shown by the same
views as a live audit.

The path is typed on a web page, so it is guarded: only the two named files are read, both must
be plain files directly inside the folder (no links leading elsewhere) under a size limit, the
summary must be Fissure's, and with ``FISSURE_RUNS_ROOT`` set the folder must lie under it.
Anything else is refused with a one-line reason.
"""
from __future__ import annotations

import json
import os
from dataclasses import dataclass

import numpy as np
import pandas as pd

FILES = ("slices.csv", "summary.json")
MAX_BYTES = {"slices.csv": 512 * 1024 * 1024, "summary.json": 64 * 1024 * 1024}
TEXT = ("slice", "attribute_1", "value_1", "attribute_2", "value_2", "attribute_3", "value_3", "metric", "test",
        "status", "status_reason", "explained_by", "echo_of")
FLAGS = ("worse_than_rest", "flagged", "finding")


class Refused(Exception):
    """The folder cannot be opened; the message says why, in the page's words."""


@dataclass(frozen=True)
class FinishedRun:
    result: object            # an AuditResult read back from the files (fairness left out)
    summary: dict
    folder: str
    fairness_flags: pd.DataFrame


def _inside(path: str, root: str) -> bool:
    return os.path.commonpath([path, root]) == root


def check_folder(typed: str, *, root: str | None = None) -> str:
    """The real path of the folder ``typed``, or :class:`Refused`."""
    text = (typed or "").strip()
    if not text:
        raise Refused("type the path of a folder.")
    if "\0" in text:
        raise Refused("the path holds a character that is not allowed.")
    folder = os.path.realpath(os.path.expanduser(text))
    root = root if root is not None else os.environ.get("FISSURE_RUNS_ROOT") or None
    if root is not None and not _inside(folder, os.path.realpath(root)):
        raise Refused("this server opens only folders under its runs folder (FISSURE_RUNS_ROOT).")
    if not os.path.isdir(folder):
        raise Refused(f"'{text}' is not a folder on the server.")
    for name in FILES:
        p = os.path.join(folder, name)
        if os.path.islink(p) or (os.path.exists(p) and os.path.dirname(os.path.realpath(p)) != folder):
            raise Refused(f"{name} in this folder is a link; only plain files written by a run are opened.")
        if not os.path.isfile(p):
            raise Refused(f"the folder has no {name}: it is not the output folder of a Fissure run "
                          "(one written by fissure audit --out FOLDER).")
        if os.path.getsize(p) > MAX_BYTES[name]:
            raise Refused(f"{name} is larger than {MAX_BYTES[name] // (1024 * 1024)} MB.")
    return folder


def _read_slices(path: str) -> pd.DataFrame:
    raw = pd.read_csv(path, dtype=str, keep_default_na=False, na_filter=False)
    if list(raw.columns[:2]) != ["slice", "order"] or "finding" not in raw.columns:
        raise Refused("slices.csv does not have the columns Fissure writes (it may come from an older version).")
    out = {}
    for c in raw.columns:
        s = raw[c]
        if c in TEXT:
            out[c] = s.astype(object)
        elif c in FLAGS:
            out[c] = s.str.lower().eq("true").to_numpy()
        else:
            out[c] = pd.to_numeric(s.where(s != "", np.nan), errors="coerce")
    df = pd.DataFrame(out)
    for c in ("order", "n"):
        df[c] = df[c].astype(int)
    return df


def open_run(typed: str, *, root: str | None = None) -> FinishedRun:
    """Read a run's ``slices.csv`` and ``summary.json`` into a result the page's views can show."""
    from audit.core.encoding import Encoding
    from audit.core.stream import SourceInfo
    from audit.errors import AuditInputError
    from audit.settings import SETTING_NAMES, make_config
    from audit.stats.result import AuditResult

    folder = check_folder(typed, root=root)
    try:
        with open(os.path.join(folder, "summary.json"), encoding="utf-8") as fh:
            summary = json.load(fh)
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise Refused(f"summary.json is not readable JSON ({type(exc).__name__}).") from None
    if not isinstance(summary, dict) or (summary.get("tool") or {}).get("name") != "fissure":
        raise Refused("summary.json was not written by Fissure.")
    try:
        slices = _read_slices(os.path.join(folder, "slices.csv"))
    except (UnicodeDecodeError, pd.errors.ParserError, ValueError) as exc:
        raise Refused(f"slices.csv cannot be read ({type(exc).__name__}).") from None
    try:
        conf = {k: v for k, v in (summary.get("configuration") or {}).items() if k in SETTING_NAMES}
        cfg = make_config(**conf)
        lab = summary["label_definition"]
        enc = Encoding.from_dict(summary["encoding"]) if summary.get("encoding") else None
        inp = summary.get("input") or {}
        find = (summary.get("method") or {}).get("findings") or {}
        result = AuditResult(
            slices=slices, overall=summary.get("overall") or {}, config=cfg,
            source=SourceInfo(inp.get("name"), inp.get("sha256"), inp.get("bytes")),
            n_rows=int(inp.get("rows") or 0), classes=tuple(str(c) for c in lab["classes"]),
            positive_inferred=bool(lab.get("positive_inferred")),
            prediction_source=str(lab.get("prediction_source")),
            attributes=tuple(enc.attributes) if enc is not None else (),
            skipped={s["column"]: s["reason"] for s in (summary.get("columns") or {}).get("skipped", [])},
            family_size=int((summary.get("slices") or {}).get("family_size") or 0),
            n_unlabelled=int(inp.get("unlabelled_rows_dropped") or 0),
            method={"explanations": {"selection_level": find.get("adjusted_level")}},
        )
    except (AuditInputError, KeyError, TypeError, ValueError) as exc:
        raise Refused(f"summary.json does not hold what Fissure writes ({exc}).") from None
    return FinishedRun(result, summary, folder, fairness_flags(summary))


def fairness_flags(summary: dict) -> pd.DataFrame:
    """The run's fairness flags (``summary.json``'s ``fairness.findings``) in the shape
    ``audit.faces.prose.finding_text`` reads."""
    cols = ["attribute", "group", "reference", "criterion", "value", "reference_value", "q_value", "higher",
            "disadvantaged", "direction", "meaning", "reading"]
    found = ((summary.get("fairness") or {}).get("findings")) or []
    rows = []
    for f in found:
        r = {c: f.get(c) for c in cols}
        for c in ("value", "reference_value", "q_value"):
            r[c] = float("nan") if r[c] is None else float(r[c])
        r["reading"] = "at a disadvantage" if f.get("disadvantaged") else "in the group's favour"
        rows.append(r)
    return pd.DataFrame(rows, columns=cols)


def fairness_groups(summary: dict) -> pd.DataFrame | None:
    groups = (summary.get("fairness") or {}).get("groups")
    return pd.DataFrame(groups) if groups else None
