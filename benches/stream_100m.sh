#!/usr/bin/env bash
# The streamed suspects run on a large generated table: seconds, peak resident memory
# and rows per second per core, for the README's memory model and the columnar issue's
# target (100,000,000 rows x 10 classes: under 1.5 GiB and 60 s on a 2-core machine).
#
#   bash benches/stream_100m.sh [ROWS] [DIR]
#
# Writes DIR/bigROWS.parquet once with benches/make_big_parquet.py (seeded; needs numpy
# and pyarrow, skipped cleanly without them), then runs `flipmend suspects --budget
# 10000` on it with --max-memory 0 (always streamed) and checks the listed rows and
# the control rows against the truth file. Run after `cargo build --release`.
set -euo pipefail
rows=${1:-100000000}
dir=${2:-/tmp/flipmend-bench}
bin=target/release/flipmend
table="$dir/big$rows.parquet"
if ! python3 -c "import numpy, pyarrow" 2>/dev/null; then
    echo "skipped: numpy and pyarrow are needed to write the table"
    exit 0
fi
mkdir -p "$dir"
[ -f "$table" ] || python3 benches/make_big_parquet.py --rows "$rows" --classes 10 --out "$table"
cores=$(nproc)
out="$dir/w$rows.csv"
log="$dir/time$rows.txt"
FLIPMEND_TIMING=1 /usr/bin/time -f "%e %M" -o "$log" \
    "$bin" suspects --data "$table" --probs "$table" --budget 10000 --max-memory 0 --out "$out" \
    > "$dir/stdout$rows.txt" 2> "$dir/stderr$rows.txt"
read -r seconds kib < "$log"
grep "flipmend timing" "$dir/stderr$rows.txt" || true
python3 - "$rows" "$seconds" "$kib" "$cores" "$out" "$table" <<'PY'
import sys
import pyarrow.compute as pc
import pyarrow.csv as pcsv
import pyarrow.parquet as pq
rows, seconds, kib, cores, out, table = sys.argv[1:]
rows, seconds, kib, cores = int(rows), float(seconds), int(kib), int(cores)
print(f"{rows} rows: {seconds:.1f} s, peak {kib / 1024 / 1024:.2f} GiB, "
      f"{rows / seconds / cores / 1e6:.2f} M rows/s/core on {cores} cores")
key = pcsv.read_csv(out.replace(".csv", ".key.csv")).to_pandas()
work = pcsv.read_csv(out).to_pandas()[["id", "observed"]]
truth = pq.read_table(table.replace(".parquet", ".truth.parquet")).to_pandas()
m = key.merge(work, on="id").merge(truth, on="id")
m["wrong"] = m["observed"].astype(str) != m["true"].astype(str)
for name, g in m.groupby("slice"):
    print(f"{name}: {len(g)} rows, {g['wrong'].mean():.3f} truly mislabelled")
PY
