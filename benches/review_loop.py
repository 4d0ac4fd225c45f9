#!/usr/bin/env python3
"""The review loop over many seeds: does estimating again after a review of the worklist's
head bring the flip matrix closer to the truth?

    cargo build --release && python3 benches/review_loop.py [--bin B] [--work DIR]
                                                            [--designs s3kk2,s600k3] [--seeds 301-320]

For each table of benches/interval_coverage.py's designs (generated with
../shared/bench/make_data.py, cached under --work and shared with that script) it runs
`estimate`, `suspects --all`, answers the top 5 % of the worklist with the true labels
(as validity.py's `loop` column does), runs `review` and `estimate` on the merged copy,
and prints the mean error before and after against two references: the generating matrix
and the matrix counted from the table's own true labels (the oracle, which the
reviewed labels are evidence of). Needs numpy.
"""
import argparse
import collections
import csv
import json
import os
import pathlib
import subprocess
import sys

import numpy as np

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from interval_coverage import DESIGNS, MAKE  # noqa: E402


def run(*cmd):
    subprocess.run([str(c) for c in cmd], check=True, capture_output=True)


def errors(path, generating, counts):
    """Mean |T̂ − T| against the generating matrix and against the table's own flips."""
    e = json.loads(pathlib.Path(path).read_text())
    cl, m = e["classes"], e["matrix"]
    gen, own = [], []
    for i, a in enumerate(cl):
        n = sum(counts[(a, b)] for b in cl)
        for j, b in enumerate(cl):
            gen.append(abs(m[i][j] - generating[a].get(b, 0.0)))
            own.append(abs(m[i][j] - counts[(a, b)] / n))
    return np.mean(gen), np.mean(own)


def one_table(binary, d):
    rows = list(csv.DictReader(open(d / "data.csv")))
    truth = {r["id"]: r["true_label"] for r in csv.DictReader(open(d / "truth.csv"))}
    generating = {r["class"]: {k: float(v) for k, v in r.items() if k != "class"}
                  for r in csv.DictReader(open(d / "true_matrix.csv"))}
    counts = collections.Counter((truth[r["id"]], r["label"]) for r in rows)
    run(binary, "estimate", "--data", d / "data.csv", "--json", d / "loop_before.json")
    run(binary, "suspects", "--data", d / "data.csv", "--all", "--out", d / "loop_worklist.csv")
    order = sorted(csv.DictReader(open(d / "loop_worklist.csv")), key=lambda r: int(r["rank"]))
    with open(d / "loop_reviewed.csv", "w", newline="") as fh:
        out = csv.DictWriter(fh, fieldnames=list(order[0].keys()), lineterminator="\n")
        out.writeheader()
        for r in order[:max(1, len(rows) // 20)]:
            out.writerow({**r, "review": truth[rows[int(r["row"])]["id"]]})
    merged = d / "loop_merged.csv"
    if merged.exists():
        os.unlink(merged)
    run(binary, "review", "--data", d / "data.csv", "--worklist", d / "loop_reviewed.csv", "--out", merged)
    run(binary, "estimate", "--data", merged, "--json", d / "loop_after.json")
    return (*errors(d / "loop_before.json", generating, counts),
            *errors(d / "loop_after.json", generating, counts))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--bin", default="target/release/flipmend")
    ap.add_argument("--work", default="/tmp/flipmend-coverage")
    ap.add_argument("--designs", default="s3kk2,s600k3")
    ap.add_argument("--seeds", default="301-320")
    args = ap.parse_args()
    if not MAKE.exists():
        sys.exit(f"skipped: {MAKE} not found")
    first, last = (int(v) for v in args.seeds.split("-"))
    binary = pathlib.Path(args.bin).resolve()
    for name, design in DESIGNS:
        if name not in args.designs.split(","):
            continue
        results = []
        for seed in range(first, last + 1):
            d = pathlib.Path(args.work) / f"{name}_{seed}"
            if not (d / "data.csv").exists():
                subprocess.run([sys.executable, str(MAKE), *design.split(), "--seed", str(seed),
                                "--out", str(d)], check=True, capture_output=True)
            results.append(one_table(binary, d))
        a = np.array(results)
        for label, before, after in (("generating matrix", 0, 2), ("own flips (oracle)", 1, 3)):
            print(f"{name}: against the {label}: before {a[:, before].mean():.4f}, "
                  f"after {a[:, after].mean():.4f}, worse on {(a[:, after] > a[:, before]).sum()} "
                  f"of {len(a)}")


if __name__ == "__main__":
    main()
