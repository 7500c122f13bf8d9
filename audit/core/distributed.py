"""The two passes on a Dask cluster: each worker reads its own parts of the table.

The table is cut into parts that workers can read on their own: groups of Parquet row groups
(read with pyarrow on the worker), or byte blocks of CSV files (each line belongs to the block
where it starts). Even the listing of the parts is a task, so the client never opens the data.

* Pass 1: every part is checked and profiled (``stream.profile_source``); the parts' evidence
  is added in row order on the workers (pairs of neighbours, a tree) and only the sum travels
  to the client, which fits the classes and the encoding (``stream.fit_evidence``).
* Pass 2: the fitted encoding is sent to every worker once; every part is encoded and tallied
  with the same ``tally_chunk`` as a run on one machine; tallies are added on the workers and
  the total comes back to the client, which summarizes it like any other tally.

What travels over the network: the plan (file names, row groups, byte ranges), the evidence
and the tallies (counts and sums per slice, score histograms), never the rows. The result
equals the chunked run on one machine: counts identical, sums to rounding, ROC AUC from the
same score histograms (same bound), the fairness median exact.

* Pass 3 (``max_order=3`` only): the client plans the triples from the reduced pair tally
  (``tally.plan_triples``: support pruning on row counts, never on outcomes), sends the plan
  to every worker once, and the workers tally the kept triples of their parts
  (``tally.tally_triples``); the sum is joined to the pairs' tally, as on one machine.

Failures, with Dask's own settings:

* a worker lost while running a task (killed, out of memory, its machine gone): the scheduler
  runs the task again on another worker, up to ``distributed.scheduler.allowed-failures``
  times (3 by default; a scheduler setting: ``DASK_DISTRIBUTED__SCHEDULER__ALLOWED_FAILURES``
  in the scheduler's environment, or the local cluster's, which is started in this process);
* a task that raises (a read that fails on a network file system) is run again
  ``TASK_RETRIES`` times (``Client.submit(..., retries=...)``); input errors are not raised
  by the tasks but returned, so they are reported at once and never retried.

A run that still fails raises :class:`ClusterError`: one line naming the cause, before
anything is written; the run's tasks still queued on the cluster are cancelled.
"""
from __future__ import annotations

import io
import os
import uuid
from dataclasses import dataclass, field, replace
from typing import Any, Callable

import pandas as pd

from ..errors import AuditInputError, shown
from .stream import (Evidence, Fitted, ParquetSource, Source, SourceInfo, _digest, _expand,
                     csv_column_types, fit_evidence, needed_columns, profile_source, read_parquet_part, tally_part,
                     triple_part)
from .tally import Tally, TriplePlan, plan_triples

#: Rows per part when ``chunk_rows`` is not given (a part is read in chunks of this many rows too).
PART_ROWS = 1_000_000
#: Parts added together by one reduction task.
FAN_IN = 8
#: Seconds to wait for a scheduler given by address.
CONNECT_TIMEOUT = 10
#: Times a task that raised is run again (Dask's ``retries``); a lost worker's tasks are rerun
#: up to the scheduler's ``distributed.scheduler.allowed-failures`` instead.
TASK_RETRIES = 2

Progress = Callable[[str, float], None]
CSV_EXTS = (".csv", ".tsv", ".txt", ".csv.gz", ".csv.bz2", ".csv.xz", ".csv.zip")


class ClusterError(AuditInputError):
    """The cluster could not run the audit (scheduler unreachable, workers lost too often)."""


# ----------------------------------------------------------------------------- the plan (on a worker)
@dataclass
class Part:
    """One part of the table: a Parquet file's row groups, or a CSV file's byte range."""

    kind: str                      # "parquet" or "csv"
    file: str
    row_groups: list[int] | None = None
    start: int = 0                 # CSV: first byte of the block
    end: int | None = None         # CSV: end of the block (None: to the end of the file)
    offset: int | None = None      # first data row in the table, when known before reading
    rows: int | None = None


@dataclass
class Plan:
    kind: str
    files: list[str]
    parts: list[Part]
    name: str
    n_bytes: int
    chunk_rows: int
    columns: list[str] = field(default_factory=list)     # CSV header
    dtypes: dict[str, str] = field(default_factory=dict)  # CSV column types (from the first block)
    encoding: str = "utf-8-sig"
    seps: dict[str, str] = field(default_factory=dict)    # CSV delimiter of each file (from its header)


