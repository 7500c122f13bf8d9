"""Reading files: formats, encodings, delimiters, limits, one-line errors (audit/core/read.py)."""
from __future__ import annotations

import bz2
import gzip
import io
import lzma
import zipfile

import numpy as np
import pandas as pd
import pytest

import audit.core.read as read_mod
from audit.core.read import read_table
from audit.errors import AuditInputError

ROWS = [("0", "0.12", "Société"), ("1", "0.87", "Müller"), ("0", "0.40", "north")]


def csv_text(sep=",", rows=ROWS):
    return "\n".join([sep.join(["y", "p", "lender"])] + [sep.join(r) for r in rows]) + "\n"


def one_line(exc_info):
    msg = str(exc_info.value)
    assert "\n" not in msg and "\r" not in msg and "\x1b" not in msg, msg
    return msg


# ------------------------------------------------------------------------------------- encodings

def test_windows_1252_file_is_refused_by_default_and_read_with_its_encoding(tmp_path):
    # Windows-1252 code chart (also ISO 8859-1 for these letters): é = 0xE9, ü = 0xFC.
    raw = csv_text().encode("cp1252")
    assert b"Soci\xe9t\xe9" in raw and b"M\xfcller" in raw
    (tmp_path / "export.csv").write_bytes(raw)
    with pytest.raises(AuditInputError, match=r"'export.csv' is not UTF-8 text: byte 0xE9 at line 2 \(byte offset 22\) "
                                              r"near '0,0.12,Soci\\xe9t\\xe9'; it looks like Windows-1252") as e:
        read_table(tmp_path / "export.csv")
    msg = one_line(e)
    assert "encoding='cp1252'" in msg and "--encoding cp1252" in msg
    df, info = read_table(tmp_path / "export.csv", encoding="cp1252")
    assert df["lender"].tolist() == ["Société", "Müller", "north"]
    assert info.encoding == "cp1252"


def test_latin_1_file(tmp_path):
    # ISO 8859-1: Ø = 0xD8, ñ = 0xF1, ß = 0xDF, ¤ = 0xA4 (0xA4 is the euro sign in ISO 8859-15, not here).
    rows = [("0", "0.1", "Ørsted"), ("1", "0.9", "Ñandú ß"), ("1", "0.7", "¤")]
    raw = csv_text(rows=rows).encode("latin-1")
    assert b"\xd8rsted" in raw and b"\xa4" in raw
    with pytest.raises(AuditInputError, match=r"byte 0xD8 at line 2") as e:
        read_table(raw, name="latin.csv")
    one_line(e)
    df, info = read_table(raw, name="latin.csv", encoding="latin-1")
    assert df["lender"].tolist() == ["Ørsted", "Ñandú ß", "¤"]
    assert info.encoding == "iso8859-1"


def test_file_mixing_utf8_and_cp1252_lines():
    raw = (csv_text(rows=ROWS[:2]).encode("utf-8")               # lines 1-3 in UTF-8
           + "1,0.55,Müller\n".encode("cp1252"))                   # line 4 in Windows-1252
    with pytest.raises(AuditInputError, match=r"byte 0xFC at line 4 .*may mix encodings") as e:
        read_table(raw, name="mixed.csv")
    one_line(e)
    with pytest.raises(AuditInputError, match=r"not valid utf-8 text: byte 0xFC at line 4"):
        read_table(raw, name="mixed.csv", encoding="utf-8")
    # One codec cannot read both halves right; cp1252 decodes every byte, so the UTF-8 lines come
    # out as the user asked (Ã© for é) and nothing is replaced or dropped.
    df, _ = read_table(raw, name="mixed.csv", encoding="cp1252")
    assert df["lender"].tolist() == ["SociÃ©tÃ©", "MÃ¼ller", "Müller"]
    assert not df["lender"].str.contains("\ufffd").any()


def test_utf8_byte_order_mark_and_utf16():
    df, info = read_table(b"\xef\xbb\xbf" + csv_text().encode(), name="bom.csv")
    assert df.columns.tolist() == ["y", "p", "lender"] and info.encoding == "utf-8"
    raw = csv_text(sep="\t").encode("utf-16")                      # what "Unicode text" exports look like
    with pytest.raises(AuditInputError, match=r"UTF-16 byte-order mark.*encoding='utf-16'"):
        read_table(raw, name="u.txt")
    df, info = read_table(raw, name="u.txt", encoding="utf-16")
    assert df["lender"].tolist() == ["Société", "Müller", "north"] and info.delimiter == "\t"


