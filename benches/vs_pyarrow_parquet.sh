#!/usr/bin/env bash
# Parquet table loading, flipmend against pyarrow.parquet.read_table on the same file.
#
#   bash benches/vs_pyarrow_parquet.sh [ROWS] [FEATURES] [RUNS]    (defaults 1000000 32 5)
#
# Makes the CSV with ../shared/bench/make_data.py (seeded) and converts it to Parquet
# with pyarrow (its defaults: snappy, one row group per 1,048,576 rows; set ROW_GROUP to
# change), then alternates runs of `flipmend inspect` (the whole process) and a Python
# process that times only the read_table call, and prints medians, their ratio and each
# side's peak memory against the size of the numeric arrays. Skips, with a message, when
# Python, numpy or pyarrow is missing (CI does not run this).
set -euo pipefail
cd "$(dirname "$0")/.."
rows=${1:-1000000}
features=${2:-32}
runs=${3:-5}
row_group=${ROW_GROUP:-1048576}
bench_dir=../shared/bench
if ! command -v python3 >/dev/null || ! python3 -c "import numpy, pyarrow" 2>/dev/null; then
  echo "skipped: python3 with numpy and pyarrow is needed (python3 -m pip install numpy pyarrow)"
  exit 0
fi
if [ ! -f "$bench_dir/make_data.py" ]; then
  echo "skipped: $bench_dir/make_data.py not found"
  exit 0
fi
data=${TMPDIR:-/tmp}/flipmend-load-${rows}x${features}
if [ ! -f "$data/data.csv" ]; then
  python3 "$bench_dir/make_data.py" --rows "$rows" --features "$features" --classes 10 \
    --noise symmetric --rate 0.4 --trusted-frac 0.02 --seed 0 --out "$data" >/dev/null
fi
parquet="$data/data-rg${row_group}.parquet"
if [ ! -f "$parquet" ]; then
  python3 - "$data/data.csv" "$parquet" "$row_group" <<'PY'
import sys
import pyarrow.csv as pacsv, pyarrow.parquet as pq
pq.write_table(pacsv.read_csv(sys.argv[1]), sys.argv[2], row_group_size=int(sys.argv[3]))
PY
fi
cargo build --release --quiet
bin=target/release/flipmend
numeric_mib=$(python3 -c "print(round($rows * $features * 8 / 2**20, 1))")
ours=() theirs=()
for _ in $(seq "$runs"); do
  t=$( { /usr/bin/time -f "%e %M" "$bin" inspect --data "$parquet" >/dev/null; } 2>&1 | tail -1)
  ours+=("$t")
  t=$(python3 - "$parquet" <<'PY'
import resource, sys, time
import pyarrow.parquet as pq
start = time.perf_counter()
pq.read_table(sys.argv[1])
elapsed = time.perf_counter() - start
print(f"{elapsed:.3f} {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss}")
PY
)
  theirs+=("$t")
done
source benches/common/stats.sh
a=$(median "${ours[@]}"); b=$(median "${theirs[@]}")
echo "file: $parquet ($(du -m "$parquet" | cut -f1) MiB), numeric arrays ${numeric_mib} MiB"
echo "flipmend inspect (whole process):    median ${a} s, peak $(( $(peak "${ours[@]}") / 1024 )) MiB"
echo "pyarrow read_table (call only):      median ${b} s, peak $(( $(peak "${theirs[@]}") / 1024 )) MiB"
python3 -c "print(f'ratio pyarrow/flipmend: {float($b)/float($a):.2f}x')"
