"""Command line: ``fissure audit DATA --label COL ...`` (also ``python -m audit audit ...``).

This module only parses arguments, calls the engine and writes its result; every number
comes from ``audit.run``. Bad input is one line on stderr and exit code 2; with the gate
option, exit code 1 means the gate stopped the release.
"""
from __future__ import annotations

import argparse
import os
import shlex
import sys
from dataclasses import fields
from typing import Any, Sequence

from .. import __version__
from ..errors import AuditInputError
from ..settings import AuditConfig, load_toml
from ..stats.methods import CORRECTION_METHODS as CORRECTIONS
from ..stats.methods import INTERVAL_METHODS as INTERVALS
from ..stats.methods import METRICS
from .gate import GATE_SCOPES

EXIT_OK, EXIT_GATE, EXIT_INPUT = 0, 1, 2


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # one line, exit 2, like every other input error
        self.exit(EXIT_INPUT, f"fissure: {message}\n")


def _csv_list(text: str) -> list[str]:
    items = [t.strip() for t in text.split(",")]
    if any(not t for t in items):
        raise argparse.ArgumentTypeError(f"'{text}' has an empty name; separate names with commas")
    return items


def _edges(text: str) -> tuple[str, list[float]]:
    col, sep, rest = text.rpartition("=")
    if not sep or not col:
        raise argparse.ArgumentTypeError(f"'{text}' should look like COLUMN=e0,e1,e2")
    try:
        return col, [float(x) for x in rest.split(",")]
    except ValueError:
        raise argparse.ArgumentTypeError(f"bin edges in '{text}' must be numbers") from None


def _metric(text: str) -> str:
    from ..stats.methods import CLASS_METRICS, MULTICLASS_ONLY

    base, sep, cls = text.partition(":")
    if text in METRICS or text in MULTICLASS_ONLY or (sep and base in CLASS_METRICS and cls):
        return text
    raise argparse.ArgumentTypeError(f"invalid choice: '{text}' (choose from {', '.join(METRICS)}, macro_f1, "
                                     "recall:CLASS, precision:CLASS, f1:CLASS)")


def _score(text: str):
    """One column (two classes), or CLASS=COLUMN,... with one probability column per class."""
    if "=" not in text:
        return text
    out = {}
    for part in text.split(","):
        cls, sep, col = part.partition("=")
        if not sep or not cls or not col:
            raise argparse.ArgumentTypeError(f"'{text}' should look like CLASS=COLUMN,CLASS=COLUMN,...")
        out[cls] = col
    return out


def _classes(text: str):
    """One class, or several separated by commas (a favourable set)."""
    items = _csv_list(text)
    return items[0] if len(items) == 1 else items


