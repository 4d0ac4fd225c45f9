#!/usr/bin/env python3
"""Rebuilds the invented recycling-plant demo data (standard library only, seeded).

INVENTED SCENARIO: no real plant, camera or operator is behind these numbers.

A sorting plant photographs each item on the belt; a vision model embeds the picture into
12 numbers (emb0..emb11). Operators at four sorting stations type the material. They mix
up some pairs more than others (PET vs HDPE, cardboard vs paper, aluminium vs steel), so
the flip pattern is asymmetric. The stations differ: S1's operator is the most
experienced (half the base confusion), S2 and S3 type at the base rates, and S4 is
staffed by a new operator who confuses every pair twice as often (STATION_SCALE). A supervisor audited a few hundred items (column
`trusted`). The true material of every item is in recycling_truth.csv, for checking the
tool only.

A quality panel (recycling_panel.csv, also invented) had four graders re-type 1,500 of the
items from their photographs, two or three graders an item, independently: grader_a is
meticulous, grader_d hurried (GRADER_SCALE). It is drawn after the main table from its own
random stream (seed + 1), so the main table does not depend on it.

Usage: python3 make_demo.py [--seed 20261201] [--rows 8000] [--audited 400] [--panel 1500]
"""
import argparse
import csv
import math
import os
import random

CLASSES = ["pet_bottle", "hdpe_jug", "alu_can", "steel_can", "glass", "cardboard", "paper", "film"]
SHARES = [0.20, 0.12, 0.14, 0.06, 0.10, 0.18, 0.14, 0.06]
# FLIPS[true] = {typed: probability}; the rest of each row stays on the true material.
FLIPS = {
    "pet_bottle": {"hdpe_jug": 0.15, "film": 0.02},
    "hdpe_jug": {"pet_bottle": 0.08},
    "alu_can": {"steel_can": 0.12},
    "steel_can": {"alu_can": 0.05},
    "glass": {"pet_bottle": 0.04},
    "cardboard": {"paper": 0.18},
    "paper": {"cardboard": 0.10, "film": 0.02},
    "film": {"hdpe_jug": 0.08, "paper": 0.06},
}
# Materials that look alike sit closer together in the embedding.
NEIGHBOURS = [("pet_bottle", "hdpe_jug"), ("alu_can", "steel_can"), ("cardboard", "paper"), ("film", "hdpe_jug")]
STATIONS = ["S1", "S2", "S3", "S4"]
# Each station's confusion: the base flip probabilities times this factor.
STATION_SCALE = {"S1": 0.5, "S2": 1.0, "S3": 1.0, "S4": 2.0}
DIMS = 12
# Each panel grader's confusion: the base flip probabilities times this factor.
GRADER_SCALE = {"grader_a": 0.4, "grader_b": 1.0, "grader_c": 1.5, "grader_d": 2.5}


def flip_matrix(scale=1.0):
    rows = []
    for true in CLASSES:
        row = [scale * FLIPS[true].get(typed, 0.0) for typed in CLASSES]
        row[CLASSES.index(true)] = 1.0 - sum(row)
        rows.append(row)
    return rows


def class_means(rng):
    means = {c: [rng.gauss(0, 1.6) for _ in range(DIMS)] for c in CLASSES}
    for a, b in NEIGHBOURS:
        means[b] = [0.55 * x + 0.45 * y for x, y in zip(means[a], means[b])]
    return means


def draw(rng, weights):
    u, acc = rng.random(), 0.0
    for i, w in enumerate(weights):
        acc += w
        if u < acc:
            return i
    return len(weights) - 1


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seed", type=int, default=20261201)
    ap.add_argument("--rows", type=int, default=8000)
    ap.add_argument("--audited", type=int, default=400)
    ap.add_argument("--panel", type=int, default=1500)
    ap.add_argument("--out", default=os.path.dirname(os.path.abspath(__file__)))
    args = ap.parse_args()
    rng = random.Random(args.seed)
    means = class_means(rng)
    scale = [round(rng.uniform(0.5, 4.0), 2) for _ in range(DIMS)]
    offset = [round(rng.uniform(-5, 5), 2) for _ in range(DIMS)]
    t = {s: flip_matrix(STATION_SCALE[s]) for s in STATIONS}
    audited = set(rng.sample(range(args.rows), args.audited))
    items = []
    data_path = os.path.join(args.out, "recycling.csv")
    truth_path = os.path.join(args.out, "recycling_truth.csv")
    with open(data_path, "w", newline="") as fd, open(truth_path, "w", newline="") as ft:
        data, truth = csv.writer(fd, lineterminator="\n"), csv.writer(ft, lineterminator="\n")
        data.writerow(["id", "station"] + [f"emb{d}" for d in range(DIMS)] + ["label", "trusted"])
        truth.writerow(["id", "true_label"])
        for row in range(args.rows):
            true = draw(rng, SHARES)
            station = STATIONS[rng.randrange(4)]
            typed = draw(rng, t[station][true])
            emb = [offset[d] + scale[d] * (means[CLASSES[true]][d] + rng.gauss(0, 1.0)) for d in range(DIMS)]
            item = f"B{1 + row % 3}-{row:05d}"
            trusted = CLASSES[true] if row in audited else ""
            data.writerow([item, station] + [f"{v:.4f}" for v in emb] + [CLASSES[typed], trusted])
            truth.writerow([item, CLASSES[true]])
            items.append((item, [f"{v:.4f}" for v in emb], true))
    print(f"wrote {data_path} and {truth_path} (seed {args.seed})")
    assert all(math.isclose(sum(r), 1.0) for m in t.values() for r in m)
    write_panel(os.path.join(args.out, "recycling_panel.csv"), items, args.panel, args.seed + 1)


def write_panel(path, items, count, seed):
    """Two or three of the graders type each of `count` items drawn from the table."""
    rng = random.Random(seed)
    graders = list(GRADER_SCALE)
    t = {g: flip_matrix(GRADER_SCALE[g]) for g in graders}
    assert all(math.isclose(sum(r), 1.0) and min(r) >= 0 for m in t.values() for r in m)
    with open(path, "w", newline="") as f:
        out = csv.writer(f, lineterminator="\n")
        out.writerow(["id"] + [f"emb{d}" for d in range(DIMS)] + graders)
        for row in sorted(rng.sample(range(len(items)), count)):
            item, emb, true = items[row]
            chosen = set(rng.sample(graders, rng.choice([2, 3])))
            typed = [CLASSES[draw(rng, t[g][true])] if g in chosen else "" for g in graders]
            out.writerow([item] + emb + typed)
    print(f"wrote {path} (seed {seed})")


if __name__ == "__main__":
    main()
