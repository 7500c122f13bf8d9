"""Step 1a: read a predictions table from a file (CSV, TSV, compressed CSV, Parquet, Excel) or
uploaded bytes.

Every failure to read becomes an :class:`AuditInputError` with one line naming the file and what
is wrong with it; nothing else escapes, whatever the bytes. Text quoted from the file (a name, a
value, a file name) goes through :func:`audit.errors.shown`.

What is accepted
----------------
- ``.csv``, ``.txt``, ``.tsv`` (or no extension): text, strictly UTF-8 (a byte-order mark is
  allowed). Any other encoding must be named (``encoding="cp1252"``, CLI ``--encoding cp1252``)
  and is then decoded strictly too: bytes are never replaced or guessed at. The delimiter is
  found from the header line: whichever of ``,`` ``;`` tab ``|`` occurs most often outside quotes
  (tab first for ``.tsv``, comma on a tie).
- The same, compressed: ``.csv.gz``, ``.csv.bz2``, ``.csv.xz``, ``.csv.zip`` (and ``.tsv.*``,
  ``.txt.*``); a zip archive must hold exactly one file.
- ``.parquet`` / ``.pq`` with flat columns (no lists, structs or maps).
- ``.xlsx``: the first sheet, first row as header.

Limits a hostile file cannot get past
-------------------------------------
- A text line longer than :data:`MAX_LINE_BYTES` (1 MiB), header included, or a quoted field
  longer than that, is refused.
- A header (or a Parquet/Excel table) of more than :data:`MAX_COLUMNS` (10,000) columns is refused.
- Decompressing ``.gz``/``.bz2``/``.xz``/``.zip`` streams with a cap of :data:`MAX_UNPACKED_BYTES`
  (1 GiB) and stops with an error past it.
- An Excel workbook is checked before it is unpacked: refused when its members add up to more
  than :data:`MAX_XLSX_UNPACKED_BYTES` (500 MB), or to more than 10 MB at a ratio above
  :data:`MAX_XLSX_RATIO` (100:1) to the file's size. (Zip members cannot unpack past their declared
  size; Python's expat refuses entity-expansion bombs.)
- A Parquet file whose metadata declares more than :data:`MAX_UNPACKED_BYTES` of column data is
  refused before it is read.
"""
from __future__ import annotations

import bz2
import codecs
import gzip
import hashlib
import io
import lzma
import os
import re
import warnings
import zipfile
import zlib
from dataclasses import dataclass

import pandas as pd

from ..errors import AuditInputError, shown

#: Longest text line (bytes, after decoding to UTF-8), header included; also the longest field.
MAX_LINE_BYTES = 1 << 20
#: Most columns a table may have.
MAX_COLUMNS = 10_000
#: Most bytes a compressed CSV may unpack to (and most column data a Parquet file may declare).
MAX_UNPACKED_BYTES = 1 << 30
#: Most bytes the members of an Excel workbook may add up to.
MAX_XLSX_UNPACKED_BYTES = 500_000_000
#: Highest unpacked-to-packed ratio of an Excel workbook that unpacks to more than 10 MB.
MAX_XLSX_RATIO = 100

_TEXT_EXT = (".csv", ".txt", ".tsv", "")
_COMPRESSED = {".gz": "gzip", ".bz2": "bzip2", ".xz": "xz", ".zip": "zip"}
_DELIMITERS = (",", ";", "\t", "|")
_DELIM_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "vertical bar"}
_CHUNK = 1 << 20


@dataclass(frozen=True)
class SourceInfo:
    """Where the table came from: file name (or ``None`` for a DataFrame), SHA-256 of its bytes,
    and for text files the encoding and delimiter used."""

    name: str | None
    sha256: str | None
    n_bytes: int | None
    encoding: str | None = None
    delimiter: str | None = None