def _pair(text: str) -> tuple[str, str]:
    col, sep, val = text.partition("=")
    if not sep or not col:
        raise argparse.ArgumentTypeError(f"'{text}' should look like ATTRIBUTE=GROUP")
    return col, val


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="fissure", description="Audit a classifier slice by slice.")
    p.add_argument("--version", action="version", version=f"fissure {__version__}")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)
    a = sub.add_parser("audit", help="audit a predictions table (CSV, TSV, Parquet or Excel)",
                       description="Score every attribute value and every pair of values, test each slice "
                                   "against the rest, correct for the number of tests and rank worst first.")
    a.add_argument("data", help="predictions table: a .csv, .tsv or .txt file (also compressed: .gz, .bz2, .xz, "
                                "or .zip holding one file), .parquet or .pq, .xlsx (first sheet), a folder of "
                                "Parquet files, or a quoted glob of CSV files (\"scores-*.csv\")")
    g = a.add_argument_group("columns")
    g.add_argument("--label", help="true label column")
    g.add_argument("--pred", help="predicted label column")
    g.add_argument("--score", type=_score, metavar="COL | CLASS=COL,...",
                   help="predicted probability of the positive class; with three or more classes, one column per "
                        "class: approve=p_approve,refer=p_refer,decline=p_decline")
    g.add_argument("--positive", help="the positive class (inferred for 0/1, false/true, no/yes)")
    g.add_argument("--threshold", type=float, help="with --score only: predict positive when score >= T (0.5)")
    g.add_argument("--attributes", type=_csv_list,
                   help="comma-separated attribute columns (default: all others except identifiers and columns that "
                        "look like a predicted label, e.g. pred_deny)")
    g.add_argument("--categorical", type=_csv_list, metavar="COL,...",
                   help="numeric columns to slice as categories (branch, state or product codes)")
    g.add_argument("--numeric", type=_csv_list, metavar="COL,...",
                   help="numeric columns to bin even when they have few distinct values")
    g.add_argument("--drop-unlabelled", action="store_true", default=None,
                   help="leave out rows with a missing label (counted and reported) instead of stopping")
    g.add_argument("--bins", type=int, help="quantile bins per numeric attribute (5)")
    g.add_argument("--bin-edges", type=_edges, action="append", metavar="COL=E0,E1,...",
                   help="explicit bin edges for one numeric column (repeatable)")
    s = a.add_argument_group("statistics")
    s.add_argument("--metric", type=_metric, metavar="NAME",
                   help="audited metric (error_rate): " + ", ".join(METRICS) + "; with three or more classes also "
                        "macro_f1 and recall:CLASS, precision:CLASS, f1:CLASS")
    s.add_argument("--min-support", type=int, help="fewest rows for a slice to be tested (30)")
    s.add_argument("--min-metric-support", type=int,
                   help="fewest rows in the metric's denominator, e.g. actual positives for recall (10)")
    s.add_argument("--alpha", type=float, help="flag when the adjusted p-value <= ALPHA (0.05)")
    s.add_argument("--correction", choices=list(CORRECTIONS),
                   help="multiple-testing correction: " + "; ".join(f"{k}: {v.title}" for k, v in CORRECTIONS.items()))
    s.add_argument("--interval", choices=list(INTERVALS), help="interval for rates (wilson)")
    s.add_argument("--level", type=float, help="confidence level of intervals (0.95)")
    s.add_argument("--max-order", type=int, choices=[1, 2, 3],
                   help="1: single attributes; 2: pairs too (2); 3: triples of values too, under pairs with enough rows")
    s.add_argument("--auc-max-order", type=int, choices=[-1, 0, 1, 2],
                   help="highest slice order with ROC AUC (1; -1 for none)")
    f = a.add_argument_group("fairness")
    f.add_argument("--protected", type=_csv_list, help="comma-separated protected attributes")
    f.add_argument("--favorable", type=_classes, help="the predicted class that is favourable to the person "
                                       "(required with --protected, e.g. 0 for a delinquency model)")
    f.add_argument("--reference", type=_pair, action="append", metavar="ATTR=GROUP",
                   help="reference group for one protected attribute (default: highest selection rate)")
    f.add_argument("--min-group-share", type=float, help="groups below this share are left out of ratios (0.02)")
    r = a.add_argument_group("report")
    r.add_argument("--model-name", help="model name for the report")
    r.add_argument("--model-version", help="model version for the report")
    r.add_argument("--intended-use", help="intended use of the model, for the report")
    r.add_argument("--no-report", action="store_true", help="write slices.csv and summary.json only")
    r.add_argument("--pdf", action="store_true",
                   help="also write report.pdf (needs Chromium: Debian's chromium, or FISSURE_CHROMIUM=PATH)")
    o = a.add_argument_group("output")
    o.add_argument("--config", help="TOML settings file (command-line options override it)")
    o.add_argument("--encoding", metavar="NAME",
                   help="text encoding of a CSV file, e.g. cp1252 or latin-1 (default: UTF-8, strictly)")
    o.add_argument("--chunk-rows", type=int, metavar="N",
                   help="read a CSV/TSV or Parquet file N rows at a time (memory bounded by the chunk, not the "
                        "file); a folder of Parquet files or a glob of CSV files is always read in chunks")
    o.add_argument("--engine", choices=["local", "dask"], default="local",
                   help="where to compute: in this process (local), or on a Dask cluster whose workers read their "
                        "own parts of the file and send back tallies, not rows (dask; pip install 'fissure[dask]')")
    o.add_argument("--scheduler", metavar="ADDRESS",
                   help="with --engine dask: the Dask scheduler to use, e.g. tcp://10.0.0.5:8786 (default: a local "
                        "cluster started and stopped for this run)")
    o.add_argument("--out", default="fissure-out",
                   help="output folder (fissure-out): new, empty, or holding a previous Fissure run, whose files "
                        "this run replaces")
    o.add_argument("--top", type=int, default=10, help="ranked slices shown in the terminal (10)")
    o.add_argument("--quiet", action="store_true", help="no terminal summary")
    o.add_argument("--block-on-flag", nargs="?", const="both", choices=GATE_SCOPES, metavar="slices|fairness|both",
                   help="release gate: exit 1 when any slice is flagged (slices), any protected group is flagged "
                        "(fairness), or either (both; the plain option)")
    o.add_argument("--block-gap", type=float, metavar="GAP",
                   help="release gate: exit 1 when a flagged slice is worse than the rest by more than GAP "
                        "(in the metric's units)")
    return p


