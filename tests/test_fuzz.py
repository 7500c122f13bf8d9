"""Fuzzing: no file content, table or setting ends in anything but a result or the one-line
AuditInputError.

Hypothesis draws random and mutated bytes for every format read_table accepts (starting from
small valid files and flipping, cutting, splicing bytes, inside and outside the compression),
random tables and settings for ``audit.run``, and random tables through the CLI in-process.

The default run keeps to a few seconds (``FUZZ_EXAMPLES`` examples per test, derandomized so
every run draws the same cases). For a nightly hunt set ``FISSURE_FUZZ_EXAMPLES=2000``; with
``FISSURE_FUZZ_SEED=<n>`` the draws are random from that seed instead of fixed.
"""
from __future__ import annotations

import bz2
import functools
import gzip
import io
import lzma
import math
import os
import tempfile
import zipfile

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, seed, settings
from hypothesis import strategies as st

import audit
from audit.core.read import MAX_COLUMNS, read_table
from audit.errors import AuditInputError, shown
from audit.stats.correct import CORRECTIONS
from audit.stats.intervals import INTERVALS
from audit.stats.methods import METRICS

FUZZ_EXAMPLES = int(os.environ.get("FISSURE_FUZZ_EXAMPLES", "0")) or None
_SEED = os.environ.get("FISSURE_FUZZ_SEED")


def fuzz(default: int):
    """Hypothesis settings: ``default`` examples (or the nightly number), no deadline, fixed draws."""
    def wrap(fn):
        fn = settings(max_examples=FUZZ_EXAMPLES or default, deadline=None, derandomize=_SEED is None,
                      database=None, print_blob=True,
                      suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                             HealthCheck.filter_too_much, HealthCheck.large_base_example,
                                             HealthCheck.function_scoped_fixture])(fn)
        return seed(int(_SEED))(fn) if _SEED is not None else fn
    return wrap


# ----------------------------------------------------------------------------------------------
# seed files: a small valid table of the demo's kind in every format


def _frame() -> pd.DataFrame:
    rng = np.random.default_rng(15)
    n = 40
    return pd.DataFrame({"y": rng.integers(0, 2, n), "p": rng.random(n).round(3),
                         "region": rng.choice(["north", "Société", "Müller"], n),
                         "income": rng.normal(3000, 800, n).round(1)})


def _zip(name: str, payload: bytes) -> bytes:
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        zf.writestr(name, payload)
    return buf.getvalue()


@functools.cache
def seed_file(fmt: str) -> bytes:
    df = _frame()
    csv = df.to_csv(index=False).encode()
    if fmt == "csv":
        return csv
    if fmt == "tsv":
        return df.to_csv(index=False, sep="\t").encode()
    if fmt == "csv.gz":
        return gzip.compress(csv, mtime=0)
    if fmt == "csv.bz2":
        return bz2.compress(csv)
    if fmt == "csv.xz":
        return lzma.compress(csv)
    if fmt == "csv.zip":
        return _zip("t.csv", csv)
    if fmt == "parquet":
        buf = io.BytesIO()
        df.to_parquet(buf)
        return buf.getvalue()
    if fmt == "xlsx":
        buf = io.BytesIO()
        df.to_excel(buf, index=False)
        return buf.getvalue()
    raise ValueError(fmt)


FORMATS = ["csv", "tsv", "csv.gz", "csv.bz2", "csv.xz", "csv.zip", "parquet", "xlsx"]


