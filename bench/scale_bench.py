"""Benchmark at scale: one W1-shaped Parquet file, audited several ways, each in its own process.

The file (``bench/make_w1.py``: 12 categorical attributes of cardinalities 2-50, a 0/1 label,
a probability; row groups of 1,000,000 rows) is written under /tmp and deleted afterwards.
In the same run, on the same file, each contender runs in a fresh child process, whose wall
time and peak resident memory (``os.wait4``'s ``ru_maxrss``) are measured from outside:

* ``fissure stream``: ``audit.run(path, chunk_rows=N)`` — two passes over the file, memory
  bounded by the chunk (no ROC AUC, like the peers);
* ``duckdb``: one ``GROUP BY GROUPING SETS`` query over the same 78 families (12 attributes,
  66 pairs) reading the Parquet file itself, computing per slice n, tp, fp, fn, tn and the
  sums of log loss, log loss², Brier, Brier² (what Fissure derives everything from);
* ``pyarrow + in memory``: ``pyarrow.parquet.read_table(...).to_pandas()``, then ``audit.run(df)``;
* ``fissure dask``: ``audit.run(path, engine="dask", chunk_rows=N)`` on a local cluster of
  two worker processes (cluster start timed apart; the workers' own peak memory printed too).

Counts are checked equal between contenders (sums of tp, fp, fn, tn over all slices and the
number of non-empty slices). Ratios, not seconds, are the point: the machine is shared.

Each contender's ``seconds`` start after its libraries are imported (duckdb and pandas for DuckDB,
whose ``.df()`` needs pandas; Fissure's engine, pyarrow and its compiled kernels' module for
Fissure), so no contender's clock holds an import the other's does not; first-use costs (numba
kernels loaded from their cache, DuckDB's Parquet reader) stay inside. The process's whole wall
time, imports and interpreter start included, is printed beside them.

    python bench/scale_bench.py                 # 10,000,000 rows
    python bench/scale_bench.py --rows-100m     # 100,000,000 rows (about 1.3 GB of Parquet)
    python bench/scale_bench.py --file existing.parquet --skip dask
"""
from __future__ import annotations

import argparse
import itertools
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
sys.path.insert(0, ROOT)
sys.path.insert(0, HERE)

CONTENDERS = ["stream", "duckdb", "memory", "dask"]
TITLES = {"stream": "fissure stream (2 passes)", "duckdb": "duckdb GROUPING SETS", "memory": "pyarrow + in memory",
          "dask": "fissure dask (2 workers)"}
KW = dict(label="y", score="p", auc_max_order=-1)


# ----------------------------------------------------------------------------- children
def _fissure_check(res) -> dict:
    s = res.slices[res.slices["order"] >= 1]
    return {"slices": int(len(s)), **{c: int(s[c].sum()) for c in ("tp", "fp", "fn", "tn")}}


def _import_fissure() -> None:
    """Fissure's modules imported before the clock starts (as ``import duckdb`` for DuckDB)."""
    import pyarrow.parquet  # noqa: F401

    import audit.engine  # noqa: F401
    from audit.core.tally import numba_available

    if numba_available():
        import audit.core.kernels  # noqa: F401  (the import only; kernels load on first use)


def child_stream(path: str, chunk: int) -> dict:
    import audit

    _import_fissure()
    t = time.perf_counter()
    res = audit.run(path, chunk_rows=chunk, **KW)
    return {"seconds": time.perf_counter() - t, "check": _fissure_check(res)}


def child_memory(path: str, chunk: int) -> dict:
    import pyarrow.parquet as pq

    import audit

    _import_fissure()
    t = time.perf_counter()
    df = pq.read_table(path).to_pandas()
    t_read = time.perf_counter() - t
    res = audit.run(df, **KW)
    return {"seconds": time.perf_counter() - t, "read_seconds": t_read, "check": _fissure_check(res)}


def child_dask(path: str, chunk: int) -> dict:
    import resource

    from distributed import Client

    import audit
    from audit.core.distributed import start_local_cluster

    _import_fissure()
    t0 = time.perf_counter()
    scratch = tempfile.mkdtemp(prefix="fissure-dask-")
    cluster = start_local_cluster(2, local_directory=scratch)
    client = Client(cluster)
    client.run(_import_fissure)  # the workers import Fissure before the clock starts, as this process did
    started = time.perf_counter() - t0
    t = time.perf_counter()
    res = audit.run(path, chunk_rows=chunk, engine="dask", scheduler=client, **KW)
    sec = time.perf_counter() - t
    peaks = client.run(lambda: resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)
    client.close()
    cluster.close()
    shutil.rmtree(scratch, ignore_errors=True)
    return {"seconds": sec, "cluster_start": started, "worker_peak_mb": [v / 1024 for v in peaks.values()],
            "check": _fissure_check(res)}