@pytest.mark.parametrize("enc", ["klingon", "base64", "rot13", ""])
def test_unknown_encoding_is_one_line(enc):
    with pytest.raises(AuditInputError, match=r"is not a known text encoding") as e:
        read_table(csv_text().encode(), name="t.csv", encoding=enc)
    assert e.value.setting == "encoding"


def test_random_bytes_that_broke_the_header_check():
    # Issue 15: these bytes made the csv module raise _csv.Error ("new-line character seen in
    # unquoted field") out of the header check; found with numpy's generator, seed 6.
    raw = np.random.default_rng(6).bytes(200)
    with pytest.raises(AuditInputError, match=r"'r.csv' is not UTF-8 text") as e:
        read_table(raw, name="r.csv")
    one_line(e)
    # the same trap in valid UTF-8: a lone carriage return in the header line
    # (pandas ends a line at a lone CR: a one-name header over two-field rows, refused in one line)
    with pytest.raises(AuditInputError, match=r"'cr.csv' has data rows with more fields than its header's 1 names") as e:
        read_table(b"a\rb,c\n1,2\n", name="cr.csv")
    one_line(e)


def test_hostile_file_name_gives_one_line(tmp_path):
    name = "evil\nname\x1b[31mred\r.csv"
    with pytest.raises(AuditInputError) as e:
        read_table(b"y,y\n0,1\n", name=name)
    msg = one_line(e)
    assert "\\n" in msg and "\\x1b" in msg
    with pytest.raises(AuditInputError) as e:
        read_table(tmp_path / "no\nsuch\x1b.csv")
    one_line(e)


def test_hostile_column_name_is_quoted_on_one_line():
    with pytest.raises(AuditInputError, match=r"column name 'a\\x1b\[2Jb' more than once") as e:
        read_table(b'y,"a\x1b[2Jb","a\x1b[2Jb"\n0,1,2\n', name="t.csv")
    one_line(e)


def test_nul_bytes_and_misnamed_binaries():
    with pytest.raises(AuditInputError, match=r"NUL byte at line 2"):
        read_table(b"y,p\n0,\x001\n", name="t.csv")
    buf = io.BytesIO()
    pd.DataFrame({"y": [0, 1]}).to_excel(buf, index=False)
    with pytest.raises(AuditInputError, match=r"looks like a zip archive \(an Excel .xlsx workbook\?\)"):
        read_table(buf.getvalue() + b"\x00", name="book.csv")


# ------------------------------------------------------------------------------------- delimiters

@pytest.mark.parametrize("sep,name", [(",", "t.csv"), (";", "t.csv"), ("\t", "t.csv"), ("|", "t.csv"),
                                      ("\t", "t.tsv"), (";", "t.txt")])
def test_delimiter_found_from_header(sep, name):
    df, info = read_table(csv_text(sep=sep).encode(), name=name)
    assert df.columns.tolist() == ["y", "p", "lender"] and info.delimiter == sep
    assert df["p"].tolist() == [0.12, 0.87, 0.40]


def test_delimiter_ignores_quoted_candidates():
    df, info = read_table(b'"a;b",c\n"1;2",3\n', name="t.csv")
    assert df.columns.tolist() == ["a;b", "c"] and info.delimiter == ","


def test_quoted_semicolon_table_says_what_it_looks_like():
    # issue 11 item 8: a ;-separated export whose every line is quoted
    with pytest.raises(AuditInputError, match=r"reads as one column named 'rownames;health;age'; it looks like "
                                              r"values separated by semicolons inside quotes"):
        read_table(b'"rownames;health;age"\n"1;good;30"\n', name="t.csv")


