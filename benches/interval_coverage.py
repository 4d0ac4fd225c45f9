#!/usr/bin/env python3
"""Coverage of `estimate --bootstrap`'s 90 % intervals on simulated tables with a known matrix.

    cargo build --release && python3 benches/interval_coverage.py [--bin B] [--work DIR]
                                                                  [--seeds 301-310]

Generates 6 designs x 10 seeds with ../shared/bench/make_data.py (cached under --work), runs
`estimate --bootstrap 30 --json` on each, and prints the share of the generating matrix's
cells inside the interval: all cells, the non-zero cells, and per design. It also rescales
the shipped half-widths by c (1.0 = as shipped) to show how coverage moves with their size
(src/noise/bootstrap.rs: the joint fit's spread plus its bias allowance, `penalty_shift`;
the other estimators' WIDENING). A true zero counts as covered when the interval reaches
within 0.001 of it, as in validity.py. Needs numpy.
"""
import argparse
import csv
import json
import pathlib
import subprocess
import sys

import numpy as np

HERE = pathlib.Path(__file__).resolve().parent
MAKE = HERE.parent.parent / "shared" / "bench" / "make_data.py"
DESIGNS = [
    ("s600k3", "--rows 600 --features 5 --classes 3 --noise pairflip --rate 0.25 --trusted-frac 0.05"),
    ("s2kk3", "--rows 2000 --features 6 --classes 3 --noise pairflip --rate 0.25 --trusted-frac 0.03"),
    ("s3kk2", "--rows 3000 --features 8 --classes 2 --noise pairflip --rate 0.2 --target-acc 0.85 "
              "--trusted-frac 0.05"),
    ("s5kk4", "--rows 5000 --features 10 --classes 4 --noise symmetric --rate 0.3 --trusted-frac 0.02"),
    ("s10kk5", "--rows 10000 --features 10 --classes 5 --noise pairflip --rate 0.2 --sources 3 "
               "--trusted-frac 0.02"),
    ("s10kk6b", "--rows 10000 --features 12 --classes 6 --noise symmetric --rate 0.2 --blobs 3 "
                "--trusted-frac 0.02"),
]


def true_matrix(path, classes):
    with open(path) as f:
        rows = csv.reader(f)
        header = next(rows)
        t = {r[0]: {header[i]: float(v) for i, v in enumerate(r) if i > 0} for r in rows}
    return np.array([[t[a].get(b, 0.0) for b in classes] for a in classes])


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--bin", default="target/release/flipmend")
    ap.add_argument("--work", default="/tmp/flipmend-coverage")
    ap.add_argument("--seeds", default="301-310",
                    help="FIRST-LAST: the seeds of every design (301-310 chose the shipped settings; "
                         "other seeds check them)")
    args = ap.parse_args()
    first, last = (int(v) for v in args.seeds.split("-"))
    if not MAKE.exists():
        sys.exit(f"skipped: {MAKE} not found")
    work = pathlib.Path(args.work)
    results = []
    for name, design in DESIGNS:
        for seed in range(first, last + 1):
            d = work / f"{name}_{seed}"
            if not (d / "data.csv").exists():
                subprocess.run([sys.executable, str(MAKE), *design.split(), "--seed", str(seed),
                                "--out", str(d)], check=True, capture_output=True)
            out = d / "boot.json"
            r = subprocess.run([args.bin, "estimate", "--data", str(d / "data.csv"), "--bootstrap", "30",
                                "--json", str(out)], capture_output=True, text=True)
            if r.returncode:
                print(f"{name} {seed}: {r.stderr.strip()}")
                continue
            e = json.loads(out.read_text())
            m, lo, hi = (np.array(e[k]) for k in ("matrix", "matrix_low", "matrix_high"))
            results.append((name, m, lo, hi, true_matrix(d / "true_matrix.csv", e["classes"])))
    for c in [0.8, 0.9, 1.0, 1.1, 1.2]:
        per, every, nonzero = {}, [], []
        for name, m, lo, hi, t in results:
            low = np.clip(m - c * (m - lo), 0, 1)
            high = np.clip(m + c * (hi - m), 0, 1)
            cov = np.where(t == 0, low <= 0.001, (low <= t) & (t <= high))
            per.setdefault(name, []).append(cov.mean())
            every += list(cov.ravel())
            nonzero += list(cov[t > 0])
        print(f"c={c:.1f}: all cells {np.mean(every):.3f}, non-zero {np.mean(nonzero):.3f} | "
              + " ".join(f"{k} {np.mean(v):.2f}" for k, v in per.items()))


if __name__ == "__main__":
    main()
