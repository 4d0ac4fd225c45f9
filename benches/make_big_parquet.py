#!/usr/bin/env python3
"""A large seeded table for the streaming benchmarks: an id, an observed label and a model's
class probabilities in one Parquet file, written row group by row group (memory stays
bounded by one group), with the true labels beside it for checking what a run finds.

    python3 benches/make_big_parquet.py --rows 100000000 --classes 10 --out /tmp/big.parquet

Clean class y ~ Uniform{0..K-1}; the model's probabilities are a softmax of logits with the
clean class lifted by `--signal` (so the model is right about 85-90 % of the time); the
observed label follows a pair-flip matrix (class k typed as k+1 with `--rate`). Columns:
id (int64), label (dictionary of c0..c{K-1}), then one float32 column per class named
c0..c{K-1}. The truth goes to OUT with `.truth.parquet` (id, true). Needs numpy and pyarrow.
"""
import argparse
import time

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=100_000_000)
    ap.add_argument("--classes", type=int, default=10)
    ap.add_argument("--rate", type=float, default=0.2)
    ap.add_argument("--signal", type=float, default=3.0)
    ap.add_argument("--group", type=int, default=1 << 20, help="rows per row group")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--out", required=True)
    a = ap.parse_args()
    k = a.classes
    names = [f"c{i}" for i in range(k)]
    rng = np.random.default_rng(a.seed)
    label_type = pa.dictionary(pa.int32(), pa.string())
    schema = pa.schema(
        [("id", pa.int64()), ("label", label_type)] + [(n, pa.float32()) for n in names]
    )
    truth_schema = pa.schema([("id", pa.int64()), ("true", label_type)])
    dictionary = pa.array(names)
    start = time.perf_counter()
    with pq.ParquetWriter(a.out, schema) as writer, pq.ParquetWriter(
        a.out.removesuffix(".parquet") + ".truth.parquet", truth_schema
    ) as truth:
        for first in range(0, a.rows, a.group):
            n = min(a.group, a.rows - first)
            y = rng.integers(0, k, n)
            logits = rng.standard_normal((n, k)).astype(np.float32)
            logits[np.arange(n), y] += a.signal
            p = np.exp(logits - logits.max(1, keepdims=True))
            p /= p.sum(1, keepdims=True)
            flip = rng.random(n) < a.rate
            observed = np.where(flip, (y + 1) % k, y)
            ids = pa.array(np.arange(first, first + n, dtype=np.int64))
            label = pa.DictionaryArray.from_arrays(pa.array(observed.astype(np.int32)), dictionary)
            columns = [ids, label] + [pa.array(p[:, c]) for c in range(k)]
            writer.write_batch(pa.record_batch(columns, schema=schema))
            true = pa.DictionaryArray.from_arrays(pa.array(y.astype(np.int32)), dictionary)
            truth.write_batch(pa.record_batch([ids, true], schema=truth_schema))
    print(f"{a.rows} rows x {k} classes -> {a.out} in {time.perf_counter() - start:.1f} s")


if __name__ == "__main__":
    main()
