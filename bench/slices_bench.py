"""Benchmark: the whole Fissure audit against peers that compute the same slice sums.

Builds a 1,000,000-row synthetic table with 12 categorical attributes (cardinalities
2, 3, 4, 5, 6, 7, 8, 10, 12, 3, 4, 50: 12 single families + 66 pairs = 78 families) and
times, in this one process and on the same in-memory data:

* Fissure: ``audit.run`` end to end (checks, encoding, tally, metrics, intervals, tests,
  BH correction, ranking), like-for-like without ROC AUC, and separately with AUC; and the
  same audit of the same table written to a Parquet file and read back in chunks of
  ``--chunk-rows`` rows (``audit.run(path, chunk_rows=...)``: two passes over the file,
  memory bounded by the chunk), whose counts must equal the in-memory run's;
* pandas: ``groupby(..., observed=True, sort=False).sum()`` over precomputed indicator
  and loss columns, one call per family;
* polars: ``group_by(...).agg(sum ...)`` per family (if installed);
* DuckDB: one ``GROUP BY GROUPING SETS`` query over the 78 families (if installed).

Each peer computes, per slice, n, tp, fp, fn, tn, Σ log loss, Σ log loss², Σ Brier and
Σ Brier² — the sums Fissure derives everything from. Counts of every peer are checked
against Fissure's.

Every contender runs once as a warm-up, then ``--repeat`` rounds follow in which each
contender runs once, in turn. The machines here are shared and their speed drifts over
seconds, so running the contenders side by side in each round keeps them under the same
load. Two ratios are printed for each peer: best peer time over best Fissure time, and the
median over rounds of (peer time / Fissure time) in the same round. Read the ratios, not
the seconds.

    python bench/slices_bench.py [--rows 1000000] [--repeat 5] [--skip pandas]
"""
from __future__ import annotations

import argparse
import itertools
import json
import os
import sys
import time

import numpy as np
import pandas as pd

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
import audit  # noqa: E402
from audit.core.tally import row_losses  # noqa: E402

CARDS = [2, 3, 4, 5, 6, 7, 8, 10, 12, 3, 4, 50]