def _is_parquet(path: str) -> bool:
    low = path.lower().rstrip("/")
    if low.endswith((".parquet", ".pq")):
        return True
    if os.path.isdir(path):
        return any(f.lower().endswith((".parquet", ".pq")) for _, _, fs in os.walk(path) for f in fs)
    return False


def make_plan(path: str, chunk_rows: int | None, encoding: str | None) -> Plan:
    """List the table's parts (runs on a worker, which sees the files)."""
    rows = chunk_rows or PART_ROWS
    name = os.path.basename(path.rstrip("/")) or path
    if _is_parquet(path):
        files = _expand(path, (".parquet", ".pq"))
        src = ParquetSource.__new__(ParquetSource)  # the listing only: no digest of the bytes here
        src.files = files
        parts: list[Part] = []
        for f, groups, offset, n in src.parts():
            last = parts[-1] if parts else None
            if last is not None and last.file == f and last.rows + n <= rows:
                last.row_groups += groups
                last.rows += n
            else:
                parts.append(Part("parquet", f, list(groups), offset=offset, rows=n))
        return Plan("parquet", files, parts, name, sum(os.path.getsize(f) for f in files), rows)
    files = _expand(path, CSV_EXTS)
    enc = encoding or "utf-8-sig"  # as the reader on one machine: UTF-8, a byte-order mark allowed
    seps = {f: _delimiter(f, enc) for f in files}
    first = files[0]
    try:
        head = next(iter(pd.read_csv(first, sep=seps[first], chunksize=min(rows, 100_000), encoding=enc,
                                     encoding_errors="strict", low_memory=False)), None)
    except UnicodeDecodeError as exc:
        raise AuditInputError(f"input file {shown(os.path.basename(first))} is not {enc} text near byte "
                              f"{exc.start}; pass encoding=... (--encoding NAME)", setting="encoding") from None
    except Exception as exc:
        raise AuditInputError(f"input file {shown(os.path.basename(first))} is not readable CSV "
                              f"({type(exc).__name__})") from None
    if head is None or len(head) == 0:
        raise AuditInputError(f"input file {shown(os.path.basename(first))} has no data rows")
    with open(first, "rb") as fh:
        fh.readline()  # the header
        sample = fh.read(1 << 22)
    per_row = max(1.0, len(sample) / max(1, sample.count(b"\n")))
    block = max(1 << 12, int(per_row * rows))  # about ``rows`` rows per block
    parts = []
    splittable = enc.replace("-", "").lower() in ("utf8", "latin1", "iso88591", "cp1252", "ascii", "utf8sig")
    for f in files:
        size = os.path.getsize(f)
        if f.lower().endswith((".gz", ".bz2", ".xz", ".zip")) or not splittable:
            parts.append(Part("csv", f, start=0, end=None))
            continue
        for start in range(0, max(size, 1), block):
            parts.append(Part("csv", f, start=start, end=min(start + block, size)))
    if parts:
        parts[0].offset = 0
    return Plan("csv", files, parts, name, sum(os.path.getsize(f) for f in files), rows, list(head.columns),
                csv_column_types(head), enc, seps)


def _delimiter(f: str, encoding: str) -> str:
    """The file's delimiter, picked from its header line as the reader on one machine does."""
    import bz2
    import gzip
    import lzma

    from .read import _pick_delimiter

    low = f.lower()
    try:
        if low.endswith(".zip"):
            import zipfile

            with zipfile.ZipFile(f) as zf, zf.open(zf.namelist()[0]) as fh:
                line = fh.readline(1 << 20)
        else:
            opener = {".gz": gzip.open, ".bz2": bz2.open, ".xz": lzma.open}.get(os.path.splitext(low)[1], open)
            with opener(f, "rb") as fh:
                line = fh.readline(1 << 20)
        header = line.decode(encoding)
    except UnicodeDecodeError as exc:
        raise AuditInputError(f"input file {shown(os.path.basename(f))} is not {encoding.replace('-sig', '')} text "
                              f"at byte {exc.start} of its header; pass encoding=... (--encoding NAME)",
                              setting="encoding") from None
    except Exception as exc:
        raise AuditInputError(f"input file {shown(os.path.basename(f))} is not readable CSV "
                              f"({type(exc).__name__})") from None
    return _pick_delimiter(header.rstrip("\r\n"), low.endswith((".tsv", ".tsv.gz")))