def _mutate(draw, data: bytes, max_ops: int = 4) -> bytes:
    """Flip, cut, splice, repeat or zero bytes of ``data``."""
    out = bytearray(data)
    ops = draw(st.lists(st.tuples(st.sampled_from(["flip", "cut", "splice", "delete", "repeat", "zero"]),
                                  st.integers(0, 1 << 30), st.integers(0, 1 << 30), st.binary(max_size=12)),
                        min_size=1, max_size=max_ops))
    for op, a, b, blob in ops:
        i = a % (len(out) + 1)
        if op == "flip" and out:
            i = a % len(out)
            out[i] ^= 1 << (b % 8)
        elif op == "cut":
            del out[i:]
        elif op == "splice":
            out[i:i] = blob
        elif op == "delete":
            del out[i:i + 1 + b % 64]
        elif op == "repeat":
            out[i:i] = out[i:i + 1 + b % 64] * (1 + b % 5)
        elif op == "zero":
            out[i:i + 1 + b % 16] = bytes(len(out[i:i + 1 + b % 16]))
    return bytes(out)


@st.composite
def mutated_file(draw, fmt: str) -> bytes:
    data = seed_file(fmt)
    where = draw(st.sampled_from(["outer", "inner"])) if fmt.startswith("csv.") or fmt == "xlsx" else "outer"
    if where == "outer":
        return _mutate(draw, data)
    if fmt == "xlsx":  # mutate one member of the workbook, then zip it again validly
        src = zipfile.ZipFile(io.BytesIO(data))
        names = src.namelist()
        target = draw(st.sampled_from(names))
        buf = io.BytesIO()
        with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
            for n in names:
                body = src.read(n)
                zf.writestr(n, _mutate(draw, body) if n == target else body)
        return buf.getvalue()
    inner = _mutate(draw, seed_file("csv"))
    kind = fmt.split(".")[1]
    return {"gz": lambda b: gzip.compress(b, mtime=0), "bz2": bz2.compress, "xz": lzma.compress,
            "zip": lambda b: _zip("t.csv", b)}[kind](inner)


def check_read(data: bytes, name: str, **kw):
    """The property: a usable DataFrame or the one-line error naming the file."""
    try:
        df, info = read_table(data, name=name, **kw)
    except AuditInputError as exc:
        msg = str(exc)
        assert "\n" not in msg and "\r" not in msg, msg
        assert shown(name) in msg, msg
        return None
    assert isinstance(df, pd.DataFrame)
    assert len(df) > 0 and 0 < df.shape[1] <= MAX_COLUMNS
    assert all(isinstance(c, str) for c in df.columns)
    assert df.columns.is_unique
    assert info.n_bytes == len(data)
    return df


def test_seed_files_read_back():
    ref = _frame()
    for fmt in FORMATS:
        df = check_read(seed_file(fmt), "t." + fmt)
        assert df is not None, fmt
        pd.testing.assert_frame_equal(df, ref, check_dtype=False)


@pytest.mark.parametrize("fmt", FORMATS)
@fuzz(default=25)
@given(data=st.data())
def test_mutated_files(fmt, data):
    check_read(data.draw(mutated_file(fmt)), "t." + fmt)


@pytest.mark.parametrize("fmt", FORMATS)
@fuzz(default=10)
@given(blob=st.binary(max_size=600))
def test_random_bytes(fmt, blob):
    check_read(blob, "t." + fmt)


_TRICKY = list('ab01,;\t|"\'\r\n .-eE+#=') + ["\x00", "\x1b", "\u00e9", "\ufeff", "\u2028", "nan", "NA", "1e999"]


@fuzz(default=60)
@given(text=st.lists(st.sampled_from(_TRICKY) | st.characters(), max_size=120).map("".join),
       name=st.sampled_from(["t.csv", "t.tsv", "t.txt", "t"]),
       encoding=st.sampled_from([None, None, "utf-8", "cp1252", "latin-1", "utf-16"]))
def test_text_tables(text, name, encoding):
    try:
        data = text.encode(encoding or "utf-8")
    except UnicodeEncodeError:
        data = text.encode("utf-8")
    check_read(data, name, encoding=encoding)


# ----------------------------------------------------------------------------------------------
# random tables and settings for audit.run