def build(rows: int, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    cols = {}
    for i, c in enumerate(CARDS):
        levels = [f"v{j:02d}" for j in range(c)]
        codes = rng.integers(0, c, rows)
        cols[f"a{i:02d}"] = pd.Categorical.from_codes(codes, categories=levels)
    y = rng.integers(0, 2, rows).astype(np.int8)
    p = np.clip(np.where(y == 1, rng.beta(4, 3, rows), rng.beta(3, 4, rows)), 0, 1)
    df = pd.DataFrame(cols)
    df["y"] = y
    df["p"] = p
    return df


def families():
    n = len(CARDS)
    return [(f"a{i:02d}",) for i in range(n)] + [(f"a{i:02d}", f"a{j:02d}") for i, j in itertools.combinations(range(n), 2)]


def prepared(df):
    y = df["y"].to_numpy()
    yhat = (df["p"].to_numpy() >= 0.5).astype(np.int8)
    ll, br = row_losses(y, df["p"].to_numpy())
    ext = df[[c for c in df.columns if c.startswith("a")]].copy()
    ext["tp"] = ((y == 1) & (yhat == 1)).astype(np.int32)
    ext["fp"] = ((y == 0) & (yhat == 1)).astype(np.int32)
    ext["fn"] = ((y == 1) & (yhat == 0)).astype(np.int32)
    ext["tn"] = ((y == 0) & (yhat == 0)).astype(np.int32)
    ext["ll"], ext["ll2"], ext["br"], ext["br2"] = ll, ll * ll, br, br * br
    return ext


VALUES = ["tp", "fp", "fn", "tn", "ll", "ll2", "br", "br2"]


def peer_pandas(ext):
    out = {}
    for fam in families():
        out[fam] = ext.groupby(list(fam), observed=True, sort=False)[VALUES].sum()
    return out


def peer_polars(pdf):
    import polars as pl

    aggs = [pl.len().alias("n")] + [pl.col(v).sum() for v in VALUES]
    return {fam: pdf.group_by(list(fam)).agg(aggs) for fam in families()}


def peer_duckdb(con):
    sets = ", ".join("(" + ", ".join(f) + ")" for f in families())
    keys = ", ".join(f"a{i:02d}" for i in range(len(CARDS)))
    q = (f"SELECT {keys}, COUNT(*) AS n, " + ", ".join(f"SUM({v}) AS {v}" for v in VALUES)
         + f" FROM ext GROUP BY GROUPING SETS ({sets})")
    return con.execute(q).df()


def rounds(contenders, repeat):
    """Warm each contender up once, then run them in turn ``repeat`` times; per-contender times."""
    outs = {name: fn() for name, fn in contenders.items()}  # warm-up (numba cache load, query planning)
    times = {name: [] for name in contenders}
    for _ in range(repeat):
        for name, fn in contenders.items():
            t = time.perf_counter()
            outs[name] = fn()
            times[name].append(time.perf_counter() - t)
    return {k: np.array(v) for k, v in times.items()}, outs


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description="Fissure slice-statistics benchmark")
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--repeat", type=int, default=5, help="rounds after the warm-up (default 5)")
    ap.add_argument("--skip", default="", help="comma-separated peers to leave out: pandas, polars, duckdb")
    ap.add_argument("--json", help="also write results to this JSON file")
    ap.add_argument("--chunk-rows", type=int, default=250_000, help="rows per chunk of the streamed run (250,000)")
    a = ap.parse_args(argv)
    skip = {x.strip() for x in a.skip.split(",") if x.strip()}

    print(f"building {a.rows:,} rows x {len(CARDS)} categorical attributes ...", flush=True)
    df = build(a.rows)
    ext = prepared(df)
    n_slices = sum(CARDS) + sum(x * y for x, y in itertools.combinations(CARDS, 2))
    print(f"{len(families())} families, {n_slices:,} possible slices")

    FIS, FIS_AUC = "fissure audit (no AUC)", "fissure audit (with AUC, orders 0-1)"
    FIS_CHUNK = f"fissure audit, Parquet in chunks of {a.chunk_rows:,}"
    FIS_K4 = "fissure audit, 4-class label"
    rng = np.random.default_rng(7)
    dk = df[[c for c in df.columns if c.startswith("a")]].copy()
    logits = rng.normal(0, 1, (a.rows, 4))
    yk = rng.integers(0, 4, a.rows)
    logits[np.arange(a.rows), yk] += 1.0
    probs = np.exp(logits) / np.exp(logits).sum(axis=1, keepdims=True)
    dk["y"] = np.array(["c0", "c1", "c2", "c3"])[yk]
    for j in range(4):
        dk[f"p{j}"] = probs[:, j]
    score4 = {f"c{j}": f"p{j}" for j in range(4)}
    import tempfile

    tmp = tempfile.mkdtemp(prefix="fissure-bench-")
    parquet = os.path.join(tmp, "w1.parquet")
    df.to_parquet(parquet, row_group_size=a.chunk_rows)
    contenders = {
        FIS: lambda: audit.run(df, label="y", score="p", auc_max_order=-1),
        FIS_AUC: lambda: audit.run(df, label="y", score="p"),
        FIS_CHUNK: lambda: audit.run(parquet, label="y", score="p", auc_max_order=-1, chunk_rows=a.chunk_rows),
        FIS_K4: lambda: audit.run(dk, label="y", score=score4),
    }
    if "pandas" not in skip:
        contenders["pandas groupby-sum"] = lambda: peer_pandas(ext)
    try:
        import polars as pl
    except ImportError:
        print("polars not installed: skipped")
    else:
        if "polars" not in skip:
            pdf = pl.from_pandas(ext)
            contenders["polars group_by"] = lambda: peer_polars(pdf)
    try:
        import duckdb
    except ImportError:
        print("duckdb not installed: skipped")
    else:
        if "duckdb" not in skip:
            con = duckdb.connect()
            con.execute("SET enable_progress_bar=false")
            con.register("ext", ext)
            contenders["duckdb GROUPING SETS"] = lambda: peer_duckdb(con)

    print(f"{len(contenders)} contenders, 1 warm-up + {a.repeat} interleaved rounds ...", flush=True)
    times, outs = rounds(contenders, a.repeat)
    r = outs[FIS]
    sl = r.slices.set_index("slice")
    rc = outs[FIS_CHUNK]
    same = all(np.array_equal(r.slices[c].to_numpy(), rc.slices[c].to_numpy()) for c in ("n", "tp", "fp", "fn", "tn"))
    if not same:
        raise SystemExit("the chunked run's counts differ from the in-memory run's")
    print(f"chunked run: counts of all {len(rc.slices):,} slices equal the in-memory run's")

    cells = ["tp", "fp", "fn", "tn"]

    def pandas_rows(out):
        for fam, g in out.items():
            for key, row in g.iterrows():
                yield fam, key if isinstance(key, tuple) else (key,), row[cells].tolist()

    def polars_rows(out):
        for fam, g in out.items():
            for row in g.iter_rows(named=True):
                yield fam, [row[c] for c in fam], [row[v] for v in cells]

    def duckdb_rows(out):
        keys = [f"a{i:02d}" for i in range(len(CARDS))]
        for (_, row), mask in zip(out.iterrows(), out[keys].notna().to_numpy()):
            fam = tuple(k for k, m in zip(keys, mask) if m)
            yield fam, [row[c] for c in fam], [int(row[v]) for v in cells]

    for name, rows in (("pandas groupby-sum", pandas_rows), ("polars group_by", polars_rows),
                       ("duckdb GROUPING SETS", duckdb_rows)):
        if name not in outs:
            continue
        checked = 0
        for fam, key_values, counts in rows(outs[name]):
            slice_name = " & ".join(f"{c}={v}" for c, v in zip(fam, key_values))
            got = sl.loc[slice_name, cells].to_numpy(dtype=np.int64)
            if not np.array_equal(got, np.asarray(counts, dtype=np.int64)):
                raise SystemExit(f"{name} disagrees with Fissure on {slice_name}: {counts} vs {got.tolist()}")
            checked += 1
        print(f"{name.split()[0]} peer: {checked:,} slices agree with Fissure's counts")

    base = times[FIS]
    print()
    print(f"{'what':<40} {'best s':>8} {'median s':>9} {'best/best':>10} {'paired median':>14}")
    res = {}
    for k, v in times.items():
        peer = not k.startswith("fissure")
        ratio = f"{v.min() / base.min():>9.1f}x" if peer else ""
        paired = f"{np.median(v / base):>13.1f}x" if peer else ""
        print(f"{k:<40} {v.min():>8.3f} {np.median(v):>9.3f} {ratio:>10} {paired:>14}")
        res[k] = {"best": float(v.min()), "median": float(np.median(v)), "runs": v.tolist()}
    print(f"{'  of which tally (last round)':<40} {r.timings['tally']:>8.3f}")
    print()
    goals = {"polars group_by": 3.0, "duckdb GROUPING SETS": 6.0}
    for k, goal in goals.items():
        if k in times:
            best_ratio = times[k].min() / base.min()
            paired = times[k] / base
            print(f"goal: fissure audit >= {goal:g}x faster than {k}: best/best {best_ratio:.1f}x, "
                  f"paired median {np.median(paired):.1f}x (rounds {paired.min():.1f}-{paired.max():.1f}x) -> "
                  f"{'met' if best_ratio >= goal else 'NOT met'}")
            paired_auc = times[k] / times[FIS_AUC]
            print(f"      with per-slice ROC AUC included: best/best {times[k].min() / times[FIS_AUC].min():.1f}x, "
                  f"paired median {np.median(paired_auc):.1f}x (rounds {paired_auc.min():.1f}-{paired_auc.max():.1f}x)")
    k4 = times[FIS_K4] / base
    print(f"goal: 4-class audit <= 2x the binary audit: best/best {times[FIS_K4].min() / base.min():.2f}x, paired "
          f"median {np.median(k4):.2f}x -> {'met' if times[FIS_K4].min() / base.min() <= 2 else 'NOT met'}")
    chunk = times[FIS_CHUNK] / base
    print(f"chunked Parquet run / in-memory run: best/best {times[FIS_CHUNK].min() / base.min():.1f}x, paired median "
          f"{np.median(chunk):.1f}x (it reads the file twice: the fit pass, then the tally pass)")
    import numba

    print(f"slices in the audit: {len(r.slices):,}; tested {int((r.slices['status'] == 'tested').sum()):,}; "
          f"numba threads {numba.get_num_threads()}")
    import shutil

    shutil.rmtree(tmp, ignore_errors=True)
    if a.json:
        with open(a.json, "w") as fh:
            json.dump(res, fh, indent=2)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