def read_table(source: str | os.PathLike | bytes, *, name: str | None = None,
               encoding: str | None = None) -> tuple[pd.DataFrame, SourceInfo]:
    """Read a predictions table (a path, or raw bytes with a ``name``) into a DataFrame.

    Parameters
    ----------
    source : path or bytes
        The file, or its bytes (an upload); the format follows the extension of the file
        name (``name`` for bytes).
    name : str, optional
        File name of uploaded bytes (default ``"upload"``, read as CSV).
    encoding : str, optional
        Text encoding of a CSV/TSV file (e.g. ``"cp1252"``, ``"latin-1"``, ``"utf-16"``).
        Default: strict UTF-8, with or without a byte-order mark. Ignored for Parquet and Excel.

    Returns
    -------
    (DataFrame, SourceInfo)

    Raises
    ------
    AuditInputError
        For anything that is not a readable table within the limits in the module docstring,
        with one line naming the file.

    Examples
    --------
    >>> df, info = read_table(b"y;p\\n0;0.2\\n1;0.9\\n", name="t.csv")
    >>> df.columns.tolist(), info.delimiter
    (['y', 'p'], ';')
    """
    codec = _check_codec(encoding)
    if isinstance(source, (bytes, bytearray, memoryview)):
        data = bytes(source)
        fname = name or "upload"
    else:
        path = os.fspath(source)
        fname = name or os.path.basename(path)
        if not os.path.exists(path):
            raise AuditInputError(f"input file {shown(path, 200)} does not exist")
        if os.path.isdir(path):
            raise AuditInputError(f"input {shown(path, 200)} is a folder; expected a CSV, Parquet or Excel file")
        try:
            with open(path, "rb") as fh:
                data = fh.read()
        except OSError as exc:
            raise AuditInputError(f"input file {shown(path, 200)} cannot be read ({exc.strerror or type(exc).__name__})") from None
    label = shown(fname)
    digest, size = hashlib.sha256(data).hexdigest(), len(data)
    if size == 0 or not data.strip():
        raise AuditInputError(f"input file {label} is empty")

    stem, ext = os.path.splitext(fname.lower())
    used_encoding = delimiter = None
    if ext in _COMPRESSED:
        inner_ext = os.path.splitext(stem)[1]
        data, member = _unpack(data, _COMPRESSED[ext], label)
        if member is not None and inner_ext not in _TEXT_EXT[:3]:
            inner_ext = os.path.splitext(member.lower())[1]
        if inner_ext not in _TEXT_EXT:
            raise AuditInputError(f"input file {label} is a compressed {inner_ext or 'file'}; "
                                  "only compressed CSV/TSV is read (e.g. .csv.gz)")
        if not data.strip():
            raise AuditInputError(f"input file {label} is empty once unpacked")
        ext = inner_ext
    if ext in (".parquet", ".pq"):
        df = _read_parquet(data, label)
    elif ext in (".xlsx", ".xlsm"):
        df = _read_excel(data, label)
    elif ext == ".xls":
        raise AuditInputError(f"input file {label} is an old-style .xls workbook; save it as .xlsx or CSV")
    elif ext in _TEXT_EXT:
        df, used_encoding, delimiter = _read_text(data, label, codec, tab_first=ext == ".tsv")
    else:
        raise AuditInputError(f"input file {label} has extension {shown(ext)}; expected .csv, .tsv, "
                              ".csv.gz/.bz2/.xz/.zip, .parquet or .xlsx")
    if df.shape[1] > MAX_COLUMNS:
        raise AuditInputError(f"input file {label} has {df.shape[1]:,} columns; at most {MAX_COLUMNS:,} are read")
    if len(df) == 0:
        raise AuditInputError(f"input file {label} has a header but no data rows")
    return df, SourceInfo(name=fname, sha256=digest, n_bytes=size, encoding=used_encoding, delimiter=delimiter)


# ----------------------------------------------------------------------------------------------
# text


