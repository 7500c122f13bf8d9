"""Tables as streams of chunks: a DataFrame in memory (one chunk), or CSV and Parquet files — one
file, a folder of Parquet files, a glob of CSV files — read ``chunk_rows`` rows at a time.

Every failure to read becomes the one-line :class:`~audit.errors.AuditInputError`; the CSV reader
checks what the whole-file reader (``audit.core.read``) checks: binary files named .csv, the text
encoding (strict), the delimiter from the header line, the column limit.
"""
from __future__ import annotations

import glob
import hashlib
import os
import queue
import threading
from dataclasses import dataclass
from typing import Any, Iterator

import pandas as pd

from ..errors import AuditInputError, shown


@dataclass
class SourceInfo:
    """Where the table came from: file name (or ``None`` for a DataFrame), SHA-256 of its bytes."""

    name: str | None
    sha256: str | None
    n_bytes: int | None


class Source:
    """A table read as chunks: ``chunks()`` yields ``(first data row, DataFrame)``.

    ``info`` says where the table came from; for files its SHA-256 is computed in a background
    thread (:class:`_Digest`) and ``info`` waits for it, so read it after the passes."""

    chunked: bool = True
    #: Rows the source holds when known before reading (Parquet metadata), for progress.
    expected_rows: int | None = None
    _info: SourceInfo | None = None
    _pending: "tuple[str, _Digest] | None" = None

    @property
    def info(self) -> SourceInfo:
        if self._pending is not None:
            name, pending = self._pending
            digest, size = pending.result()
            self._info, self._pending = SourceInfo(name, digest, size), None
        return self._info

    @info.setter
    def info(self, value: SourceInfo) -> None:
        if self._pending is not None:
            self._pending[1].cancel()  # the caller names the table itself: no digest needed
        self._info, self._pending = value, None

    def __del__(self):
        # A source dropped unread (a run stopped by an input error) stops its digest too: a
        # long-lived process (the page, a notebook) should not keep hashing a large file.
        pending = self._pending
        if pending is not None:
            pending[1].cancel()

    def chunks(self, columns: list[str] | None = None) -> Iterator[tuple[int, pd.DataFrame]]:  # pragma: no cover
        """``(first data row, DataFrame)`` per chunk; ``columns`` may limit what is read (a hint)."""
        raise NotImplementedError


class FrameSource(Source):
    chunked = False

    def __init__(self, df: pd.DataFrame, info: SourceInfo | None = None):
        self.df = df
        self.info = info or SourceInfo(None, None, None)

    def chunks(self, columns=None):
        yield 0, self.df


def _digest(paths: list[str]) -> tuple[str, int]:
    h = hashlib.sha256()
    size = 0
    for p in paths:
        with open(p, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)
                size += len(block)
    return h.hexdigest(), size


class _Digest:
    """SHA-256 of files computed in a background thread from the moment a source is opened.

    The digest is not a pass of its own: the thread reads the files while the first pass
    runs (both release the GIL: file reads, ``hashlib`` on blocks over 2 KiB, pyarrow, the
    compiled kernels) and at a lower priority on Linux, so it takes the cycles the passes leave
    idle; the first pass then finds the file in the page cache. The digest is identical to
    ``hashlib.sha256`` of the files' bytes, one after the other.
    """

    def __init__(self, paths: list[str]):
        self.paths = list(paths)
        self._result: tuple[str, int] | None = None
        self._error: BaseException | None = None
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="fissure-sha256", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        try:
            os.setpriority(os.PRIO_PROCESS, threading.get_native_id(), 10)  # this thread only (Linux)
        except (AttributeError, OSError):  # pragma: no cover - other systems: normal priority
            pass
        try:
            h = hashlib.sha256()
            size = 0
            for p in self.paths:
                with open(p, "rb") as fh:
                    for block in iter(lambda: fh.read(1 << 20), b""):
                        if self._stop.is_set():
                            return
                        h.update(block)
                        size += len(block)
            self._result = (h.hexdigest(), size)
        except BaseException as exc:  # reported by result(), in the caller's thread
            self._error = exc

    def cancel(self) -> None:
        """Stop hashing (the digest is not wanted any more); ``result()`` must not be called after."""
        self._stop.set()

    def result(self) -> tuple[str, int]:
        """``(hex digest, bytes read)``; waits for the thread."""
        self._thread.join()
        if self._result is None and self._error is None:
            raise RuntimeError("the digest was cancelled")
        if self._error is not None:
            name = shown(os.path.basename(self.paths[0])) if len(self.paths) == 1 else f"{len(self.paths)} input files"
            raise AuditInputError(f"{'input file ' if len(self.paths) == 1 else ''}{name} could not be read to the "
                                  f"end for its SHA-256 ({type(self._error).__name__})") from None
        return self._result


