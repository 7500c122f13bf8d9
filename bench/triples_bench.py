"""Benchmark: the W1 audit with triples of values (max_order=3) beside the order-2 audit.

W1 is bench/slices_bench.py's table: 1,000,000 rows, 12 categorical attributes of
cardinalities 2, 3, 4, 5, 6, 7, 8, 10, 12, 3, 4, 50 (78 families of orders 1-2; 220 triple
families, 120,558 possible triples, none pruned at this size). Each contender runs once as a
warm-up (numba's cached kernels load), then ``--repeat`` rounds run them in turn, so they share
the machine's load. Printed: best and median times and the ratio of each to the order-2 audit
(median over rounds of the ratio in the same round). Goal: order 3 at most 5x order 2.

    python bench/triples_bench.py [--rows 1000000] [--repeat 3]
"""
from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import audit  # noqa: E402
from slices_bench import build  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description="Fissure triples benchmark")
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args(argv)
    print(f"building {a.rows:,} rows (W1) ...", flush=True)
    df = build(a.rows)
    O2, O3, O3L, O2L = ("order 2 (error rate)", "order 3 (error rate)", "order 3 (log loss: loss sums of triples)",
                        "order 2 (log loss)")
    runs = {
        O2: lambda: audit.run(df, label="y", score="p", auc_max_order=-1),
        O3: lambda: audit.run(df, label="y", score="p", auc_max_order=-1, max_order=3),
        O2L: lambda: audit.run(df, label="y", score="p", auc_max_order=-1, metric="log_loss"),
        O3L: lambda: audit.run(df, label="y", score="p", auc_max_order=-1, max_order=3, metric="log_loss"),
    }
    out = {k: f() for k, f in runs.items()}  # warm-up
    times = {k: [] for k in runs}
    stages = {k: [] for k in runs}
    for _ in range(a.repeat):
        for k, f in runs.items():
            t = time.perf_counter()
            out[k] = f()
            times[k].append(time.perf_counter() - t)
            stages[k].append(dict(out[k].timings))
    tri = out[O3].method["triples"]
    print(f"triples: {tri['families']} families, {tri['possible']:,} possible, {tri['pruned']:,} pruned, "
          f"{tri['listed']:,} listed, {tri['tested']:,} tested, {tri['flagged']} flagged")
    ex = out[O3].method["explanations"]
    print(f"order 3: {ex['flagged']} flagged, {ex['findings']} findings, family m = {out[O3].family_size:,}")
    base = np.array(times[O2])
    base_l = np.array(times[O2L])
    print(f"{'contender':45s} {'best s':>8s} {'median s':>9s} {'ratio to order 2':>17s}")
    for k, v in times.items():
        v = np.array(v)
        ref = base_l if "log loss" in k else base
        ratio = float(np.median(v / ref))
        st = stages[k][int(np.argmin(v))]
        print(f"{k:45s} {v.min():8.3f} {np.median(v):9.3f} {ratio:17.2f}   "
              + ", ".join(f"{s} {st[s]:.2f}" for s in ("input", "tally", "statistics") if s in st))
    r = float(np.median(np.array(times[O3]) / base))
    print(f"goal (order 3 <= 5x order 2, error rate): {'met' if r <= 5 else 'NOT met'} ({r:.2f}x)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
