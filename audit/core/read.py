"""Step 1a: read a predictions table from a file (CSV, TSV, Parquet, Excel) or uploaded bytes.

Every failure to read becomes an :class:`AuditInputError` with one line naming the file and
what is wrong with it.
"""
from __future__ import annotations

import csv
import hashlib
import io
import os
from dataclasses import dataclass

import pandas as pd

from ..errors import AuditInputError


@dataclass(frozen=True)
class SourceInfo:
    """Where the table came from: file name (or ``None`` for a DataFrame), SHA-256 of its bytes."""

    name: str | None
    sha256: str | None
    n_bytes: int | None


def read_table(source: str | os.PathLike | bytes, *, name: str | None = None) -> tuple[pd.DataFrame, SourceInfo]:
    """Read a CSV or Parquet file (a path, or raw bytes with a ``name``) into a DataFrame.

    Raises :class:`AuditInputError` for a missing, empty or header-only file, an unknown
    extension and duplicate column names.
    """
    if isinstance(source, (bytes, bytearray)):
        data = bytes(source)
        label = name or "upload"
        digest, size = hashlib.sha256(data).hexdigest(), len(data)
    else:
        path = os.fspath(source)
        label = os.path.basename(path)
        if not os.path.exists(path):
            raise AuditInputError(f"input file '{path}' does not exist")
        if os.path.isdir(path):
            raise AuditInputError(f"input '{path}' is a folder; expected a CSV or Parquet file")
        with open(path, "rb") as fh:
            data = fh.read()
        digest, size = hashlib.sha256(data).hexdigest(), len(data)
    if size == 0 or not data.strip():
        raise AuditInputError(f"input file '{label}' is empty")
    ext = os.path.splitext(label)[1].lower()
    if ext in (".parquet", ".pq"):
        try:
            df = pd.read_parquet(io.BytesIO(data))
        except Exception as exc:  # pyarrow raises many types; ours is one line
            raise AuditInputError(f"input file '{label}' is not a readable Parquet file ({type(exc).__name__})") from None
    elif ext in (".csv", ".txt", ".tsv", ""):
        sep = "\t" if ext == ".tsv" else ","
        text = data.decode("utf-8-sig", errors="replace")
        header = next(csv.reader(io.StringIO(text), delimiter=sep), [])
        seen: set[str] = set()
        for col in header:
            if col in seen:
                raise AuditInputError(f"input file '{label}' has the column name '{col}' more than once")
            seen.add(col)
        try:
            df = pd.read_csv(io.StringIO(text), sep=sep, low_memory=False)
        except pd.errors.EmptyDataError:
            raise AuditInputError(f"input file '{label}' is empty") from None
        except pd.errors.ParserError as exc:
            raise AuditInputError(f"input file '{label}' is not valid CSV: {str(exc).splitlines()[0]}") from None
    elif ext in (".xlsx", ".xls"):
        try:
            df = pd.read_excel(io.BytesIO(data))
        except ImportError:
            raise AuditInputError("reading Excel files needs the 'openpyxl' package; save the sheet as CSV instead") from None
        except Exception as exc:
            raise AuditInputError(f"input file '{label}' is not a readable Excel file ({type(exc).__name__})") from None
    else:
        raise AuditInputError(f"input file '{label}' has extension '{ext}'; expected .csv or .parquet")
    if len(df) == 0:
        raise AuditInputError(f"input file '{label}' has a header but no data rows")
    return df, SourceInfo(name=label, sha256=digest, n_bytes=size)