def _expand(path: str, exts: tuple[str, ...]) -> list[str]:
    if any(ch in path for ch in "*?["):
        files = sorted(glob.glob(path))
    elif os.path.isdir(path):
        files = sorted(os.path.join(dp, f) for dp, _, fs in os.walk(path) for f in fs
                       if f.lower().endswith(exts) and not f.startswith((".", "_")))
    else:
        files = [path]
    if not files:
        raise AuditInputError(f"no {' or '.join(exts)} files match {shown(path)}")
    for f in files:
        if not os.path.isfile(f):
            raise AuditInputError(f"input file {shown(f)} does not exist")
    return files


def read_ahead(chunks: Iterator[Any]) -> Iterator[Any]:
    """``chunks``, read one chunk ahead in a background thread: the next chunk is read and
    converted while the caller counts the current one (pyarrow, the CSV parser and numpy release
    the GIL for most of their work). An error is raised where its chunk would have come. At most
    two chunks are held besides the caller's; closing the stream stops the reader at its next chunk.
    """
    slot: queue.Queue = queue.Queue(maxsize=1)
    stop = threading.Event()

    def put(item) -> bool:
        while not stop.is_set():
            try:
                slot.put(item, timeout=0.1)
                return True
            except queue.Full:
                continue
        return False

    def work() -> None:
        try:
            for chunk in chunks:
                if not put(("chunk", chunk)):
                    return
            put(("end", None))
        except BaseException as exc:  # re-raised in the caller's thread
            put(("error", exc))

    reader = threading.Thread(target=work, name="fissure-read-ahead", daemon=True)
    reader.start()
    try:
        while True:
            kind, value = slot.get()
            if kind == "chunk":
                yield value
            elif kind == "end":
                return
            else:
                raise value
    finally:
        stop.set()


class ParquetSource(Source):
    """Parquet file(s) read in record batches of ``chunk_rows`` rows (pyarrow)."""

    def __init__(self, path: str, chunk_rows: int):
        self.files = _expand(path, (".parquet", ".pq"))
        self.chunk_rows = chunk_rows
        self._pending = (os.path.basename(path.rstrip("/")) or path, _Digest(self.files))
        self.expected_rows = None

    def parts(self) -> list[tuple[str, list[int], int, int]]:
        """The table's row groups as ``(file, [row groups], first data row, rows)``, from the
        files' footers only: the partitions a distributed run reads, one row group each."""
        import pyarrow.parquet as pq

        out, offset = [], 0
        for f in self.files:
            try:
                meta = pq.ParquetFile(f).metadata
            except Exception as exc:
                raise AuditInputError(f"input file {shown(os.path.basename(f))} is not a readable Parquet file "
                                      f"({type(exc).__name__})") from None
            for g in range(meta.num_row_groups):
                n = meta.row_group(g).num_rows
                out.append((f, [g], offset, n))
                offset += n
        self.expected_rows = offset
        return out

    def chunks(self, columns=None):
        if self.expected_rows is None:
            self.parts()
        return read_ahead(self._chunks(columns))

    def _chunks(self, columns):
        offset = 0
        for f in self.files:
            for df in read_parquet_part(f, None, self.chunk_rows, columns):
                yield offset, df
                offset += len(df)


def read_parquet_part(f: str, row_groups: list[int] | None, chunk_rows: int,
                      columns: list[str] | None = None) -> Iterator[pd.DataFrame]:
    """Chunks of at most ``chunk_rows`` rows of one Parquet file (or of some of its row groups),
    limited to ``columns`` (in the file's order) when given."""
    import pyarrow.parquet as pq

    try:
        pf = pq.ParquetFile(f)
        if columns is not None:
            want = set(columns)
            columns = [c for c in pf.schema_arrow.names if c in want]
        meta = pf.metadata
        kinds: dict = {}
        for g in (range(meta.num_row_groups) if row_groups is None else row_groups):
            n = meta.row_group(g).num_rows
            if n <= 2 * chunk_rows:
                # One read of the row group, its columns decoded in parallel (2-3x faster than
                # record batches on the W1 table), then cut into chunks without copying.
                table = pf.read_row_group(g, columns=columns)
                for lo in range(0, max(n, 1), chunk_rows):
                    yield arrow_to_pandas(table.slice(lo, chunk_rows), kinds)
            else:
                for batch in pf.iter_batches(batch_size=chunk_rows, row_groups=[g], columns=columns):
                    yield arrow_to_pandas(batch, kinds)
    except AuditInputError:
        raise
    except Exception as exc:  # pyarrow raises many types; ours is one line
        raise AuditInputError(f"input file {shown(os.path.basename(f))} is not a readable Parquet file "
                              f"({type(exc).__name__})") from None