#: Settings given as options of the same name (the two mappings are merged separately below).
_SCALAR_SETTINGS = [f.name for f in fields(AuditConfig) if f.name not in ("bin_edges", "reference")]


def settings_from(args: argparse.Namespace) -> dict[str, Any]:
    settings: dict[str, Any] = load_toml(args.config) if args.config else {}
    for key in _SCALAR_SETTINGS:
        v = getattr(args, key, None)
        if v is not None:
            settings[key] = v
    if args.bin_edges:
        settings["bin_edges"] = {**settings.get("bin_edges", {}), **dict(args.bin_edges)}
    if args.reference:
        settings["reference"] = {**settings.get("reference", {}), **dict(args.reference)}
    if not settings.get("label"):
        raise AuditInputError("give the label column with --label COL (or label = ... in --config)")
    return settings


class _Bar:
    """Progress on stderr through tqdm; silent when stderr is not a terminal."""

    def __init__(self, enabled: bool):
        self.bar = None
        if enabled and sys.stderr.isatty():
            from tqdm import tqdm

            self.bar = tqdm(total=100, desc="audit", unit="%", leave=False, file=sys.stderr,
                            bar_format="{desc}: {percentage:3.0f}%|{bar}| {postfix}")

    def __call__(self, stage: str, frac: float) -> None:
        if self.bar is not None:
            self.bar.set_postfix_str(stage)
            self.bar.update(int(frac * 100) - self.bar.n)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


def audit_command(args: argparse.Namespace, argv: Sequence[str]) -> int:
    from ..engine import run
    from .export import NO_CHROMIUM, build_files, check_output_folder, now_utc, write_run
    from .gate import check_gate_settings, evaluate_gate
    from .prose import terminal_summary

    # Everything a user can get wrong is checked before any computing.
    settings = settings_from(args)
    if settings.get("protected") and settings.get("favorable") is None:
        raise AuditInputError("with --protected, say which prediction is favourable to the person: "
                              "--favorable VALUE (e.g. --favorable 0 for a delinquency model)")
    check_gate_settings(args.block_on_flag, args.block_gap, has_protected=bool(settings.get("protected")))
    check_output_folder(args.out)
    if args.pdf:
        if args.no_report:
            raise AuditInputError("--pdf needs the report; drop --no-report")
        from .report import find_chromium

        if find_chromium() is None:
            raise AuditInputError(NO_CHROMIUM)

    bar = _Bar(not args.quiet)
    try:
        if args.scheduler and args.engine != "dask":
            raise AuditInputError("--scheduler needs --engine dask")
        result = run(args.data, progress=bar, engine=args.engine, scheduler=args.scheduler, **settings)
    finally:
        bar.close()
    created = now_utc()  # one timestamp for every file of the run
    gate = evaluate_gate(result, on_flag=args.block_on_flag, gap=args.block_gap)
    command = "fissure " + " ".join(shlex.quote(a) for a in argv)
    files = build_files(result, report=not args.no_report, pdf=args.pdf, command=command, created=created,
                        gate=gate)
    written = write_run(args.out, files, created=created)
    if not args.quiet:
        _print(terminal_summary(result, args.top, gate=gate))
        _print("wrote " + ", ".join(written))
    if gate.blocked:
        print("fissure: release gate: " + "; ".join(gate.reasons), file=sys.stderr)
        return EXIT_GATE
    return EXIT_OK


def _print(text: str) -> None:
    """Print to stdout; a reader that stops early (``| head``) ends the output quietly."""
    try:
        print(text, flush=True)
    except BrokenPipeError:
        # Point stdout at /dev/null so the interpreter's final flush does not fail again.
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        os.close(devnull)


def main(argv: Sequence[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        if args.command == "audit":
            return audit_command(args, argv)
    except AuditInputError as exc:
        print(f"fissure: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("fissure: interrupted; nothing written", file=sys.stderr)
        return 130
    return EXIT_INPUT


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