_ODD_VALUES = st.sampled_from(["", " ", "a", "A", "a ", " a", "nan", "None", "NaN", "1", "1.0", "\n", "a\x1b"])
_FLOATS = st.floats(allow_nan=True, allow_infinity=True) | st.sampled_from([0.0, -0.0, 1e308, -1e308, 5e-324, 1e-300])
_VALUES = st.one_of(_ODD_VALUES, _FLOATS, st.integers(-(1 << 63), (1 << 63) - 1), st.booleans(), st.none(),
                    st.text(max_size=4))
_NAMES = ["g", "g ", "G", "g.1", "", "0", "y", "p", "label", "region", " region", "x\ny"]


def _column(draw, n: int, kind: str):
    if kind == "const":
        return [draw(_VALUES)] * n
    if kind == "few":
        pool = draw(st.lists(_VALUES, min_size=1, max_size=4))
        return [pool[i] for i in draw(st.lists(st.integers(0, len(pool) - 1), min_size=n, max_size=n))]
    if kind == "number":
        return draw(st.lists(_FLOATS | st.integers(-10, 10), min_size=n, max_size=n))
    return draw(st.lists(_VALUES, min_size=n, max_size=n))


@st.composite
def tables(draw, max_rows: int = 80):
    n = draw(st.integers(1, max_rows))
    ints = st.lists(st.integers(0, 1), min_size=n, max_size=n)
    label_kind = draw(st.sampled_from(["01", "01", "yesno", "bool", "const", "three", "nan", "mixed"]))
    if label_kind == "01":
        y = draw(ints)
    elif label_kind == "yesno":
        y = ["yes" if v else "no" for v in draw(ints)]
    elif label_kind == "bool":
        y = [bool(v) for v in draw(ints)]
    elif label_kind == "const":
        y = [1] * n
    elif label_kind == "three":
        y = draw(st.lists(st.integers(0, 2), min_size=n, max_size=n))
    elif label_kind == "nan":
        y = [v if k % 7 else np.nan for k, v in enumerate(draw(ints))]
    else:
        y = _column(draw, n, "any")
    score_kind = draw(st.sampled_from(["unit", "unit", "unit", "odd", "strings", "pred"]))
    if score_kind == "unit":
        s = draw(st.lists(st.floats(0, 1), min_size=n, max_size=n))
    elif score_kind == "odd":
        s = draw(st.lists(_FLOATS, min_size=n, max_size=n))
    elif score_kind == "strings":
        s = [str(v) for v in draw(st.lists(st.floats(0, 1) | _ODD_VALUES, min_size=n, max_size=n))]
    else:
        s = draw(ints)
    cols, names = [y, s], ["y", "p"]
    for _ in range(draw(st.integers(0, 3))):
        cols.append(_column(draw, n, draw(st.sampled_from(["const", "few", "few", "number", "any"]))))
        names.append(draw(st.sampled_from(_NAMES)))
    df = pd.DataFrame({i: pd.Series(c, dtype=object if draw(st.booleans()) else None)
                       for i, c in enumerate(cols)})
    df.columns = names
    return df, ("pred" if score_kind == "pred" else "score")


@st.composite
def run_settings(draw):
    opt = {
        "metric": st.sampled_from(list(METRICS) + ["bogus"]),
        "alpha": st.sampled_from([0.05, 0.0, 1.0, 0.5, -0.1, 1.5, math.nan]) | st.floats(0, 1),
        "bins": st.integers(-1, 12),
        "min_support": st.integers(-1, 40),
        "min_metric_support": st.integers(-1, 20),
        "max_order": st.integers(0, 3),
        "auc_max_order": st.integers(-2, 3),
        "correction": st.sampled_from(list(CORRECTIONS) + ["nope"]),
        "interval": st.sampled_from(list(INTERVALS) + ["nope"]),
        "level": st.sampled_from([0.95, 0.5, 0.999, 0.0, 1.0, 2.0]),
        "threshold": st.sampled_from([0.5, 0.0, 1.0, 0.3, -1.0, math.inf]),
        "max_levels": st.integers(0, 200),
    }
    keys = draw(st.lists(st.sampled_from(sorted(opt)), unique=True, max_size=5))
    return {k: draw(opt[k]) for k in keys}


