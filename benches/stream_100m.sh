#!/usr/bin/env bash
# The streamed suspects run on a large generated table: seconds, peak resident memory
# and rows per second per core, for the README's memory model and the columnar issue's
# target (100,000,000 rows x 10 classes: under 1.5 GiB and 60 s on a 2-core machine).
#
#   bash benches/stream_100m.sh [ROWS] [DIR] [parquet|csv]
#
# Writes DIR/bigROWS.parquet once with benches/make_big_parquet.py (seeded; needs numpy
# and pyarrow, skipped cleanly without them), and with `csv` the same rows as
# DIR/bigROWS.csv (by pyarrow's CSV writer, batch by batch), then runs `flipmend
# suspects --budget 10000` on it with --max-memory 0 (always streamed) and checks the
# listed rows and the control rows against the truth file. Run after `cargo build
# --release`.
set -euo pipefail
rows=${1:-100000000}
dir=${2:-/tmp/flipmend-bench}
kind=${3:-parquet}
bin=target/release/flipmend
parquet="$dir/big$rows.parquet"
if ! python3 -c "import numpy, pyarrow" 2>/dev/null; then
    echo "skipped: numpy and pyarrow are needed to write the table"
    exit 0
fi
mkdir -p "$dir"
[ -f "$parquet" ] || python3 benches/make_big_parquet.py --rows "$rows" --classes 10 --out "$parquet"
table="$dir/big$rows.$kind"
if [ ! -f "$table" ]; then
    python3 - "$parquet" "$table" <<'PY'
import sys
import pyarrow as pa
import pyarrow.csv as pcsv
import pyarrow.parquet as pq
source = pq.ParquetFile(sys.argv[1])
schema = pa.schema([(f.name, pa.string() if f.name == "label" else f.type)
                    for f in source.schema_arrow])
with pcsv.CSVWriter(sys.argv[2] + ".part", schema) as w:
    for batch in source.iter_batches(batch_size=1 << 16):
        w.write_batch(batch.cast(schema))
PY
    mv "$table.part" "$table"
fi
cores=$(nproc)
out="$dir/w$rows$kind.csv"
log="$dir/time$rows$kind.txt"
FLIPMEND_TIMING=1 /usr/bin/time -f "%e %M" -o "$log" \
    "$bin" suspects --data "$table" --probs "$table" --budget 10000 --max-memory 0 --out "$out" \
    > "$dir/stdout$rows$kind.txt" 2> "$dir/stderr$rows$kind.txt"
read -r seconds kib < "$log"
grep "flipmend timing" "$dir/stderr$rows$kind.txt" || true
python3 - "$rows" "$seconds" "$kib" "$cores" "$out" "$parquet" "$kind" <<'PY'
import sys
import pyarrow.compute as pc
import pyarrow.csv as pcsv
import pyarrow.parquet as pq
rows, seconds, kib, cores, out, table, kind = sys.argv[1:]
rows, seconds, kib, cores = int(rows), float(seconds), int(kib), int(cores)
print(f"{rows} rows of {kind}: {seconds:.1f} s, peak {kib / 1024 / 1024:.2f} GiB, "
      f"{rows / seconds / cores / 1e6:.2f} M rows/s/core on {cores} cores")
key = pcsv.read_csv(out.replace(".csv", ".key.csv")).to_pandas()
work = pcsv.read_csv(out).to_pandas()[["id", "observed"]]
truth = pq.read_table(table.replace(".parquet", ".truth.parquet")).to_pandas()
m = key.merge(work, on="id").merge(truth, on="id")
m["wrong"] = m["observed"].astype(str) != m["true"].astype(str)
for name, g in m.groupby("slice"):
    print(f"{name}: {len(g)} rows, {g['wrong'].mean():.3f} truly mislabelled")
PY