# ----------------------------------------------------------------------------- reading one part (on a worker)
class PartSource(Source):
    """One part of the table read in chunks; counts the rows it yields."""

    chunked = True

    def __init__(self, plan: Plan, part: Part, offset: int | None):
        self.plan, self.part, self.offset = plan, part, offset or 0
        self.info = SourceInfo(plan.name, None, None)
        self.n_read = 0

    def chunks(self, columns=None):
        self.n_read = 0
        frames = (read_parquet_part(self.part.file, self.part.row_groups, self.plan.chunk_rows, columns)
                  if self.part.kind == "parquet" else _read_csv_part(self.plan, self.part))
        for df in frames:
            yield self.offset + self.n_read, df
            self.n_read += len(df)


def _block_bytes(part: Part) -> bytes | None:
    """The lines that start inside the part's byte range (the header line excluded)."""
    with open(part.file, "rb") as fh:
        if part.start == 0:
            fh.readline()  # the header
        else:
            fh.seek(part.start - 1)
            fh.readline()  # the end of a line that started in the previous block
        pos = fh.tell()
        if part.end is not None and pos >= part.end:
            return None
        data = fh.read() if part.end is None else fh.read(part.end - pos)
        if data and not data.endswith(b"\n"):
            data += fh.readline()  # a line that starts in this block ends after it
    return data or None


def _read_csv_part(plan: Plan, part: Part):
    name = shown(os.path.basename(part.file))
    try:
        if part.end is None:  # a compressed file, or a text encoding that cannot be cut at bytes
            reader = pd.read_csv(part.file, sep=plan.seps[part.file], chunksize=plan.chunk_rows, dtype=plan.dtypes,
                                 encoding=plan.encoding, encoding_errors="strict", low_memory=False)
            for df in reader:
                if list(df.columns) != plan.columns:
                    raise AuditInputError(f"input file {name} has other columns than {shown(os.path.basename(plan.files[0]))}")
                yield df
            return
        if part.start == 0:
            with open(part.file, "rb") as fh:
                header = pd.read_csv(io.BytesIO(fh.readline()), sep=plan.seps[part.file], encoding=plan.encoding, nrows=0)
            if list(header.columns) != plan.columns:
                raise AuditInputError(f"input file {name} has other columns than {shown(os.path.basename(plan.files[0]))}")
        data = _block_bytes(part)
        if data is None:
            return
        reader = pd.read_csv(io.BytesIO(data), sep=plan.seps[part.file], header=None, names=plan.columns,
                             chunksize=plan.chunk_rows, dtype=plan.dtypes, encoding=plan.encoding,
                             encoding_errors="strict", low_memory=False)
        yield from reader
    except AuditInputError:
        raise
    except UnicodeDecodeError as exc:
        raise AuditInputError(f"input file {name} is not {plan.encoding} text near byte {part.start + exc.start}; "
                              "pass encoding=... (--encoding NAME)", setting="encoding") from None
    except (ValueError, TypeError) as exc:
        msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise AuditInputError(f"input file {name} cannot be read in parts near byte {part.start}: "
                              f"{shown(msg, 120)[1:-1]} (a column may change type part-way; list it with "
                              "categorical=[...])") from None


# ----------------------------------------------------------------------------- the tasks (on workers)
@dataclass
class _FirstPass:
    """Pass 1 over some parts, in row order: evidence, rows read per part, input errors per part."""

    evidence: Evidence
    rows: list[int]
    failures: list[tuple[int, AuditInputError]]
    first: int  # index of the first part

    def __add__(self, other: "_FirstPass") -> "_FirstPass":
        return _FirstPass(self.evidence + other.evidence, self.rows + other.rows, self.failures + other.failures,
                          self.first)


def _first_pass_task(plan: Plan, index: int, cfg, offset: int | None) -> _FirstPass:
    src = PartSource(plan, plan.parts[index], offset)
    try:
        ev = profile_source(src, cfg)
    except AuditInputError as exc:
        # An input error is not retried; with the part's offset unknown (CSV), the client asks
        # again once the rows before the part are counted, so the message names the right row.
        return _FirstPass(Evidence(None, None), [src.n_read], [(index, exc)], index)
    return _FirstPass(ev, [src.n_read], [], index)


def _second_pass_task(plan: Plan, index: int, fitted: Fitted, cfg, offset: int, kernel: str) -> Tally | None:
    src = PartSource(plan, plan.parts[index], offset)
    total = None
    for off, df in src.chunks(columns=needed_columns(fitted, cfg)):
        t = tally_part(df, fitted, cfg, offset=off, kernel=kernel)
        if t is not None:
            total = t if total is None else total + t
    return total