def duckdb_query() -> str:
    from make_w1 import CARDS

    names = [f"a{i:02d}" for i in range(len(CARDS))]
    fams = [(n,) for n in names] + list(itertools.combinations(names, 2))
    sets = ", ".join("(" + ", ".join(f) + ")" for f in fams)
    # per row: cell from y and (p >= 0.5); log loss with p clipped to [1e-15, 1 - 1e-15]; Brier
    return f"""
    WITH r AS (
      SELECT {', '.join(names)}, y, (p >= 0.5)::INT AS yhat,
             -LN(CASE WHEN y = 1 THEN GREATEST(LEAST(p, 1 - 1e-15), 1e-15)
                      ELSE 1 - GREATEST(LEAST(p, 1 - 1e-15), 1e-15) END) AS ll,
             (p - y) * (p - y) AS br
      FROM read_parquet(?))
    SELECT {', '.join(names)}, GROUPING({', '.join(names)}) AS gid, COUNT(*) AS n,
           SUM(CASE WHEN y = 1 AND yhat = 1 THEN 1 ELSE 0 END) AS tp,
           SUM(CASE WHEN y = 0 AND yhat = 1 THEN 1 ELSE 0 END) AS fp,
           SUM(CASE WHEN y = 1 AND yhat = 0 THEN 1 ELSE 0 END) AS fn,
           SUM(CASE WHEN y = 0 AND yhat = 0 THEN 1 ELSE 0 END) AS tn,
           SUM(ll) AS ll, SUM(ll * ll) AS ll2, SUM(br) AS br, SUM(br * br) AS br2
    FROM r GROUP BY GROUPING SETS ({sets})"""


def child_duckdb(path: str, chunk: int) -> dict:
    import duckdb
    import pandas  # noqa: F401  (.df() below needs it; imported before the clock, as Fissure's modules)

    con = duckdb.connect()
    con.execute("SET enable_progress_bar=false")
    t = time.perf_counter()
    out = con.execute(duckdb_query(), [path]).df()
    sec = time.perf_counter() - t
    return {"seconds": sec, "threads": con.execute("SELECT current_setting('threads')").fetchall()[0][0],
            "check": {"slices": int(len(out)), **{c: int(out[c].sum()) for c in ("tp", "fp", "fn", "tn")}}}


