"""Step 8: the files an audit leaves behind — ``slices.csv``, ``summary.json``, ``fairness.csv``,
``report.html``, ``fissure.toml`` — written so that nothing is ever half-written: every file is
built in memory first, written under a temporary name and renamed into place.

An output folder holds exactly one run. Each run leaves a small marker, ``.fissure-run``, listing
the files it wrote; the next run into the same folder removes the files of the previous run that
it did not write, and a non-empty folder without the marker is refused (it is not Fissure's).
:func:`save` writes the same files from Python as ``fissure audit`` does from the command line.
"""
from __future__ import annotations

import datetime as _dt
import io
import json
import os
import shutil
import tempfile
from typing import Any

import numpy as np
import pandas as pd

from ..errors import AuditInputError
from .prose import (CAUTION, fairness_findings, finding_groups, is_multiclass, limitations, method_notes,
                    prediction_words)

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
    """``fairness.csv`` as bytes: one row per protected group.

    Beside the engine's columns: ``favorable_outcome`` (the predicted class the selection rate
    counts) and ``flag_reasons`` (each flagged criterion with its direction, ``; ``-separated).
    """
    g = result.fairness.groups.copy()
    found = fairness_findings(result)
    reasons = {}
    for _, r in found.iterrows():
        reasons.setdefault((r["attribute"], r["group"]), []).append(f"{r['direction']} ({r['reading']})")
    g.insert(g.columns.get_loc("group") + 1, "favorable_outcome", str(result.fairness.favorable))
    g["flag_reasons"] = ["; ".join(reasons.get((a, x), [])) for a, x in zip(g["attribute"], g["group"])]
    return frame_csv(g)


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
    # Headers can carry a class name (precision_<class>): guarded like cells; ordinary names unchanged.
    df.columns = [neutralise(str(c)) for c in df.columns]
    buf = io.StringIO()
    df.to_csv(buf, index=False, na_rep="", lineterminator="\n", float_format="%.10g")
    return buf.getvalue().encode("utf-8")


def now_utc() -> str:
    """The run's timestamp (UTC, seconds), shared by every file of one run."""
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()


def summary(result, *, created: str | None = None, gate=None) -> dict[str, Any]:
    """The machine-readable summary (schema: ``audit/faces/summary.schema.json``).

    ``gate`` is the :class:`~audit.faces.gate.GateResult` of the run (default: no gate set).
    """
    from .gate import evaluate_gate

    gate = gate or evaluate_gate(result)
    cfg = result.config
    counts = result.status_counts()
    flagged = result.flagged()
    roles = "finding" in flagged.columns
    if roles:
        flagged = flagged.sort_values("flag_rank", kind="stable")
    top = [
        {"rank": int(r["rank"]), "slice": r["slice"], "n": int(r["n"]), "metric_value": _f(r["metric_value"]),
         "metric_low": _f(r["metric_low"]), "metric_high": _f(r["metric_high"]), "rest_value": _f(r["rest_value"]),
         "diff": _f(r["diff"]), "diff_low": _f(r["diff_low"]), "diff_high": _f(r["diff_high"]),
         "p_value": _f(r["p_value"]), "q_value": _f(r["q_value"]),
         **({"flag_rank": int(r["flag_rank"]), "diff_low_adj": _f(r["diff_low_adj"]),
             "diff_high_adj": _f(r["diff_high_adj"]), "severity_adj": _f(r["severity_adj"]),
             "finding": bool(r["finding"]), "explained_by": r["explained_by"] or None,
             "echo_of": r["echo_of"] or None} if roles else {})}
        for _, r in flagged.iterrows()
    ]
    findings = [
        {"finding_rank": int(r["finding_rank"]), "flag_rank": int(r["flag_rank"]), "rank": int(r["rank"]),
         "slice": r["slice"], "order": int(r["order"]), "n": int(r["n"]), "metric_value": _f(r["metric_value"]),
         "rest_value": _f(r["rest_value"]), "diff": _f(r["diff"]), "diff_low_adj": _f(r["diff_low_adj"]),
         "diff_high_adj": _f(r["diff_high_adj"]), "severity_adj": _f(r["severity_adj"]),
         "q_value": _f(r["q_value"]), "echoes": len(ech), "echo_slices": [str(x) for x in ech["slice"]]}
        for r, ech in finding_groups(result)
    ]
    tri = (result.method or {}).get("triples")
    out: dict[str, Any] = {
        "tool": {"name": "fissure", "version": result.version},
        "created": created or now_utc(),
        "model": {"name": cfg.model_name, "version": cfg.model_version, "intended_use": cfg.intended_use},
        "input": {"name": result.source.name, "sha256": result.source.sha256, "bytes": result.source.n_bytes,
                  "rows": result.n_rows, "unlabelled_rows_dropped": result.n_unlabelled},
        "columns": {
            "label": cfg.label, "prediction": cfg.pred, "probability": cfg.score,
            "attributes": [a.name for a in result.attributes],
            "skipped": [{"column": k, "reason": v} for k, v in result.skipped.items()],
        },
        "label_definition": _label_definition(result),
        "attributes": [{"name": a.name, "kind": a.kind, "levels": list(a.levels),
                        "bin_edges": None if a.edges is None else list(a.edges), "missing_rows": a.n_missing}
                       for a in result.attributes],
        # The fitted encoding, enough to apply the same slice layout again: audit.Encoding.from_dict(...)
        "encoding": result.encoding.to_dict() if result.encoding is not None else None,
        "configuration": cfg.as_dict(),
        "configuration_sha256": cfg.digest(),
        "method": method_notes(result),
        "overall": result.overall,
        "slices": {"total": int((result.slices["order"] > 0).sum()), "tested": counts.get("tested", 0),
                   "below_support": counts.get("below_support", 0), "no_rest": counts.get("no_rest", 0),
                   "undefined": counts.get("undefined", 0), "flagged": counts["flagged"],
                   "family_size": result.family_size,
                   "findings": len(findings), "echoes": counts["flagged"] - len(findings)},
        "findings": findings,
        "flagged": top,
        "triples": None if not tri else {k: int(tri[k]) for k in ("possible", "pruned", "kept", "listed", "tested",
                                                                 "flagged", "min_rows")},
        "limitations": [{"title": t, "text": x} for t, x in limitations(result)],
        "cautions": CAUTION,
        "environment": result.environment,
        "gate": gate.as_dict(),
    }
    if result.fairness is not None:
        fair = result.fairness.to_summary()
        found = fairness_findings(result)
        fair["findings"] = [
            {"attribute": r["attribute"], "group": r["group"], "reference": r["reference"],
             "criterion": r["criterion"], "value": _f(r["value"]), "reference_value": _f(r["reference_value"]),
             "q_value": _f(r["q_value"]), "higher": bool(r["higher"]), "disadvantaged": bool(r["disadvantaged"]),
             "direction": r["direction"], "meaning": r["meaning"]}
            for _, r in found.iterrows()]
        out["fairness"] = fair
    return out


