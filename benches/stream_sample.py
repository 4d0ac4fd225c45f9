#!/usr/bin/env python3
"""How large must a streamed run's fitting sample be? For each sample size S, a seeded
uniform sample of S rows of a large table (written by `make_big_parquet.py`) is estimated
with `flipmend estimate --bootstrap 30`, and the matrix estimated on every row is checked
against the sample's own 90 % interval: the share of its cells inside the interval (a
cell counts as inside within 0.001, as in the validity report), the mean and largest
absolute difference, and the seconds each estimate took.

    python3 benches/stream_sample.py --table /tmp/big/big2m.parquet --sizes 25000,50000,100000,200000,400000

Run from the project root after `cargo build --release`. Needs numpy and pyarrow.
"""
import argparse
import json
import os
import subprocess
import tempfile
import time

import numpy as np
import pyarrow.parquet as pq

BIN = os.path.join("target", "release", "flipmend")


def estimate(path, out, resamples):
    args = [BIN, "estimate", "--data", path, "--probs", path, "--json", out]
    if resamples:
        args += ["--bootstrap", str(resamples)]
    start = time.perf_counter()
    subprocess.run(args, check=True, stdout=subprocess.DEVNULL)
    seconds = time.perf_counter() - start
    with open(out) as f:
        return json.load(f), seconds


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--table", required=True)
    ap.add_argument("--sizes", default="25000,50000,100000,200000,400000")
    ap.add_argument("--seeds", type=int, default=2)
    ap.add_argument("--resamples", type=int, default=30)
    a = ap.parse_args()
    table = pq.read_table(a.table)
    n = table.num_rows
    with tempfile.TemporaryDirectory() as tmp:
        full, full_secs = estimate(a.table, os.path.join(tmp, "full.json"), 0)
        truth = np.array(full["matrix"])
        print(f"every row: {n} rows, estimate {full_secs:.1f} s")
        print("| sample rows | seed | cells inside | mean abs diff | max abs diff | seconds (30 resamples) |")
        print("|---|---|---|---|---|---|")
        for size in [int(s) for s in a.sizes.split(",")]:
            for seed in range(a.seeds):
                rows = np.sort(np.random.default_rng(seed).choice(n, size, replace=False))
                path = os.path.join(tmp, f"s{size}_{seed}.parquet")
                pq.write_table(table.take(rows), path)
                got, secs = estimate(path, os.path.join(tmp, "s.json"), a.resamples)
                m, lo, hi = (np.array(got[k]) for k in ("matrix", "matrix_low", "matrix_high"))
                inside = ((truth >= lo - 0.001) & (truth <= hi + 0.001)).mean()
                diff = np.abs(m - truth)
                print(f"| {size} | {seed} | {inside:.2f} | {diff.mean():.4f} | {diff.max():.4f} | {secs:.1f} |")


if __name__ == "__main__":
    main()