def _check_codec(encoding: str | None) -> codecs.CodecInfo | None:
    if encoding is None:
        return None
    try:
        info = codecs.lookup(str(encoding))
    except (LookupError, TypeError, ValueError):
        info = None
    if info is None or not getattr(info, "_is_text_encoding", True):
        raise AuditInputError(f"encoding {shown(encoding)} is not a known text encoding; "
                              "try utf-8, cp1252, latin-1 or utf-16", setting="encoding")
    return info


def _decode(data: bytes, codec: codecs.CodecInfo | None, label: str) -> tuple[str, str]:
    """Decode strictly; return the text (byte-order mark removed) and the encoding's name."""
    enc = "utf-8-sig" if codec is None or codec.name == "utf-8" else codec.name
    try:
        text = data.decode(enc)
    except UnicodeDecodeError as exc:
        raise AuditInputError(_decode_message(data, exc, codec, label), setting="encoding") from None
    if text.startswith("\ufeff"):
        text = text[1:]
    return text, "utf-8" if enc == "utf-8-sig" else enc


def _decode_message(data: bytes, exc: UnicodeDecodeError, codec, label: str) -> str:
    start = exc.start
    line_no = data.count(b"\n", 0, start) + 1
    line_start = data.rfind(b"\n", 0, start) + 1
    line_end = data.find(b"\n", start)
    line_end = len(data) if line_end < 0 else line_end
    lo = max(line_start, start - 24)
    near = data[lo:min(line_end, start + 24)].decode("utf-8", errors="backslashreplace").rstrip("\r")
    where = f"byte 0x{data[start]:02X} at line {line_no:,} (byte offset {start:,}) near {shown(near)}"
    if codec is not None:
        return (f"input file {label} is not valid {codec.name} text: {where}; "
                "pass the file's real encoding (API encoding=..., CLI --encoding NAME)")
    if data[:2] in (b"\xff\xfe", b"\xfe\xff"):
        guess, suggest = "it starts with a UTF-16 byte-order mark", "utf-16"
    elif b"\x00" in data[:4096]:
        guess, suggest = "it holds NUL bytes: binary data, or UTF-16 text without a byte-order mark", "utf-16"
    elif re.search(rb"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]", data[line_start:line_end]):
        guess, suggest = "it holds control bytes: binary data rather than text", "cp1252"
    else:
        try:
            data[line_start:line_end].decode("cp1252")
            guess, suggest = "it looks like Windows-1252 or Latin-1 text", "cp1252"
        except UnicodeDecodeError:
            guess, suggest = "it looks like binary data or a legacy encoding", "cp1252"
        if not data[:line_start].isascii():
            guess += " (earlier lines are UTF-8: the file may mix encodings)"
    return (f"input file {label} is not UTF-8 text: {where}; {guess}; pass the file's encoding "
            f"(API encoding='{suggest}', CLI --encoding {suggest})")


def _sniff_binary(data: bytes, label: str) -> None:
    head = data[:8]
    kinds = {b"PK\x03\x04": "a zip archive (an Excel .xlsx workbook?)", b"PAR1": "a Parquet file",
             b"\x1f\x8b": "a gzip file", b"BZh": "a bzip2 file", b"\xfd7zXZ": "an xz file",
             b"\xd0\xcf\x11\xe0": "an old-style Excel .xls workbook"}
    for magic, kind in kinds.items():
        if head.startswith(magic):
            raise AuditInputError(f"input file {label} looks like {kind}, not CSV text; "
                                  "give the file the extension of its format")


def _check_lines(data: bytes, label: str) -> None:
    """Refuse a physical line longer than MAX_LINE_BYTES (one rfind per MiB of file)."""
    n, pos = len(data), 0
    while n - pos > MAX_LINE_BYTES:
        window_end = pos + MAX_LINE_BYTES + 1
        cut = max(data.rfind(b"\n", pos, window_end), data.rfind(b"\r", pos, window_end))
        if cut < 0:
            line_no = data.count(b"\n", 0, pos) + 1
            raise AuditInputError(f"input file {label} has a line longer than {MAX_LINE_BYTES:,} bytes "
                                  f"(line {line_no:,}); each record must be a line of its own")
        pos = cut + 1


