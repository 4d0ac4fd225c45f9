#!/usr/bin/env bash
# Out-of-fold probabilities and the flip matrix: flipmend against the reference pipeline
# in ../shared/bench/peer.py, on the same rows of the same generated file.
#
#   bash benches/vs_peer_estimate.sh [ROWS] [RUNS]        (defaults 200000 3)
#
# The peer estimates on the 80 % training part of a stratified split (sklearn,
# random_state 0); this script writes exactly those rows to a CSV and runs
# `flipmend estimate` on it, alternating runs. It prints the median seconds of the peer's
# out-of-fold stage (c_oof) and of flipmend's whole `estimate` command (load, folds, matrix,
# diagnostics, writing the matrix), the out-of-fold accuracy against the true labels, each side's
# quantile-estimator error against the true matrix, and the suspect ranking's AUROC. Skips when Python or its packages
# are missing (CI does not run this).
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
dir=${TMPDIR:-/tmp}/flipmend-vs-peer-${rows}
if [ ! -f "$dir/data.csv" ]; then
  python3 "$bench/make_data.py" --rows "$rows" --features 32 --classes 10 --noise symmetric --rate 0.4 \
    --trusted-frac 0.02 --seed 0 --out "$dir" >/dev/null
fi
python3 - "$dir" <<'PY'
import sys, pandas as pd
from sklearn.model_selection import train_test_split
d = sys.argv[1]
df = pd.read_csv(f"{d}/data.csv", dtype={"label": str, "trusted": str}, keep_default_na=False)
tr, _ = train_test_split(range(len(df)), test_size=0.2, stratify=df["label"], random_state=0)
part = df.iloc[sorted(tr)].copy()
part.to_csv(f"{d}/train_part.csv", index=False)
truth = pd.read_csv(f"{d}/truth.csv", dtype={"true_label": str}).set_index("id")["true_label"]
part["truth"] = truth.loc[part["id"].astype(int)].to_numpy()
part.to_csv(f"{d}/train_part_truth.csv", index=False)
PY
cargo build --release --quiet
peer_times=() ours_times=()
for i in $(seq "$runs"); do
  python3 "$bench/peer.py" --data "$dir" --json "$dir/peer.json" >/dev/null
  peer_times+=("$(python3 -c "import json; print(json.load(open('$dir/peer.json'))['stage_seconds']['c_oof'])")")
  start=$(date +%s.%N)
  target/release/flipmend estimate --data "$dir/train_part.csv" --out "$dir/t_ours.csv" >/dev/null
  ours_times+=("$(python3 -c "print($(date +%s.%N) - $start)")")
done
# Untimed: the same estimate, also saving its out-of-fold probabilities for the accuracy check.
target/release/flipmend estimate --data "$dir/train_part.csv" --probs-out "$dir/oof_ours.csv" >/dev/null
target/release/flipmend suspects --data "$dir/train_part_truth.csv" --truth truth --probs "$dir/oof_ours.csv" \
  --top 100 --json "$dir/suspects.json" >/dev/null
python3 - "$dir" "${peer_times[*]}" "${ours_times[*]}" <<'PY'
import json, sys, statistics
import numpy as np, pandas as pd
d, peer_t, ours_t = sys.argv[1], [float(x) for x in sys.argv[2].split()], [float(x) for x in sys.argv[3].split()]
peer = json.load(open(f"{d}/peer.json"))
truth = pd.read_csv(f"{d}/truth.csv", dtype={"true_label": str}).set_index("id")["true_label"]
true_t = pd.read_csv(f"{d}/true_matrix.csv").set_index("class")
oof = pd.read_csv(f"{d}/oof_ours.csv").set_index("id")
classes = list(oof.columns)
pred = np.array(classes)[oof.to_numpy().argmax(1)]
acc = float((pred == truth.loc[oof.index].to_numpy()).mean())
ours_matrix = pd.read_csv(f"{d}/t_ours.csv").set_index("class").loc[classes, classes].to_numpy()
err = np.abs(ours_matrix - true_t.loc[classes, classes].to_numpy())
pm, om = statistics.median(peer_t), statistics.median(ours_t)
print(f"rows in the estimate: {len(oof)} (the peer's training part)")
print(f"peer c_oof (5-fold sklearn lbfgs): median {pm:.2f} s over {len(peer_t)} runs")
print(f"flipmend estimate (whole command): median {om:.2f} s   speed-up {pm / om:.1f}x")
print(f"out-of-fold accuracy vs true labels: peer {peer['diagnostics']['oof_acc_true']:.4f}, flipmend {acc:.4f}")
qe = peer.get("T_error", {})
sus = json.load(open(f"{d}/suspects.json"))["truth"]
print(f"suspect AUROC (posterior score, quantile T): peer {peer['suspects']['auroc']:.4f}, flipmend {sus['auroc']:.4f}; "
      f"precision at 100: peer {peer['suspects']['precision_at_n']:.3f}, flipmend {sus['precision_at_n']:.3f}")
print(f"quantile T error (mean abs / max abs): peer {qe.get('anchor_quantile', qe)}, flipmend {{'mean_abs': {err.mean():.4f}, 'max_abs': {err.max():.4f}}}")
PY