def test_rows_wider_than_header_are_refused_not_shifted():
    # pandas would otherwise take the first column as the index and shift every name by one
    for raw in [b"y,p\n0,0.1,x\n1,0.2\n", b"y,p\n0,0.1,\n1,0.2,x\n", b"y,p\n0,0.1,,\n1,0.2,,\n"]:
        with pytest.raises(AuditInputError, match=r"more fields than its header's 2 names"):
            read_table(raw, name="t.csv")
    # one empty field after every line (a delimiter at each line's end) loses nothing: read as is
    df, _ = read_table(b"y,p\n0,0.1,\n1,0.2,\n", name="t.csv")
    assert df.to_dict("list") == {"y": [0, 1], "p": [0.1, 0.2]}
    with pytest.raises(AuditInputError, match=r"not valid CSV: Expected 2 fields in line 3, saw 3"):
        read_table(b"y,p\n0,0.1\n1,0.2,x\n", name="t.csv")


# ------------------------------------------------------------------------------------- formats

def _frame():
    return pd.DataFrame({"y": [0, 1, 0], "p": [0.12, 0.87, 0.4], "lender": ["Société", "Müller", "north"]})


@pytest.mark.parametrize("ext,pack", [
    ("csv.gz", lambda b: gzip.compress(b, mtime=0)), ("csv.bz2", bz2.compress), ("csv.xz", lzma.compress),
    ("tsv.gz", lambda b: gzip.compress(b, mtime=0)),
])
def test_compressed_csv(ext, pack):
    sep = "\t" if ext.startswith("tsv") else ","
    df, info = read_table(pack(csv_text(sep=sep).encode()), name="t." + ext)
    pd.testing.assert_frame_equal(df, _frame(), check_dtype=False)
    with pytest.raises(AuditInputError, match=r"is not a readable .* archive .*cut short or damaged") as e:
        read_table(pack(csv_text(sep=sep).encode())[:-7], name="t." + ext)
    one_line(e)


def _zip(members):
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        for n, b in members.items():
            zf.writestr(n, b)
    return buf.getvalue()


def test_zipped_csv():
    df, _ = read_table(_zip({"inner.csv": csv_text().encode()}), name="t.csv.zip")
    pd.testing.assert_frame_equal(df, _frame(), check_dtype=False)
    df, _ = read_table(_zip({"inner.tsv": csv_text(sep="\t").encode()}), name="t.zip")
    assert df.columns.tolist() == ["y", "p", "lender"]
    with pytest.raises(AuditInputError, match=r"holds 2 files; expected one CSV file"):
        read_table(_zip({"a.csv": b"y\n1\n", "b.csv": b"y\n1\n"}), name="t.csv.zip")
    with pytest.raises(AuditInputError, match=r"compressed .parquet; only compressed CSV/TSV"):
        read_table(gzip.compress(b"PAR1"), name="t.parquet.gz")


def test_parquet_problems():
    import pyarrow as pa
    import pyarrow.parquet as pq

    def pq_bytes(table):
        buf = io.BytesIO()
        pq.write_table(table, buf)
        return buf.getvalue()

    nested = pa.table({"y": [0, 1], "tags": [[1, 2], [3]]})
    with pytest.raises(AuditInputError, match=r"column 'tags' of nested type 'list<element: int64>'"):
        read_table(pq_bytes(nested), name="t.parquet")
    dup = pa.Table.from_arrays([pa.array([0, 1]), pa.array([1, 0])], names=["y", "y"])
    with pytest.raises(AuditInputError, match=r"column name 'y' more than once"):
        read_table(pq_bytes(dup), name="t.parquet")
    with pytest.raises(AuditInputError, match=r"'t.parquet' is not a readable Parquet file"):
        read_table(b"PAR1 not really", name="t.parquet")


def test_excel_reads_and_refuses_duplicates_and_garbage():
    buf = io.BytesIO()
    _frame().to_excel(buf, index=False)
    df, _ = read_table(buf.getvalue(), name="t.xlsx")
    pd.testing.assert_frame_equal(df, _frame(), check_dtype=False)
    buf = io.BytesIO()
    pd.DataFrame([[0, 1, 2]], columns=["y", "p", "x"]).rename(columns={"x": "p"}).to_excel(buf, index=False)
    with pytest.raises(AuditInputError, match=r"'t.xlsx' has the column name 'p' more than once"):
        read_table(buf.getvalue(), name="t.xlsx")
    buf = io.BytesIO()   # a real column that only looks like pandas' renaming is kept
    pd.DataFrame([[0, 1, 2]], columns=["y", "p", "p.1"]).to_excel(buf, index=False)
    assert read_table(buf.getvalue(), name="t.xlsx")[0].columns.tolist() == ["y", "p", "p.1"]
    with pytest.raises(AuditInputError, match=r"not a readable Excel file \(not a zip archive"):
        read_table(b"y,p\n0,1\n", name="t.xlsx")
    with pytest.raises(AuditInputError, match=r"old-style .xls workbook"):
        read_table(b"\xd0\xcf\x11\xe0", name="t.xls")


