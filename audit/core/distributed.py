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

Lost workers: the scheduler runs a lost worker's tasks again elsewhere (up to its
``distributed.scheduler.allowed-failures``, 3 by default); a run that still fails raises
:class:`ClusterError`, one line, before anything is written.
"""
from __future__ import annotations

import io
import os
from dataclasses import dataclass, field, replace
from typing import Any, Callable

import pandas as pd

from ..errors import AuditInputError, shown
from .stream import (CsvSource, Evidence, Fitted, ParquetSource, Source, SourceInfo, _digest, _expand,
                     csv_column_types, fit_evidence, needed_columns, profile_source, read_parquet_part, tally_part)
from .tally import Tally

#: Rows per part when ``chunk_rows`` is not given (a part is read in chunks of this many rows too).
PART_ROWS = 1_000_000
#: Parts added together by one reduction task.
FAN_IN = 8
#: Seconds to wait for a scheduler given by address.
CONNECT_TIMEOUT = 10

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


def _add_in_order(*items):
    """The sum of the items, left to right (``None`` items skipped)."""
    total = None
    for x in items:
        if x is not None:
            total = x if total is None else total + x
    return total


# ----------------------------------------------------------------------------- the client side
def _reduce(client, futures: list, key: str):
    """Add futures in row order on the workers, ``FAN_IN`` neighbours at a time; one future."""
    level = 0
    while len(futures) > 1:
        futures = [client.submit(_add_in_order, *futures[i:i + FAN_IN], key=f"{key}-add-{level}-{i}", pure=False)
                   for i in range(0, len(futures), FAN_IN)]
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
    text = str(exc).splitlines()[0] if str(exc) else ""
    return ClusterError(f"{where} could not finish the audit ({type(exc).__name__}{': ' + shown(text, 100)[1:-1] if text else ''}); "
                        "nothing was written", setting="scheduler")


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
        if cfg.max_order > 2:
            raise AuditInputError("engine='dask' audits single attributes and pairs (max_order 1 or 2); run slices of "
                                  "three attributes with engine='local'", setting="max_order")
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

    def __exit__(self, *exc) -> None:
        self.close()

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

        try:
            return future.result()
        except AuditInputError:
            raise
        except (OSError, TimeoutError, asyncio.CancelledError, concurrent.futures.CancelledError) as exc:
            raise _cluster_failed(exc, self.scheduler if isinstance(self.scheduler, str) else None) from None
        except Exception as exc:
            if type(exc).__name__ in ("KilledWorker", "CommClosedError", "FutureCancelledError", "CancelledError"):
                raise _cluster_failed(exc, self.scheduler if isinstance(self.scheduler, str) else None) from None
            raise

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
        self.plan = plan = self._wait(c.submit(make_plan, self.path, cfg.chunk_rows, cfg.encoding, pure=False))
        self._digest = c.submit(_digest, plan.files, pure=False)  # runs beside the passes
        pf = c.scatter(plan, broadcast=True, hash=False)
        futs = [c.submit(_first_pass_task, pf, i, cfg, p.offset, key=f"fissure-fit-{i}", pure=False)
                for i, p in enumerate(plan.parts)]
        total = _reduce(c, futs, "fissure-fit")
        self._progress(futs, "reading and checking", 0.0, 1.0)
        first: _FirstPass = self._wait(total)
        del futs, total
        self.offsets = [0]
        for n in first.rows:
            self.offsets.append(self.offsets[-1] + n)
        if first.failures:
            index, exc = min(first.failures, key=lambda f: f[0])
            if plan.parts[index].offset is None and index > 0:
                again = self._wait(c.submit(_first_pass_task, pf, index, cfg, self.offsets[index], pure=False))
                if again.failures:
                    raise again.failures[0][1]
            raise exc
        fitted = fit_evidence(first.evidence, cfg)
        return fitted

    def tally(self, fitted: Fitted) -> Tally:
        c = self.client
        slim = replace(fitted, score_hist=None)  # the workers need the median bins, not the histogram
        ff = c.scatter(slim, broadcast=True, hash=False)
        pf = c.scatter(self.plan, broadcast=True, hash=False)
        futs = [c.submit(_second_pass_task, pf, i, ff, self.cfg, self.offsets[i], self.kernel,
                         key=f"fissure-tally-{i}", pure=False) for i in range(len(self.plan.parts))]
        total = _reduce(c, futs, "fissure-tally")
        self._progress(futs, "counting slices", 0.0, 1.0)
        out: Tally = self._wait(total)
        out.n_unlabelled = fitted.n_unlabelled
        return out


def start_local_cluster(workers: int | None = None, *, threads: int = 1, local_directory: str | None = None):
    """A cluster of worker processes on this machine (bound to 127.0.0.1, no dashboard).

    Each worker's compiled kernels run one thread, so the workers share the cores instead of
    competing for them.
    """
    import tempfile

    from distributed import LocalCluster

    n = workers or max(1, os.cpu_count() or 1)
    local_directory = local_directory or tempfile.mkdtemp(prefix="fissure-dask-")
    return LocalCluster(n_workers=n, threads_per_worker=threads, processes=True, dashboard_address=None,
                        host="127.0.0.1", local_directory=local_directory,
                        env={"NUMBA_NUM_THREADS": str(threads), "OMP_NUM_THREADS": "1"}, silence_logs=40)