def arrow_to_pandas(table, kinds: dict) -> pd.DataFrame:
    """``table.to_pandas()``, with each dictionary column's categorical type kept from one chunk
    to the next while its dictionary stays the same (``kinds``: column -> (dictionary, type)).

    pyarrow gives every chunk a new ``CategoricalDtype``, and pandas checks each new one's
    categories (about 8 ms per column and chunk for W1's 12 attributes, most of the
    conversion); here a column's codes are wrapped in the type already checked, so each chunk
    pays only for the codes' range check. The frame equals ``to_pandas()`` (tested).
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    names = table.column_names
    coded = [n for n, t in zip(names, table.schema.types) if pa.types.is_dictionary(t)]
    if not coded or len(set(names)) != len(names):
        return table.to_pandas()
    if isinstance(table, pa.RecordBatch):
        table = pa.Table.from_batches([table])
    cats: dict[str, Any] = {}
    for name in coded:
        col = table.column(name)
        if col.num_chunks != 1:
            return table.to_pandas()  # pieces with their own dictionaries: pyarrow's own conversion
        arr = col.chunk(0)
        seen = kinds.get(name)
        if seen is None or not seen[0].equals(arr.dictionary):
            # pyarrow's own type for this dictionary: converting no rows keeps every category
            dtype = pa.Table.from_arrays([arr.slice(0, 0)], [name]).to_pandas()[name].dtype
            seen = kinds[name] = (arr.dictionary, dtype)
        idx = arr.indices
        if idx.null_count:  # a missing value is code -1, as in pandas
            idx = pc.fill_null(idx if pa.types.is_signed_integer(idx.type) else idx.cast(pa.int64()), -1)
        codes = idx.to_numpy(zero_copy_only=False)
        cats[name] = pd.Categorical.from_codes(codes, dtype=seen[1])
    rest = [n for n in names if n not in cats]
    base = table.select(rest).to_pandas() if rest else None
    return pd.DataFrame({n: cats[n] if n in cats else base[n] for n in names}, index=pd.RangeIndex(table.num_rows))


class CsvSource(Source):
    """CSV file(s) read in blocks of ``chunk_rows`` rows. Column types are read from the first
    block and held for every later block, so a column cannot change type between chunks."""

    def __init__(self, path: str, chunk_rows: int, *, encoding: str | None = None):
        from .read import _check_codec

        self.files = _expand(path, (".csv", ".tsv", ".txt", ".csv.gz", ".csv.bz2", ".csv.xz", ".csv.zip"))
        self.chunk_rows = chunk_rows
        codec = _check_codec(encoding)
        self.encoding = codec.name if codec is not None else "utf-8-sig"
        self._seps = {f: self._inspect(f) for f in self.files}
        self._pending = (os.path.basename(path.rstrip("/")) or path, _Digest(self.files))
        self._dtypes: dict[str, Any] | None = None

    def _inspect(self, f: str) -> str:
        """Check the start of a file as the whole-file reader does (binary files named .csv, the
        text encoding, the width of the header) and pick its delimiter from the header line."""
        import bz2
        import gzip
        import lzma
        import zipfile

        from .read import MAX_COLUMNS, _pick_delimiter, _sniff_binary

        low = f.lower()
        name = shown(os.path.basename(f))
        try:
            if low.endswith(".zip"):
                with zipfile.ZipFile(f) as zf:
                    members = zf.namelist()
                    if len(members) != 1:
                        raise AuditInputError(f"input file {name} holds {len(members)} files; expected one CSV")
                    with zf.open(members[0]) as fh:
                        head = fh.read(1 << 20)
            else:
                opener = {".gz": gzip.open, ".bz2": bz2.open, ".xz": lzma.open}.get(os.path.splitext(low)[1], open)
                with opener(f, "rb") as fh:
                    head = fh.read(1 << 20)
        except AuditInputError:
            raise
        except Exception as exc:  # a damaged archive: one line
            raise AuditInputError(f"input file {name} cannot be unpacked ({type(exc).__name__})") from None
        if not head.strip():
            raise AuditInputError(f"input file {name} is empty")
        if not low.endswith((".gz", ".bz2", ".xz", ".zip")):
            _sniff_binary(head, name)
        line = head.split(b"\n", 1)[0]
        try:
            header = line.decode(self.encoding)
        except UnicodeDecodeError as exc:
            raise AuditInputError(f"input file {name} is not {self.encoding.replace('-sig', '')} text at byte "
                                  f"{exc.start} of its header; pass encoding=... (--encoding NAME)",
                                  setting="encoding") from None
        sep = _pick_delimiter(header, low.endswith((".tsv", ".tsv.gz")))
        if header.count(sep) + 1 > MAX_COLUMNS:
            raise AuditInputError(f"input file {name} has more than {MAX_COLUMNS:,} columns")
        return sep

    def _reader(self, f: str, dtypes=None):
        return pd.read_csv(f, sep=self._seps[f], chunksize=self.chunk_rows, dtype=dtypes, encoding=self.encoding,
                           encoding_errors="strict", low_memory=False)

    def chunks(self, columns=None):
        return read_ahead(self._chunks(columns))

    def _chunks(self, columns):
        offset = 0
        f = self.files[0]
        try:
            if self._dtypes is None:
                first = next(iter(self._reader(self.files[0])), None)
                if first is None or len(first) == 0:
                    raise AuditInputError(f"input file {shown(os.path.basename(self.files[0]))} has no data rows")
                self._dtypes = csv_column_types(first)
            for f in self.files:
                for df in self._reader(f, self._dtypes):
                    yield offset, df
                    offset += len(df)
        except AuditInputError:
            raise
        except UnicodeDecodeError as exc:
            raise AuditInputError(f"input file {shown(os.path.basename(f))} is not {self.encoding} text near byte "
                                  f"{exc.start}; pass encoding=... (--encoding NAME)", setting="encoding") from None
        except (ValueError, TypeError) as exc:
            msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
            raise AuditInputError(f"input file {shown(os.path.basename(f))} cannot be read in chunks after data row "
                                  f"{offset}: {shown(msg, 120)[1:-1]} (a column may change type part-way; list it "
                                  "with categorical=[...])") from None
        except Exception as exc:
            raise AuditInputError(f"input file {shown(os.path.basename(f))} is not readable CSV "
                                  f"({type(exc).__name__})") from None


def csv_column_types(first: pd.DataFrame) -> dict[str, str]:
    """Column types read from a CSV file's first block, held for every later block or part."""
    return {c: ("float64" if pd.api.types.is_numeric_dtype(t) and not pd.api.types.is_bool_dtype(t)
                else ("boolean" if pd.api.types.is_bool_dtype(t) else "str"))
            for c, t in first.dtypes.items()}