def _header(text: str) -> str:
    """The first non-blank physical line (quotes may hide a line break; the parser sees that)."""
    for line in re.split(r"\r\n|\r|\n", text[:MAX_LINE_BYTES + 2], maxsplit=64):
        if line.strip():
            return line
    return ""


def _split_header(line: str, sep: str) -> list[str]:
    """Header fields, honouring double quotes (a doubled quote inside quotes is one quote)."""
    fields, buf, quoted, i = [], [], False, 0
    while i < len(line):
        ch = line[i]
        if quoted:
            if ch == '"':
                if line[i + 1:i + 2] == '"':
                    buf.append('"')
                    i += 1
                else:
                    quoted = False
            else:
                buf.append(ch)
        elif ch == '"':
            quoted = True
        elif ch == sep:
            fields.append("".join(buf))
            buf = []
        else:
            buf.append(ch)
        i += 1
    fields.append("".join(buf))
    return fields


def _unquoted(line: str) -> str:
    """The header line with quoted parts removed (to count delimiter candidates)."""
    return re.sub(r'"[^"]*"?', "", line)


def _pick_delimiter(header: str, tab_first: bool) -> str:
    bare = _unquoted(header)
    order = ("\t",) + _DELIMITERS[:2] + _DELIMITERS[3:] if tab_first else _DELIMITERS
    counts = [bare.count(c) for c in order]
    best = max(range(len(order)), key=lambda k: (counts[k], -k))
    return order[best] if counts[best] else order[0]


def _read_text(data: bytes, label: str, codec, *, tab_first: bool) -> tuple[pd.DataFrame, str, str]:
    _sniff_binary(data, label)
    text, used = _decode(data, codec, label)
    if used != "utf-8":
        data = text.encode("utf-8")
    elif data.startswith(codecs.BOM_UTF8):
        data = data[3:]
    if "\x00" in text:
        at = text.index("\x00")
        line_no = text.count("\n", 0, at) + 1
        raise AuditInputError(f"input file {label} has a NUL byte at line {line_no:,}: binary data, or text in "
                              "UTF-16 (then pass encoding='utf-16', CLI --encoding utf-16)")
    _check_lines(data, label)
    header = _header(text)
    if not header:
        raise AuditInputError(f"input file {label} is empty")
    sep = _pick_delimiter(header, tab_first)
    names = _split_header(header, sep)
    if len(names) > MAX_COLUMNS:
        raise AuditInputError(f"input file {label} has {len(names):,} columns in its header; "
                              f"at most {MAX_COLUMNS:,} are read")
    seen: set[str] = set()
    for col in names:
        if col in seen:
            raise AuditInputError(f"input file {label} has the column name {shown(col)} more than once")
        seen.add(col)
    try:
        with warnings.catch_warnings():
            # index_col=False: a row wider than the header must not turn the first column into the
            # index; pandas warns when the extra fields hold data, and that warning becomes ours
            warnings.simplefilter("error", pd.errors.ParserWarning)
            df = pd.read_csv(io.BytesIO(data), sep=sep, low_memory=False, encoding="utf-8", engine="c",
                             index_col=False)
    except pd.errors.ParserWarning:
        raise AuditInputError(f"input file {label} has data rows with more fields than its header's "
                              f"{len(names):,} names") from None
    except pd.errors.EmptyDataError:
        raise AuditInputError(f"input file {label} is empty") from None
    except pd.errors.ParserError as exc:
        first = (str(exc).strip().splitlines() or [""])[-1].replace("Error tokenizing data. C error: ", "")
        raise AuditInputError(f"input file {label} is not valid CSV: {shown(first, 120)[1:-1]}") from None
    except MemoryError:
        raise AuditInputError(f"input file {label} is too large to read in memory") from None
    except Exception as exc:  # the C parser's other failures: one line, never a traceback
        raise AuditInputError(f"input file {label} is not valid CSV ({type(exc).__name__})") from None
    if df.shape[1] == 1:
        only = str(df.columns[0])
        others = [c for c in _DELIMITERS if c != sep and c in only]
        if others:
            raise AuditInputError(
                f"input file {label} reads as one column named {shown(only)}; it looks like values separated "
                f"by {_DELIM_NAMES[others[0]]}s inside quotes: remove the quotes or save it as plain CSV")
    if len(data) > MAX_LINE_BYTES and b'"' in data:
        _check_fields(df, label)
    df.columns = [str(c) for c in df.columns]
    return df, used, sep