def _label_definition(result) -> dict[str, Any]:
    cfg = result.config
    if is_multiclass(result):
        # No positive class with three or more classes; say how the prediction was made instead.
        return {"classes": [str(c) for c in result.classes], "positive": None, "positive_inferred": False,
                "prediction_source": result.prediction_source, "threshold": None,
                "prediction": prediction_words(result)}
    return {"classes": list(result.classes), "positive": result.classes[1],
            "positive_inferred": result.positive_inferred, "prediction_source": result.prediction_source,
            "threshold": cfg.threshold if result.prediction_source == "threshold" else None}


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
    staged = _stage(out_dir, files)
    for tmp, final in staged:
        os.replace(tmp, final)
    return [final for _, final in staged]


#: The file that marks a folder as holding one Fissure run, and lists that run's files.
MARKER = ".fissure-run"


def check_output_folder(out_dir: str) -> None:
    """Refuse an output folder Fissure may not write into (called before any computing).

    Accepted: a folder that does not exist yet, an empty folder, or a folder holding a previous
    Fissure run (it has the ``.fissure-run`` marker).
    """
    if not os.path.exists(out_dir):
        return
    if not os.path.isdir(out_dir):
        raise AuditInputError(f"output folder '{out_dir}' is a file; give a folder with --out")
    entries = os.listdir(out_dir)
    if entries and MARKER not in entries:
        raise AuditInputError(f"output folder '{out_dir}' is not empty and holds no Fissure run "
                              f"(no {MARKER} file); give a new or empty folder with --out")


def _previous_files(out_dir: str) -> list[str]:
    try:
        with open(os.path.join(out_dir, MARKER), encoding="utf-8") as fh:
            listed = json.load(fh).get("files", [])
    except (OSError, ValueError, AttributeError):
        return []
    # Only plain names inside the folder: a marker never makes us delete elsewhere.
    return [f for f in listed if isinstance(f, str) and f and os.path.basename(f) == f and f not in (".", "..")]


def write_run(out_dir: str, files: dict[str, bytes], *, created: str | None = None) -> list[str]:
    """Write one run's files into ``out_dir`` and leave exactly that run there.

    Every file goes through :func:`write_files` (temporary name, then rename); the marker
    ``.fissure-run`` is written last, then files of the previous run that this run did not
    write are removed. Returns the paths written (the marker not included).
    """
    check_output_folder(out_dir)
    previous = _previous_files(out_dir)
    marker = {"tool": "fissure", "created": created or now_utc(), "files": sorted(files)}
    everything = {**files, MARKER: (json.dumps(marker, indent=1) + "\n").encode("utf-8")}
    if not os.path.isdir(out_dir) or not os.listdir(out_dir):
        # A new (or empty) folder appears whole: written as a hidden sibling, then renamed.
        parent = os.path.dirname(os.path.abspath(out_dir))
        os.makedirs(parent, exist_ok=True)
        tmp = tempfile.mkdtemp(prefix=f".{os.path.basename(os.path.abspath(out_dir))}.", suffix=".part", dir=parent)
        try:
            write_files(tmp, everything)
            os.chmod(tmp, 0o777 & ~_umask())
            with _no_interrupt():
                os.rename(tmp, out_dir)  # replaces an empty folder atomically on POSIX
        except BaseException:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
        return [os.path.join(out_dir, name) for name in files]
    staged = _stage(out_dir, everything)
    with _no_interrupt():  # the previous run's files are replaced as one step
        for tmp, final in staged:
            os.replace(tmp, final)
        for name in previous:
            if name not in files:
                path = os.path.join(out_dir, name)
                if os.path.isfile(path):
                    os.unlink(path)
    return [final for _, final in staged if not final.endswith(MARKER)]


