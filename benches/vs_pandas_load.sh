#!/usr/bin/env bash
# Table loading, flipmend against pandas.read_csv and polars.read_csv on the same
# generated file.
#
#   bash benches/vs_pandas_load.sh [ROWS] [FEATURES] [RUNS]    (defaults 1000000 32 5)
#
# Makes the file with ../shared/bench/make_data.py (seeded), then alternates runs of
# `flipmend inspect`, a Python process that times only the pandas.read_csv call and,
# when polars is installed, a whole Python process that runs polars.read_csv (timed from
# outside, like ours), and prints medians, ratios, each side's peak memory and ours as a
# multiple of the numeric arrays. Skips, with a message, when Python, numpy or pandas is
# missing, and skips the polars side without polars (CI does not run this).
set -euo pipefail
cd "$(dirname "$0")/.."
rows=${1:-1000000}
features=${2:-32}
runs=${3:-5}
bench_dir=../shared/bench
if ! command -v python3 >/dev/null || ! python3 -c "import numpy, pandas" 2>/dev/null; then
  echo "skipped: python3 with numpy and pandas is needed (python3 -m pip install numpy pandas)"
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
cargo build --release --quiet
bin=target/release/flipmend
numeric_mib=$(python3 -c "print(round($rows * $features * 8 / 2**20, 1))")
has_polars=$(python3 -c "import polars" 2>/dev/null && echo 1 || echo 0)
ours=() theirs=() polars=()
for _ in $(seq "$runs"); do
  t=$( { /usr/bin/time -f "%e %M" "$bin" inspect --data "$data/data.csv" >/dev/null; } 2>&1 | tail -1)
  ours+=("$t")
  t=$(python3 - "$data/data.csv" <<'PY'
import resource, sys, time
import pandas as pd
start = time.perf_counter()
pd.read_csv(sys.argv[1])
elapsed = time.perf_counter() - start
print(f"{elapsed:.3f} {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss}")
PY
)
  theirs+=("$t")
  if [ "$has_polars" = 1 ]; then
    t=$( { /usr/bin/time -f "%e %M" python3 -c \
      "import sys, polars; polars.read_csv(sys.argv[1])" "$data/data.csv"; } 2>&1 | tail -1)
    polars+=("$t")
  fi
done
source benches/common/stats.sh
a=$(median "${ours[@]}"); b=$(median "${theirs[@]}")
echo "file: $data/data.csv ($(du -m "$data/data.csv" | cut -f1) MiB), numeric arrays ${numeric_mib} MiB"
echo "flipmend inspect (whole process): median ${a} s, peak $(( $(peak "${ours[@]}") / 1024 )) MiB"
echo "pandas.read_csv (call only):      median ${b} s, peak $(( $(peak "${theirs[@]}") / 1024 )) MiB"
python3 -c "print(f'ratio pandas/flipmend: {float($b)/float($a):.2f}x')"
python3 -c "print(f'flipmend peak / numeric arrays: {$(peak "${ours[@]}") / 1024 / $numeric_mib:.2f}x')"
if [ "$has_polars" = 1 ]; then
  c=$(median "${polars[@]}")
  echo "polars.read_csv (whole process):  median ${c} s, peak $(( $(peak "${polars[@]}") / 1024 )) MiB"
  python3 -c "print(f'ratio polars process/flipmend: {float($c)/float($a):.2f}x')"
else
  echo "polars side skipped: python3 -m pip install polars"
fi