def _check_fields(df: pd.DataFrame, label: str) -> None:
    """Refuse a quoted field longer than MAX_LINE_BYTES (quotes may carry line breaks)."""
    for col in df.columns:
        s = df[col]
        if pd.api.types.is_string_dtype(s) or s.dtype == object:
            try:
                longest = s.astype("str").str.len().max()
            except Exception:  # mixed objects: measured by their text
                longest = max((len(str(v)) for v in s), default=0)
            if pd.notna(longest) and longest > MAX_LINE_BYTES:
                raise AuditInputError(f"input file {label} has a value longer than {MAX_LINE_BYTES:,} "
                                      f"characters in column {shown(col)}")


# ----------------------------------------------------------------------------------------------
# compressed text


def _unpack(data: bytes, kind: str, label: str) -> tuple[bytes, str | None]:
    """Decompress with a cap of MAX_UNPACKED_BYTES; for zip, also return the member's name."""
    member = None
    try:
        if kind == "zip":
            zf = zipfile.ZipFile(io.BytesIO(data))
            files = [i for i in zf.infolist() if not i.is_dir() and not i.filename.startswith("__MACOSX/")]
            if len(files) != 1:
                raise AuditInputError(f"input file {label} holds {len(files)} files; expected one CSV file")
            info = files[0]
            member = info.filename
            if info.file_size > MAX_UNPACKED_BYTES:
                raise AuditInputError(_too_big(label))
            stream = zf.open(info)
        else:
            opener = {"gzip": gzip.GzipFile, "bzip2": bz2.BZ2File, "xz": lzma.LZMAFile}[kind]
            stream = opener(fileobj=io.BytesIO(data)) if kind == "gzip" else opener(io.BytesIO(data))
        chunks, total = [], 0
        with stream:
            while True:
                chunk = stream.read(_CHUNK)
                if not chunk:
                    break
                total += len(chunk)
                if total > MAX_UNPACKED_BYTES:
                    raise AuditInputError(_too_big(label))
                chunks.append(chunk)
    except AuditInputError:
        raise
    except MemoryError:
        raise AuditInputError(_too_big(label)) from None
    except (OSError, EOFError, zlib.error, lzma.LZMAError, zipfile.BadZipFile, zipfile.LargeZipFile,
            RuntimeError, NotImplementedError, ValueError, KeyError, IndexError, OverflowError) as exc:
        # gzip/bz2/xz/zipfile raise all of these for damaged, cut or encrypted archives
        raise AuditInputError(f"input file {label} is not a readable {kind} archive "
                              f"({type(exc).__name__}); is it cut short or damaged?") from None
    return b"".join(chunks), member


def _too_big(label: str) -> str:
    return f"input file {label} unpacks to more than {MAX_UNPACKED_BYTES:,} bytes; refused"


# ----------------------------------------------------------------------------------------------
# Parquet and Excel


def _flat_columns(df: pd.DataFrame, label: str) -> pd.DataFrame:
    names = [str(c) for c in df.columns]
    seen: set[str] = set()
    for col in names:
        if col in seen:
            raise AuditInputError(f"input file {label} has the column name {shown(col)} more than once")
        seen.add(col)
    df.columns = names
    return df