# ----------------------------------------------------------------------------- parent
def measure(name: str, path: str, chunk: int) -> dict:
    """Run one contender in a child process: wall time, peak RSS (MB), and what it printed."""
    cmd = [sys.executable, os.path.abspath(__file__), "--child", name, "--file", path, "--chunk-rows", str(chunk)]
    with tempfile.TemporaryFile("w+") as out, tempfile.TemporaryFile("w+") as err:
        t = time.perf_counter()
        p = subprocess.Popen(cmd, stdout=out, stderr=err, text=True, cwd=ROOT)
        _, status, usage = os.wait4(p.pid, 0)  # this child's own rusage, not every child's so far
        wall = time.perf_counter() - t
        p.returncode = os.waitstatus_to_exitcode(status)
        out.seek(0)
        err.seek(0)
        out, err = out.read(), err.read()
    if p.returncode != 0:
        return {"error": (err.strip().splitlines() or ["exit " + str(p.returncode)])[-1], "wall": wall}
    res = json.loads(out.strip().splitlines()[-1])
    res["wall"] = wall
    res["peak_mb"] = usage.ru_maxrss / 1024  # kilobytes on Linux
    return res


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description="Fissure at scale: streamed audit vs DuckDB vs read-then-audit vs Dask")
    ap.add_argument("--rows", type=int, default=10_000_000)
    ap.add_argument("--rows-100m", action="store_true", help="100,000,000 rows")
    ap.add_argument("--file", help="use this W1 Parquet file instead of writing one")
    ap.add_argument("--chunk-rows", type=int, default=1_000_000)
    ap.add_argument("--skip", default="", help="comma-separated: stream, duckdb, memory, dask")
    ap.add_argument("--rounds", type=int, default=1,
                    help="run the contenders in turn this many times (duckdb once); the best of each is compared")
    ap.add_argument("--keep", action="store_true", help="keep the generated file")
    ap.add_argument("--json", help="also write the results to this JSON file")
    ap.add_argument("--child", help=argparse.SUPPRESS)
    a = ap.parse_args(argv)
    if a.child:
        print(json.dumps(globals()["child_" + a.child](a.file, a.chunk_rows)), flush=True)
        return 0

    rows = 100_000_000 if a.rows_100m else a.rows
    skip = {x.strip() for x in a.skip.split(",") if x.strip()}
    tmp = None
    path = a.file
    if path is None:
        from make_w1 import write

        tmp = tempfile.mkdtemp(prefix="fissure-scale-", dir="/tmp")
        path = os.path.join(tmp, "w1.parquet")
        t = time.perf_counter()
        write(path, rows, progress=sys.stderr.isatty())
        print(f"wrote {rows:,} rows, {os.path.getsize(path) / 1e6:.0f} MB, in {time.perf_counter() - t:.0f} s")
    try:
        import pyarrow.parquet as pq

        rows = pq.ParquetFile(path).metadata.num_rows
        load = os.getloadavg()
        print(f"{rows:,} rows; {os.cpu_count()} cores; load average before: {load[0]:.1f} {load[1]:.1f} {load[2]:.1f}")
        results, rounds = {}, []
        for name in [c for rnd in range(a.rounds) for c in CONTENDERS if c not in skip and (rnd == 0 or c != "duckdb")]:
            load1 = os.getloadavg()[0]
            r = measure(name, path, a.chunk_rows)
            r["load_before"] = load1
            rounds.append((name, r))
            best = results.get(name)
            if best is None or ("seconds" in r and ("seconds" not in best or r["seconds"] < best["seconds"])):
                results[name] = r
            if "error" in r:
                print(f"{TITLES[name]:<30} failed: {r['error']}")
                continue
            extra = ""
            if name == "memory":
                extra = f"  (read {r['read_seconds']:.1f} s)"
            if name == "dask":
                extra = (f"  (cluster start {r['cluster_start']:.1f} s; worker peaks "
                         + ", ".join(f"{m:.0f}" for m in r["worker_peak_mb"]) + " MB)")
            print(f"{TITLES[name]:<30} {r['seconds']:7.1f} s  {rows / r['seconds'] / 1e6:6.2f} M rows/s  "
                  f"peak {r['peak_mb']:6.0f} MB  (process {r['wall']:.1f} s; load {load1:.1f}){extra}", flush=True)
        if a.rounds > 1:
            print(f"best of {a.rounds} rounds:")
            for name, r in results.items():
                if "seconds" in r:
                    print(f"  {TITLES[name]:<30} {r['seconds']:7.1f} s  peak {r['peak_mb']:6.0f} MB")
        checks = {k: v["check"] for k, v in results.items() if "check" in v}
        same = len({json.dumps(c, sort_keys=True) for c in checks.values()}) <= 1
        print("counts equal across contenders:", "yes" if same else f"NO {checks}")
        ok = {k: v for k, v in results.items() if "seconds" in v}
        if "stream" in ok:
            s = ok["stream"]
            if "duckdb" in ok:
                d = ok["duckdb"]
                print(f"duckdb / stream: {d['seconds'] / s['seconds']:.2f}x the time (goal >= 8), "
                      f"{d['peak_mb'] / s['peak_mb']:.2f}x the peak memory (goal > 1); whole processes "
                      f"(imports, interpreter start): {d['wall'] / s['wall']:.2f}x")
            if "memory" in ok:
                m = ok["memory"]
                print(f"stream / (pyarrow + in memory): {s['seconds'] / m['seconds']:.2f}x the time (goal <= 1.5), "
                      f"{s['peak_mb'] / m['peak_mb']:.2f}x the peak memory")
            if "dask" in ok:
                print(f"dask / stream (overhead of the cluster, same file): {ok['dask']['seconds'] / s['seconds']:.2f}x")
        print(f"load average after: {' '.join(f'{x:.1f}' for x in os.getloadavg())}")
        if a.json:
            with open(a.json, "w") as fh:
                json.dump({"rows": rows, "best": results, "rounds": rounds}, fh, indent=2)
    finally:
        if tmp and not a.keep:
            shutil.rmtree(tmp, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
