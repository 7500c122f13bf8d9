"""Benchmark: the whole Fissure audit against peers that compute the same slice sums.

Builds a 1,000,000-row synthetic table with 12 categorical attributes (cardinalities
2, 3, 4, 5, 6, 7, 8, 10, 12, 3, 4, 50: 12 single families + 66 pairs = 78 families) and
times, in this one process and on the same in-memory data:

* Fissure: ``audit.run`` end to end (checks, encoding, tally, metrics, intervals, tests,
  BH correction, ranking), like-for-like without ROC AUC, and separately with AUC;
* pandas: ``groupby(..., observed=True, sort=False).sum()`` over precomputed indicator
  and loss columns, one call per family;
* polars: ``group_by(...).agg(sum ...)`` per family (if installed);
* DuckDB: one ``GROUP BY GROUPING SETS`` query over the 78 families (if installed).

Each peer computes, per slice, n, tp, fp, fn, tn, Σ log loss, Σ log loss², Σ Brier and
Σ Brier² — the sums Fissure derives everything from. Counts of every peer are checked
against Fissure's. Timings are the best of ``--repeat`` runs after one warm-up; machines
here are shared, so read the ratios, not the seconds.

    python bench/slices_bench.py [--rows 1000000] [--repeat 3]
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
from audit.tally import row_losses  # noqa: E402

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


def best(fn, repeat):
    fn()  # warm-up (numba cache load, query planning)
    times = []
    out = None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return min(times), out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description="Fissure slice-statistics benchmark")
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--json", help="also write results to this JSON file")
    a = ap.parse_args(argv)

    print(f"building {a.rows:,} rows x {len(CARDS)} categorical attributes ...", flush=True)
    df = build(a.rows)
    ext = prepared(df)
    n_slices = sum(CARDS) + sum(x * y for x, y in itertools.combinations(CARDS, 2))
    print(f"{len(families())} families, {n_slices:,} possible slices")

    res = {}
    t_audit, r = best(lambda: audit.run(df, label="y", score="p", auc_max_order=-1), a.repeat)
    res["fissure audit (no AUC)"] = t_audit
    t_auc, r_auc = best(lambda: audit.run(df, label="y", score="p"), a.repeat)
    res["fissure audit (with AUC, orders 0-1)"] = t_auc
    res["  of which tally"] = r.timings["tally"]
    sl = r.slices.set_index("slice")

    def check(name, fam, key_values, counts):
        slice_name = " & ".join(f"{c}={v}" for c, v in zip(fam, key_values))
        got = sl.loc[slice_name, ["tp", "fp", "fn", "tn"]].to_numpy(dtype=np.int64)
        if not np.array_equal(got, np.asarray(counts, dtype=np.int64)):
            raise SystemExit(f"{name} disagrees with Fissure on {slice_name}: {counts} vs {got.tolist()}")

    t, out = best(lambda: peer_pandas(ext), a.repeat)
    res["pandas groupby-sum"] = t
    checked = 0
    for fam, g in out.items():
        for key, row in g.iterrows():
            check("pandas", fam, key if isinstance(key, tuple) else (key,), row[["tp", "fp", "fn", "tn"]].tolist())
            checked += 1
    print(f"pandas peer: {checked:,} slices agree with Fissure's counts")

    try:
        import polars as pl
    except ImportError:
        print("polars not installed: skipped")
    else:
        pdf = pl.from_pandas(ext)
        t, out = best(lambda: peer_polars(pdf), a.repeat)
        res["polars group_by"] = t
        checked = 0
        for fam, g in out.items():
            for row in g.iter_rows(named=True):
                check("polars", fam, [row[c] for c in fam], [row[v] for v in ("tp", "fp", "fn", "tn")])
                checked += 1
        print(f"polars peer: {checked:,} slices agree with Fissure's counts")

    try:
        import duckdb
    except ImportError:
        print("duckdb not installed: skipped")
    else:
        con = duckdb.connect()
        con.execute("SET enable_progress_bar=false")
        con.register("ext", ext)
        t, out = best(lambda: peer_duckdb(con), a.repeat)
        res["duckdb GROUPING SETS"] = t
        keys = [f"a{i:02d}" for i in range(len(CARDS))]
        present = out[keys].notna().to_numpy()
        checked = 0
        for (i, row), mask in zip(out.iterrows(), present):
            fam = tuple(k for k, m in zip(keys, mask) if m)
            check("duckdb", fam, [row[c] for c in fam], [int(row[v]) for v in ("tp", "fp", "fn", "tn")])
            checked += 1
        print(f"duckdb peer: {checked:,} slices agree with Fissure's counts")

    print()
    print(f"{'what':<40} {'seconds':>9} {'peer / fissure':>15}")
    for k, v in res.items():
        ratio = "" if k.startswith(("fissure", "  ")) else f"{v / t_audit:>14.1f}x"
        print(f"{k:<40} {v:>9.3f} {ratio:>15}")
    print()
    goals = {"polars group_by": 3.0, "duckdb GROUPING SETS": 6.0}
    for k, goal in goals.items():
        if k in res:
            ratio = res[k] / t_audit
            print(f"goal: fissure audit >= {goal:g}x faster than {k}: {ratio:.1f}x -> {'met' if ratio >= goal else 'NOT met'}")
            ratio_auc = res[k] / t_auc
            print(f"      (with per-slice ROC AUC included: {ratio_auc:.1f}x)")
    print(f"slices in the audit: {len(r.slices):,}; tested {int((r.slices['status'] == 'tested').sum()):,}; "
          f"numba threads {audit.tally.numba.get_num_threads() if audit.tally.numba else 0}")
    if a.json:
        with open(a.json, "w") as fh:
            json.dump(res, fh, indent=2)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
