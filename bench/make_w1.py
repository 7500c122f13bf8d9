"""Write a W1-shaped predictions table to Parquet, one row group at a time.

The W1 shape is the benchmark table of ``bench/slices_bench.py``: 12 categorical attributes
``a00``..``a11`` of cardinalities 2, 3, 4, 5, 6, 7, 8, 10, 12, 3, 4, 50 (values ``v00``,
``v01``, ...), a 0/1 label ``y`` and a probability ``p`` of the positive class (beta-distributed,
higher for positives). Attributes are written as Parquet dictionary columns (pandas reads them
back as categoricals). Each row group is generated, written and dropped before the next, so
memory is bounded by one row group whatever ``--rows`` is; row group ``g`` draws from
``numpy.random.default_rng([seed, g])``, so a file is the same on every machine.

    python bench/make_w1.py OUT.parquet [--rows 10000000] [--row-group 1000000] [--parts K]

With ``--parts K`` OUT is a folder of K Parquet files (a partitioned dataset) instead.
"""
from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

CARDS = [2, 3, 4, 5, 6, 7, 8, 10, 12, 3, 4, 50]
NAMES = [f"a{i:02d}" for i in range(len(CARDS))]


def schema() -> pa.Schema:
    fields = [pa.field(n, pa.dictionary(pa.int8(), pa.string())) for n in NAMES]
    return pa.schema(fields + [pa.field("y", pa.int8()), pa.field("p", pa.float64())])


def row_group(rows: int, seed: int, g: int) -> pa.Table:
    """Row group ``g`` of a file made with ``seed`` (independent of the other groups)."""
    rng = np.random.default_rng([seed, g])
    cols = []
    for c in CARDS:
        codes = pa.array(rng.integers(0, c, rows, dtype=np.int8))
        cols.append(pa.DictionaryArray.from_arrays(codes, pa.array([f"v{j:02d}" for j in range(c)])))
    y = rng.integers(0, 2, rows, dtype=np.int8)
    p = np.clip(np.where(y == 1, rng.beta(4, 3, rows), rng.beta(3, 4, rows)), 0.0, 1.0)
    return pa.Table.from_arrays(cols + [pa.array(y), pa.array(p)], schema=schema())


def write(path: str, rows: int, *, row_group_rows: int = 1_000_000, parts: int = 1, seed: int = 0,
          progress: bool = False) -> list[str]:
    """Write ``rows`` rows to ``path`` (a file, or a folder of ``parts`` files); returns the files."""
    groups = [min(row_group_rows, rows - lo) for lo in range(0, rows, row_group_rows)]
    if parts > 1:
        os.makedirs(path, exist_ok=True)
        per = -(-len(groups) // parts)
        files = [os.path.join(path, f"part-{k:04d}.parquet") for k in range(-(-len(groups) // per))]
    else:
        files, per = [path], len(groups)
    g = 0
    t0 = time.perf_counter()
    for k, f in enumerate(files):
        with pq.ParquetWriter(f, schema(), compression="snappy") as w:
            for gi in range(k * per, min((k + 1) * per, len(groups))):
                w.write_table(row_group(groups[gi], seed, gi), row_group_size=groups[gi])
                g += 1
                if progress:
                    done = sum(groups[:g])
                    print(f"\r{done:,} / {rows:,} rows ({time.perf_counter() - t0:.0f} s)", end="", file=sys.stderr,
                          flush=True)
    if progress:
        print(file=sys.stderr)
    return files


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description="Write a W1-shaped Parquet table in row groups")
    ap.add_argument("out", help="output .parquet file (or folder with --parts)")
    ap.add_argument("--rows", type=int, default=10_000_000)
    ap.add_argument("--row-group", type=int, default=1_000_000, help="rows per row group (1,000,000)")
    ap.add_argument("--parts", type=int, default=1, help="write a folder of this many files")
    ap.add_argument("--seed", type=int, default=0)
    a = ap.parse_args(argv)
    files = write(a.out, a.rows, row_group_rows=a.row_group, parts=a.parts, seed=a.seed, progress=True)
    size = sum(os.path.getsize(f) for f in files)
    print(f"wrote {a.rows:,} rows to {a.out} ({len(files)} file(s), {size / 1e6:.0f} MB)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