# ------------------------------------------------------------------------------------- limits

def test_long_line_is_refused():
    raw = b"y,p,note\n0,0.1,a\n1,0.2," + b"x" * (read_mod.MAX_LINE_BYTES + 10) + b"\n"
    with pytest.raises(AuditInputError, match=r"has a line longer than 1,048,576 bytes \(line 3\)"):
        read_table(raw, name="t.csv")


def test_long_quoted_field_spread_over_lines_is_refused(monkeypatch):
    monkeypatch.setattr(read_mod, "MAX_LINE_BYTES", 1000)
    field = "\n".join(["z" * 90] * 40)                         # 3,639 characters, no line over 1,000
    raw = f'y,p,note\n0,0.1,"{field}"\n1,0.2,b\n'.encode()
    with pytest.raises(AuditInputError, match=r"value longer than 1,000 characters in column 'note'"):
        read_table(raw, name="t.csv")


def test_header_of_100000_columns_is_refused():
    raw = ",".join(f"c{i}" for i in range(100_000)).encode() + b"\n" + b"1\n"
    with pytest.raises(AuditInputError, match=r"100,000 columns in its header; at most 10,000"):
        read_table(raw, name="wide.csv")


def test_decompression_is_capped(monkeypatch):
    monkeypatch.setattr(read_mod, "MAX_UNPACKED_BYTES", 1 << 20)
    bomb = b"y,p\n" + b"0,0.5\n" * 400_000                        # 2.4 MB unpacked
    for name, pack in [("b.csv.gz", gzip.compress), ("b.csv.bz2", bz2.compress), ("b.csv.xz", lzma.compress),
                       ("b.csv.zip", lambda b: _zip({"b.csv": b}))]:
        with pytest.raises(AuditInputError, match=r"unpacks to more than 1,048,576 bytes; refused"):
            read_table(pack(bomb), name=name)


def test_excel_bomb_is_refused_before_unpacking(monkeypatch):
    def never(*a, **k):
        raise AssertionError("openpyxl was asked to unpack a refused workbook")

    buf = io.BytesIO()
    _frame().to_excel(buf, index=False)
    members = {n: zipfile.ZipFile(buf).read(n) for n in zipfile.ZipFile(buf).namelist()}
    members["xl/media/padding.bin"] = bytes(20_000_000)            # 20 MB of zeros packs to ~20 KB
    bomb = _zip(members)
    monkeypatch.setattr(pd, "read_excel", never)
    with pytest.raises(AuditInputError, match=r"unpacks to [\d,]+ times its size; refused above 100:1"):
        read_table(bomb, name="bomb.xlsx")
    monkeypatch.setattr(read_mod, "MAX_XLSX_UNPACKED_BYTES", 1_000_000)
    with pytest.raises(AuditInputError, match=r"unpacks to [\d,]+ bytes; at most 1,000,000 are read"):
        read_table(bomb, name="bomb.xlsx")


# ------------------------------------------------------------------------------------- basics

def test_source_info_and_empty_inputs(tmp_path):
    import hashlib

    raw = csv_text().encode()
    (tmp_path / "t.csv").write_bytes(raw)
    df, info = read_table(tmp_path / "t.csv")
    assert info.name == "t.csv" and info.n_bytes == len(raw)
    assert info.sha256 == hashlib.sha256(raw).hexdigest()
    for raw, msg in [(b"", "is empty"), (b" \n\n", "is empty"), (b"y,p\n", "header but no data rows"),
                     (gzip.compress(b""), "is empty once unpacked")]:
        with pytest.raises(AuditInputError, match=msg):
            read_table(raw, name="t.csv.gz" if msg.endswith("unpacked") else "t.csv")
    with pytest.raises(AuditInputError, match=r"is a folder"):
        read_table(tmp_path)