def _third_pass_task(plan: Plan, index: int, fitted: Fitted, cfg, offset: int, triples: TriplePlan,
                     kernel: str) -> Tally | None:
    """The planned triples of one part, chunk by chunk through ``stream.triple_part``."""
    src = PartSource(plan, plan.parts[index], offset)
    total = None
    for off, df in src.chunks(columns=needed_columns(fitted, cfg)):
        t = triple_part(df, fitted, cfg, triples, offset=off, kernel=kernel)
        if t is not None:
            total = t if total is None else total + t
    return total


def _held(obj):
    """The object itself: the result of a task that a lost worker's replacement can compute again."""
    return obj


def _add_in_order(*items):
    """The sum of the items, left to right (``None`` items skipped)."""
    total = None
    for x in items:
        if x is not None:
            total = x if total is None else total + x
    return total


# ----------------------------------------------------------------------------- the client side
def _reduce(client, futures: list, key: str, keep: list):
    """Add futures in row order on the workers, ``FAN_IN`` neighbours at a time; one future.
    ``keep`` receives every future submitted: a failed run cancels them all (the scheduler
    cancels a task's dependents with it, and expects the client to hold each of them)."""
    level = 0
    while len(futures) > 1:
        futures = [client.submit(_add_in_order, *futures[i:i + FAN_IN], key=f"{key}-add-{level}-{i}", pure=False,
                                 retries=TASK_RETRIES)
                   for i in range(0, len(futures), FAN_IN)]
        keep.extend(futures)
        level += 1
    return futures[0]


def _probe(address: str) -> None:
    """Fail at once when nothing listens at a ``tcp://host:port`` address (instead of the
    client's retries until its timeout)."""
    import socket
    from urllib.parse import urlsplit

    u = urlsplit(address if "://" in address else "tcp://" + address)
    if u.scheme == "tcp" and u.hostname and u.port:
        socket.create_connection((u.hostname, u.port), timeout=CONNECT_TIMEOUT).close()


def _cluster_failed(exc: BaseException, address: str | None) -> ClusterError:
    where = f"the Dask cluster at {address}" if address else "the local Dask cluster"
    name = type(exc).__name__
    if name == "KilledWorker":
        # Dask's own limit: the task's worker died allowed-failures + 1 times.
        task = str(exc.args[0]) if exc.args else "a task"
        tries = exc.args[2] + 1 if len(exc.args) > 2 and isinstance(exc.args[2], int) else None
        what = _task_words(task)
        lost = (f"the worker running {what}" if tries == 1 else
                f"its workers {tries or 'several'} times while they ran {what}")
        return ClusterError(f"{where} lost {lost} (distributed.scheduler.allowed-failures = "
                            f"{tries - 1 if tries else '?'}); the audit was stopped and nothing was written",
                            setting="scheduler")
    text = str(exc).splitlines()[0] if str(exc) else ""
    hint = ""
    if isinstance(exc, ImportError) and "audit" in text:
        hint = "; the workers need Fissure installed (pip install 'fissure[dask]' in their Python)"
    return ClusterError(f"{where} could not finish the audit ({name}{': ' + shown(text, 100)[1:-1] if text else ''})"
                        f"{hint}; nothing was written", setting="scheduler")


def _task_words(key: str) -> str:
    """A task's key (``fissure-<run>-tally-3``) in words: "part 4 of the counting pass"."""
    bits = key.split("-")
    passes = {"plan": "the listing of the parts", "plan_data": "the plan", "fitted": "the encoding",
              "triple_plan": "the triple plan", "fit": "the reading pass", "refit": "the reading pass",
              "tally": "the counting pass", "triples": "the triples pass", "digest": "the file digest"}
    if len(bits) >= 3 and bits[0] == "fissure" and bits[2] in passes:
        if len(bits) == 4 and bits[3].isdigit():
            return f"part {int(bits[3]) + 1} of {passes[bits[2]]}"
        return passes[bits[2]] if len(bits) == 3 else f"a sum of {passes[bits[2]]}"
    return f"task {shown(key, 60)}"


