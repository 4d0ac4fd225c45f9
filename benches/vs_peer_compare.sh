#!/usr/bin/env bash
# The whole comparison of corrections: `flipmend compare` against the reference pipeline
# ../shared/bench/peer.py (load, split, out-of-fold probabilities, T estimates, suspects,
# none/forward/backward training, evaluation) on the same generated file with a test set.
#
#   bash benches/vs_peer_compare.sh [ROWS] [RUNS]        (defaults 200000 3)
#
# Alternates runs and prints the median wall time of each side (the peer's
# pipeline_seconds, which leaves out its own evaluation stage; flipmend's whole process),
# their ratio, and each model's accuracy on the test rows (true labels). Skips when Python
# or its packages are missing (CI does not run this).
set -euo pipefail
cd "$(dirname "$0")/.."
rows=${1:-200000}
runs=${2:-3}
bench=../shared/bench
if ! command -v python3 >/dev/null || ! python3 -c "import numpy, scipy, pandas, sklearn" 2>/dev/null; then
  echo "skipped: python3 with numpy, scipy, pandas and scikit-learn is needed"
  exit 0
fi
[ -f "$bench/peer.py" ] || { echo "skipped: $bench/peer.py not found"; exit 0; }
dir=${TMPDIR:-/tmp}/flipmend-compare-${rows}
if [ ! -f "$dir/data.csv" ]; then
  python3 "$bench/make_data.py" --rows "$rows" --features 32 --classes 10 --noise symmetric --rate 0.4 \
    --test-rows 20000 --seed 0 --out "$dir" >/dev/null
fi
cargo build --release --quiet
peer=() ours=()
for _ in $(seq "$runs"); do
  python3 "$bench/peer.py" --data "$dir" --json "$dir/peer.json" >/dev/null
  peer+=("$(python3 -c "import json; print(json.load(open('$dir/peer.json'))['pipeline_seconds'])")")
  start=$(date +%s.%N)
  target/release/flipmend compare --data "$dir/data.csv" --test "$dir/test.csv" --json "$dir/ours.json" >/dev/null
  ours+=("$(python3 -c "print($(date +%s.%N) - $start)")")
done
python3 - "$dir" "${peer[*]}" "${ours[*]}" <<'PY'
import json, statistics, sys
d, peer_t, ours_t = sys.argv[1], [float(x) for x in sys.argv[2].split()], [float(x) for x in sys.argv[3].split()]
peer, ours = json.load(open(f"{d}/peer.json")), json.load(open(f"{d}/ours.json"))
pm, om = statistics.median(peer_t), statistics.median(ours_t)
print(f"peer pipeline: median {pm:.2f} s; flipmend compare: median {om:.2f} s; speed-up {pm / om:.1f}x ({len(peer_t)} runs each)")
mine = {m["correction"]: m for m in ours["models"]}
for mode in ["none", "forward", "backward"]:
    p = peer["models"].get(mode, {}).get("test_acc")
    o = mine[mode]["test_accuracy"]
    print(f"test accuracy {mode:<9} peer {p:.4f}  flipmend {o:.4f}  ({100 * (o - p):+.2f} points)")
print(f"test accuracy prune     flipmend {mine['prune']['test_accuracy']:.4f} (the peer has no prune)")
PY