def open_source(data, *, chunk_rows: int | None, encoding: str | None = None) -> Source:
    """A DataFrame, or a path (file, folder of Parquet files, glob of CSV files) read in chunks."""
    if isinstance(data, pd.DataFrame):
        return FrameSource(data)
    if not isinstance(data, (str, os.PathLike)):
        raise AuditInputError(f"data must be a pandas DataFrame or a path to a CSV or Parquet file; received "
                              f"{type(data).__name__}")
    path = os.fspath(data)
    low = path.lower().rstrip("/")
    is_parquet = low.endswith((".parquet", ".pq")) or (os.path.isdir(path) and glob.glob(os.path.join(path, "**",
                                                                                                        "*.parquet"),
                                                                                           recursive=True))
    if chunk_rows is None:
        if any(ch in path for ch in "*?[") or os.path.isdir(path):
            chunk_rows = 1_000_000  # a folder or glob is always streamed
        else:
            from .read import read_table

            df, info = read_table(path, encoding=encoding) if encoding else read_table(path)
            return FrameSource(df, SourceInfo(info.name, info.sha256, info.n_bytes))
    if is_parquet:
        return ParquetSource(path, chunk_rows)
    if low.endswith((".xlsx", ".xlsm", ".xls")):
        raise AuditInputError(f"input file {os.path.basename(path)!r} is an Excel workbook, which cannot be read in "
                              "chunks: leave out chunk_rows (--chunk-rows) to read it whole, or save it as CSV or "
                              "Parquet", setting="chunk_rows")
    return CsvSource(path, chunk_rows, encoding=encoding)


# ----------------------------------------------------------------------------- the fit pass