class DaskRun:
    """A run of both passes on a Dask cluster: ``scheduler`` is an address (``tcp://host:8786``),
    a ``distributed.Client``, or ``None`` for a local cluster started here and shut down after.

    >>> # with DaskRun("data/", cfg) as d:  fitted = d.fit(); tally = d.tally(fitted)
    """

    def __init__(self, path, cfg, *, scheduler: Any = None, progress: Progress | None = None,
                 kernel: str = "auto", workers: int | None = None):
        if isinstance(path, pd.DataFrame) or not isinstance(path, (str, os.PathLike)):
            raise AuditInputError("engine='dask' reads files on the workers: pass a path to a CSV or Parquet file, a "
                                  "folder of Parquet files or a glob of CSV files", setting="engine")
        self.path = os.fspath(path)
        self.cfg = cfg
        self.scheduler = scheduler
        self.note = progress or (lambda stage, frac: None)
        self.kernel = kernel
        self.workers = workers
        self.client = self.cluster = None
        self.own_client = False
        self.plan: Plan | None = None
        self._digest = None
        self._tmp = None
        self.run_id = uuid.uuid4().hex[:10]  # task keys of this run: a failed run's keys never meet the next's
        self._futures: list = []

    # -- connection
    def __enter__(self) -> "DaskRun":
        try:
            from distributed import Client
        except ImportError:
            raise AuditInputError("engine='dask' needs dask.distributed: pip install 'fissure[dask]'",
                                  setting="engine") from None
        address = None
        try:
            if self.scheduler is None:
                import tempfile

                self._tmp = tempfile.mkdtemp(prefix="fissure-dask-")  # the workers' scratch space, removed after
                self.cluster = start_local_cluster(self.workers, local_directory=self._tmp)
                self.client = Client(self.cluster)
                self.own_client = True
            elif isinstance(self.scheduler, str):
                address = self.scheduler
                _probe(address)
                self.client = Client(address, timeout=CONNECT_TIMEOUT)
                self.own_client = True
            else:
                self.client = self.scheduler
        except (OSError, TimeoutError) as exc:
            self.close()
            raise ClusterError(f"cannot reach the Dask scheduler at {shown(address or 'a local cluster')} "
                               f"({type(exc).__name__}); start one with `dask scheduler` or leave --scheduler out "
                               "for a local cluster", setting="scheduler") from None
        except BaseException:
            self.close()
            raise
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is not None:
            self.cancel()
        self.close()

    def cancel(self) -> None:
        """Cancel the run's tasks still on the cluster (a failed or interrupted run)."""
        if self.client is not None and self._futures:
            try:
                self.client.cancel(self._futures)
            except Exception:  # pragma: no cover - the cluster may be gone already
                pass
        self._futures = []

    def _key(self, stage: str, i: int | None = None) -> str:
        return f"fissure-{self.run_id}-{stage}" + ("" if i is None else f"-{i}")

    def _submit(self, fn, *args, key: str):
        fut = self.client.submit(fn, *args, key=key, pure=False, retries=TASK_RETRIES)
        self._futures.append(fut)
        return fut

    def _held(self, obj, stage: str):
        """``obj`` as a future the tasks depend on. Not ``Client.scatter``: scattered data that
        every holder loses cannot be recovered (the run's tasks are then cancelled), while the
        result of a task is computed again from the task, which the scheduler keeps."""
        return self._submit(_held, obj, key=self._key(stage))

    def close(self) -> None:
        if self.own_client and self.client is not None:
            try:
                self.client.close(timeout=5)
            except Exception:  # pragma: no cover - closing after a failure
                pass
        if self.cluster is not None:
            try:
                self.cluster.close(timeout=10)
            except Exception:  # pragma: no cover
                pass
        self.client = self.cluster = None
        if self._tmp is not None:
            import shutil

            shutil.rmtree(self._tmp, ignore_errors=True)
            self._tmp = None

    def _wait(self, future):
        """A future's result; what the cluster could not do becomes one line."""
        import asyncio
        import concurrent.futures

        address = self.scheduler if isinstance(self.scheduler, str) else None
        try:
            return future.result()
        except AuditInputError:
            raise
        except (OSError, TimeoutError, asyncio.CancelledError, concurrent.futures.CancelledError) as exc:
            raise _cluster_failed(exc, address) from None
        except Exception as exc:
            # A worker lost too often (KilledWorker), a task that raised on every retry, a
            # worker without Fissure: one line for the user; the cause stays chained for a
            # developer calling the API.
            if type(exc).__name__ in ("KilledWorker", "CommClosedError", "FutureCancelledError", "CancelledError"):
                raise _cluster_failed(exc, address) from None
            raise _cluster_failed(exc, address) from exc

    def _progress(self, futures, stage: str, lo: float, hi: float) -> None:
        from distributed import as_completed

        done = 0
        for _ in as_completed(futures):
            done += 1
            self.note(stage, lo + (hi - lo) * done / len(futures))

    # -- the passes
    @property
    def info(self) -> SourceInfo:
        digest = self._wait(self._digest) if self._digest is not None else None
        return SourceInfo(self.plan.name, digest[0] if digest else None, self.plan.n_bytes)

    def fit(self) -> Fitted:
        cfg = self.cfg
        c = self.client
        self.plan = plan = self._wait(self._submit(make_plan, self.path, cfg.chunk_rows, cfg.encoding,
                                                   key=self._key("plan")))
        self._digest = self._submit(_digest, plan.files, key=self._key("digest"))  # runs beside the passes
        pf = self._held(plan, "plan_data")
        futs = [self._submit(_first_pass_task, pf, i, cfg, p.offset, key=self._key("fit", i))
                for i, p in enumerate(plan.parts)]
        total = _reduce(c, futs, self._key("fit"), self._futures)
        self._progress(futs, "reading and checking", 0.0, 1.0)
        first: _FirstPass = self._wait(total)
        del futs, total
        self._futures = [self._digest]  # the pass is done: its parts' results may go
        self.offsets = [0]
        for n in first.rows:
            self.offsets.append(self.offsets[-1] + n)
        if first.failures:
            index, exc = min(first.failures, key=lambda f: f[0])
            if plan.parts[index].offset is None and index > 0:
                again = self._wait(self._submit(_first_pass_task, pf, index, cfg, self.offsets[index],
                                                key=self._key("refit", index)))
                if again.failures:
                    raise again.failures[0][1]
            raise exc
        fitted = fit_evidence(first.evidence, cfg)
        return fitted

    def tally(self, fitted: Fitted) -> Tally:
        c = self.client
        slim = replace(fitted, score_hist=None)  # the workers need the median bins, not the histogram
        ff = self._held(slim, "fitted")
        pf = self._held(self.plan, "plan_data")
        n = len(self.plan.parts)
        futs = [self._submit(_second_pass_task, pf, i, ff, self.cfg, self.offsets[i], self.kernel,
                             key=self._key("tally", i)) for i in range(n)]
        total = _reduce(c, futs, self._key("tally"), self._futures)
        triples = self.cfg.max_order >= 3
        self._progress(futs, "counting slices", 0.0, 0.5 if triples else 1.0)
        out: Tally = self._wait(total)
        del futs, total
        self._futures = [self._digest]
        out.n_unlabelled = fitted.n_unlabelled
        if triples:
            # Which triples to count depends on the pairs' counts over the whole table: the plan
            # is made here from the reduced pair tally (row counts only) and sent to every worker.
            tplan = plan_triples(out, fitted.cards, min_rows=self.cfg.min_support)
            tf = self._held(tplan, "triple_plan")
            futs = [self._submit(_third_pass_task, pf, i, ff, self.cfg, self.offsets[i], tf, self.kernel,
                                 key=self._key("triples", i)) for i in range(n)]
            total = _reduce(c, futs, self._key("triples"), self._futures)
            self._progress(futs, "counting triples", 0.5, 1.0)
            out = out.joined(self._wait(total))
            del futs, total
            self._futures = [self._digest]
        return out


def start_local_cluster(workers: int | None = None, *, threads: int = 1, local_directory: str | None = None):
    """A cluster of worker processes on this machine (bound to 127.0.0.1, no dashboard).

    Each worker's compiled kernels run one thread, so the workers share the cores instead of
    competing for them. Without ``local_directory`` the workers' scratch space is a temporary
    folder removed when the cluster object goes (or when Python exits).
    """
    import shutil
    import tempfile
    import weakref

    from distributed import LocalCluster

    n = workers or max(1, os.cpu_count() or 1)
    own = local_directory is None
    local_directory = local_directory or tempfile.mkdtemp(prefix="fissure-dask-")
    cluster = LocalCluster(n_workers=n, threads_per_worker=threads, processes=True, dashboard_address=None,
                           host="127.0.0.1", local_directory=local_directory,
                           env={"NUMBA_NUM_THREADS": str(threads), "OMP_NUM_THREADS": "1"},
                           silence_logs=50)  # CRITICAL: a failed run is our one line, not the scheduler's log
    if own:
        weakref.finalize(cluster, shutil.rmtree, local_directory, ignore_errors=True)
    return cluster
