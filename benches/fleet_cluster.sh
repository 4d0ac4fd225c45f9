#!/usr/bin/env bash
# The distributed runner on a local Ballista cluster of separate processes: one
# `flipmend-fleet scheduler` and two `flipmend-fleet executor`s (FLEET_EXECUTORS) of one
# task slot each on 127.0.0.1, a
# `suspects` and an `estimate` job run on them, their results checked against the
# single-machine `flipmend` on the same rows, then everything stopped. Not in CI (it
# starts servers and needs numpy and pyarrow for the table); every process is bounded
# in time and listens on 127.0.0.1 only.
#
#   bash benches/fleet_cluster.sh [ROWS] [DIR] [FILES]
#
# Writes DIR/bigROWS.parquet once (benches/make_big_parquet.py, seeded), cuts it into
# FILES files in DIR/bigROWS-FILES/ (the cluster's input), and prints each run's seconds
# and rows per second. Run after `cargo build --release -p flipmend -p flipmend-fleet`.
set -euo pipefail
rows=${1:-2000000}
dir=${2:-/tmp/flipmend-bench}
files=${3:-4}
bin=target/release/flipmend
fleet=target/release/flipmend-fleet
limit_secs=${FLEET_LIMIT_SECS:-1800}
port=${FLEET_PORT:-50150}
executors=${FLEET_EXECUTORS:-2}
if ! python3 -c "import numpy, pyarrow" 2>/dev/null; then
    echo "skipped: numpy and pyarrow are needed to write the table"
    exit 0
fi
for b in "$bin" "$fleet"; do
    [ -x "$b" ] || { echo "build first: cargo build --release -p flipmend -p flipmend-fleet"; exit 1; }
done
mkdir -p "$dir"
whole="$dir/big$rows.parquet"
parts="$dir/big$rows-$files"
[ -f "$whole" ] || python3 benches/make_big_parquet.py --rows "$rows" --classes 10 --out "$whole"
if [ ! -d "$parts" ]; then
    python3 - "$whole" "$parts" "$files" <<'PY'
import os, sys
import pyarrow.parquet as pq
source = pq.ParquetFile(sys.argv[1])
out, files = sys.argv[2], int(sys.argv[3])
groups = source.metadata.num_row_groups
os.makedirs(out + ".part")
for f in range(files):
    mine = list(range(f * groups // files, (f + 1) * groups // files))
    with pq.ParquetWriter(f"{out}.part/part-{f:03}.parquet", source.schema_arrow) as w:
        for g in mine:
            w.write_table(source.read_row_group(g))
os.rename(out + ".part", out)
PY
fi

work=$(mktemp -d)
pids=()
stop() {
    for pid in "${pids[@]}"; do kill "$pid" 2>/dev/null || true; done
    wait 2>/dev/null || true
    rm -rf "$work"
}
trap stop EXIT
timeout "$limit_secs" "$fleet" scheduler --bind "127.0.0.1:$port" > "$work/scheduler.log" 2>&1 &
pids+=($!)
for i in $(seq "$executors"); do
    timeout "$limit_secs" "$fleet" executor --scheduler "127.0.0.1:$port" --bind 127.0.0.1 \
        --port $((port + 10 * i)) --grpc-port $((port + 10 * i + 1)) --slots 1 \
        --work-dir "$work/executor$i" > "$work/executor$i.log" 2>&1 &
    pids+=($!)
done
# Give the executors time to register with the scheduler.
sleep 3

timed() {
    local name=$1; shift
    local start end
    start=$(date +%s.%N)
    timeout "$limit_secs" "$@" > "$work/$name.out" 2> "$work/$name.err" || {
        echo "$name failed:"; tail -5 "$work/$name.err"; exit 1; }
    end=$(date +%s.%N)
    python3 -c "import sys; s=float(sys.argv[2])-float(sys.argv[1]); print(f'{sys.argv[3]}: {s:.1f} s, {int(sys.argv[4])/s:,.0f} rows/s')" \
        "$start" "$end" "$name" "$rows"
}
job="--budget 10000 --sample-rows 200000"
timed single "$bin" suspects --data "$whole" --probs "$whole" --max-memory 0 $job --out "$work/single.csv"
timed in-process "$fleet" suspects --data "$parts" --probs "$parts" $job --out "$work/in-process.csv"
timed cluster "$fleet" suspects --data "$parts" --probs "$parts" $job --out "$work/cluster.csv" \
    --scheduler "df://127.0.0.1:$port" --partitions "$executors"
for run in in-process cluster; do
    cmp "$work/single.csv" "$work/$run.csv" && cmp "$work/single.key.csv" "$work/$run.key.csv" \
        && echo "$run: the same worklist and key as the single machine"
done
"$bin" estimate --data "$whole" --probs "$whole" --max-memory 0 --method counting \
    --json "$work/single.json" > /dev/null
"$fleet" estimate --data "$parts" --probs "$parts" --method counting --json "$work/cluster.json" \
    --scheduler "df://127.0.0.1:$port" --partitions "$executors" > /dev/null
python3 - "$work/single.json" "$work/cluster.json" <<'PY'
import json, sys
a, b = (json.load(open(p))["matrix"] for p in sys.argv[1:])
gap = max(abs(x - y) for ra, rb in zip(a, b) for x, y in zip(ra, rb))
print(f"counting matrix on the cluster: largest difference {gap:.1e}")
sys.exit(0 if gap <= 1e-9 else 1)
PY