def _stage(out_dir: str, files: dict[str, bytes]) -> list[tuple[str, str]]:
    """Write every file under a temporary name in ``out_dir``; remove them all if anything fails."""
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
    return temps


class _no_interrupt:
    """Hold Ctrl-C (SIGINT) while files are renamed into place, then deliver it: a run is
    either all written or not written. Only the main thread can hold signals; elsewhere
    (the page's threads) it does nothing."""

    def __enter__(self):
        import signal
        import threading

        self.caught = None
        self.old = None
        if threading.current_thread() is threading.main_thread():
            self.old = signal.signal(signal.SIGINT, lambda s, f: setattr(self, "caught", (s, f)))
        return self

    def __exit__(self, *exc):
        import signal

        if self.old is not None:
            signal.signal(signal.SIGINT, self.old)
            if self.caught is not None:
                raise KeyboardInterrupt
        return False


def build_files(result, *, report: bool = True, pdf: bool = False, command: str | None = None,
                created: str | None = None, gate=None) -> dict[str, bytes]:
    """Every file of a run, in memory: name → bytes.

    Raises :class:`~audit.errors.AuditInputError` when ``pdf`` is asked for and Chromium cannot
    print it (nothing is written then).
    """
    from .gate import evaluate_gate

    created = created or now_utc()
    gate = gate or evaluate_gate(result)
    files = {"slices.csv": slices_csv(result), "summary.json": summary_json(result, created=created, gate=gate)}
    if result.fairness is not None:
        files["fairness.csv"] = fairness_csv(result)
    if report:
        from .report import build_html, html_to_pdf

        html = build_html(result, command=command, created=created, gate=gate)
        files["report.html"] = html.encode("utf-8")
        files["fissure.toml"] = result.config.to_toml().encode("utf-8")
        if pdf:
            data, why = html_to_pdf(html)
            if data is None:
                raise AuditInputError(why)
            files["report.pdf"] = data
    elif pdf:
        raise AuditInputError("a PDF needs the report; drop --no-report (report=False)")
    return files


def save(result, folder: str, *, report: bool = True, pdf: bool = False, gate=None,
         command: str | None = None) -> list[str]:
    """Write an audit's files into ``folder``, the same files ``fissure audit`` writes.

    Parameters
    ----------
    result : AuditResult
        What :func:`audit.run` returned.
    folder : str
        Output folder: new, empty, or holding a previous Fissure run (whose files this run
        replaces; files of that run not written again are removed).
    report : bool
        Also write ``report.html`` and ``fissure.toml`` (default True).
    pdf : bool
        Also write ``report.pdf`` through headless Chromium (Debian: ``apt-get install chromium``).
    gate : GateResult, optional
        From :func:`audit.faces.gate.evaluate_gate`; recorded in ``summary.json`` and the report.
    command : str, optional
        The command line to quote in the report's reproduction section.

    Returns
    -------
    list of str
        Paths of the files written.

    Raises
    ------
    AuditInputError
        The folder is not empty and holds no Fissure run, or ``pdf`` without a usable Chromium;
        nothing is written then.

    Examples
    --------
    >>> import pandas as pd, tempfile, os, audit
    >>> from audit.faces.export import save
    >>> df = pd.DataFrame({"y": [0, 1] * 50, "p": [0.2, 0.7] * 45 + [0.9, 0.1] * 5,
    ...                    "region": ["north"] * 60 + ["south"] * 40})
    >>> out = os.path.join(tempfile.mkdtemp(), "audit-out")
    >>> paths = save(audit.run(df, label="y", score="p"), out, report=False)
    >>> sorted(os.listdir(out))
    ['.fissure-run', 'slices.csv', 'summary.json']
    """
    check_output_folder(folder)
    if pdf and report:
        from .report import find_chromium

        if find_chromium() is None:
            raise AuditInputError(NO_CHROMIUM)
    created = now_utc()
    files = build_files(result, report=report, pdf=pdf, command=command, created=created, gate=gate)
    return write_run(folder, files, created=created)


NO_CHROMIUM = ("--pdf needs a Chromium browser and none was found (Debian: apt-get install chromium; "
               "or set FISSURE_CHROMIUM to its path)")