def check_run(df: pd.DataFrame, **kw):
    try:
        res = audit.run(df, **kw)
    except AuditInputError as exc:
        assert "\n" not in str(exc) and "\r" not in str(exc), str(exc)
        return None
    res.ranked()
    res.flagged()
    assert len(res.slices) >= 0
    return res


@fuzz(default=80)
@given(table=tables(), opts=run_settings())
def test_run_random_tables(table, opts):
    df, kind = table
    check_run(df, label="y", **{kind: "p"}, **opts)


# ----------------------------------------------------------------------------------------------
# the CLI, in-process


@st.composite
def cli_args(draw):
    args = []
    if draw(st.booleans()):
        args += ["--metric", draw(st.sampled_from(list(METRICS)))]
    if draw(st.booleans()):
        args += ["--alpha", repr(draw(st.sampled_from([0.05, 0.0, 1.0, -1.0, 2.0])))]
    if draw(st.booleans()):
        args += ["--bins", str(draw(st.integers(-1, 8)))]
    if draw(st.booleans()):
        args += ["--min-support", str(draw(st.integers(-1, 30)))]
    if draw(st.booleans()):
        args += ["--max-order", str(draw(st.sampled_from([1, 2])))]
    if draw(st.booleans()):
        args += ["--correction", draw(st.sampled_from(list(CORRECTIONS)))]
    return args


@fuzz(default=25)
@given(table=tables(max_rows=60), args=cli_args(), how=st.sampled_from(["csv", "cut"]))
def test_cli_random_inputs(capsys, table, args, how):
    from audit.faces.cli import main

    df, kind = table
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "t.csv")
        if how == "csv":
            df.to_csv(path, index=False)
        else:  # the same file cut short
            with open(path, "wb") as fh:
                fh.write(df.to_csv(index=False).encode()[: max(1, len(df) * 7)])
        capsys.readouterr()
        rc = main(["audit", path, "--label", "y", f"--{kind}", "p", "--out", os.path.join(tmp, "out"),
                   "--quiet", "--no-report", *args])
        out, err = capsys.readouterr()
    assert rc in (0, 2), (rc, err)
    assert "Traceback" not in err
    if rc == 2:
        assert len(err.strip().splitlines()) == 1, err


# ----------------------------------------------------------------------------------------------
# cases the fuzzing found outside the reader, kept as regression tests until fixed


def test_skipped_attribute_names_are_quoted():
    # found by test_cli_random_inputs (FISSURE_FUZZ_SEED=1): a CSV column named "x<newline>y", all empty
    df = pd.DataFrame({"y": [0, 1] * 20, "p": [0.2] * 40, "x\ny": [None] * 40})
    with pytest.raises(AuditInputError) as e:
        audit.run(df, label="y", score="p")
    assert "\n" not in str(e.value), str(e.value)


# ----------------------------------------------------------------------------------------------
# the chunked reader: mutated files read in chunks end in a result or the one-line error


@pytest.mark.parametrize("fmt", ["csv", "csv.gz", "parquet"])
@fuzz(default=20)
@given(data=st.data(), chunk=st.integers(1, 50))
def test_mutated_files_read_in_chunks(fmt, data, chunk):
    blob = data.draw(mutated_file(fmt))
    with tempfile.TemporaryDirectory() as d:
        path = os.path.join(d, f"t.{fmt}")
        with open(path, "wb") as fh:
            fh.write(blob)
        try:
            res = audit.run(path, label="y", score="p", chunk_rows=chunk, max_order=1)
        except AuditInputError as exc:
            assert "\n" not in str(exc) and "\r" not in str(exc), str(exc)
            return
        assert res.n_rows > 0