def _read_parquet(data: bytes, label: str) -> pd.DataFrame:
    import pyarrow as pa
    import pyarrow.parquet as pq

    try:
        pf = pq.ParquetFile(pa.BufferReader(data))
        meta = pf.metadata
        if meta.num_columns > MAX_COLUMNS:
            raise AuditInputError(f"input file {label} has {meta.num_columns:,} columns; "
                                  f"at most {MAX_COLUMNS:,} are read")
        declared = sum(meta.row_group(i).total_byte_size for i in range(meta.num_row_groups))
        if declared > MAX_UNPACKED_BYTES:
            raise AuditInputError(f"input file {label} declares {declared:,} bytes of column data; "
                                  f"at most {MAX_UNPACKED_BYTES:,} are read")
        schema = pf.schema_arrow
        names = list(schema.names)
        if len(set(names)) < len(names):
            dup = next(n for n in names if names.count(n) > 1)
            raise AuditInputError(f"input file {label} has the column name {shown(dup)} more than once")
        for field in schema:
            t = field.type
            if pa.types.is_dictionary(t):
                t = t.value_type
            if pa.types.is_nested(t):
                raise AuditInputError(f"input file {label} has column {shown(field.name)} of nested type "
                                      f"{shown(str(t), 40)}; only flat columns are read")
        df = pf.read().to_pandas()
    except AuditInputError:
        raise
    except Exception as exc:  # pyarrow raises many types (ArrowInvalid, OSError, ...); ours is one line
        raise AuditInputError(f"input file {label} is not a readable Parquet file ({type(exc).__name__})") from None
    return _flat_columns(df, label)


def _check_workbook(data: bytes, label: str) -> None:
    """Refuse a zip bomb before openpyxl unpacks anything."""
    try:
        infos = zipfile.ZipFile(io.BytesIO(data)).infolist()
    except Exception as exc:  # zipfile's many failures on damaged archives
        raise AuditInputError(f"input file {label} is not a readable Excel file "
                              f"(not a zip archive: {type(exc).__name__})") from None
    unpacked = sum(i.file_size for i in infos)
    if unpacked > MAX_XLSX_UNPACKED_BYTES:
        raise AuditInputError(f"input file {label} unpacks to {unpacked:,} bytes; at most "
                              f"{MAX_XLSX_UNPACKED_BYTES:,} are read (save the sheet as CSV)")
    if unpacked > 10_000_000 and unpacked > MAX_XLSX_RATIO * len(data):
        raise AuditInputError(f"input file {label} unpacks to {unpacked // max(len(data), 1):,} times its size; "
                              f"refused above {MAX_XLSX_RATIO}:1 (save the sheet as CSV)")


def _read_excel(data: bytes, label: str) -> pd.DataFrame:
    _check_workbook(data, label)
    try:
        df = pd.read_excel(io.BytesIO(data), engine="openpyxl")
    except ImportError:
        raise AuditInputError("reading Excel files needs the 'openpyxl' package; save the sheet as CSV instead") from None
    except Exception as exc:  # openpyxl/zipfile/XML parsers raise many types; ours is one line
        raise AuditInputError(f"input file {label} is not a readable Excel file ({type(exc).__name__})") from None
    mangled = [c for c in df.columns if isinstance(c, str) and re.search(r"\.\d+$", c)
               and c.rsplit(".", 1)[0] in df.columns]
    if mangled:
        _excel_duplicates(data, label)
    return _flat_columns(df, label)


def _excel_duplicates(data: bytes, label: str) -> None:
    """pandas renames a repeated header 'p' to 'p.1'; look at the sheet's own first row."""
    try:
        import openpyxl

        wb = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
        row = next(wb.worksheets[0].iter_rows(max_row=1, values_only=True), ())
        wb.close()
    except Exception:  # already read once by pandas; a second look that fails proves nothing
        return
    seen: set[str] = set()
    for v in row:
        if v is None:
            continue
        if str(v) in seen:
            raise AuditInputError(f"input file {label} has the column name {shown(v)} more than once")
        seen.add(str(v))
