#!/usr/bin/env bash
# flipmend against the hand-written reference pipeline in ../shared/bench (numpy, scipy,
# pandas, scikit-learn), on the same generated files, stage by stage.
#
#   bash benches/vs_peer.sh [ROWS] [RUNS]              (defaults 200000 3)
#   bash benches/vs_peer.sh --scale [ROWS] [CLASSES]    (defaults 1000000 100)
#
# Pipeline mode: make_data.py writes ROWS × 32 features × 10 classes with symmetric 40 %
# noise, 2 % trusted rows and 20,000 clean test rows. Runs alternate between peer.py and
# `flipmend compare` (same split sizes, 5 folds, its default T estimator where the peer
# takes the anchor quantile, none/forward/backward). Each
# side reports its own stage times (the peer's stage_seconds; flipmend's FLIPMEND_TIMING
# line), and the script prints the median of each stage on both sides with their ratio,
# the whole pipeline's ratio, test accuracies and T errors against the true matrix. Then
# the suspect ranking: the peer's training part is written out, flipmend computes its own
# out-of-fold probabilities there (`estimate --probs-out`) and ranks with `suspects`; the
# AUROC against the true labels is compared with the peer's.
#
# Scale mode: a seeded probability array (ROWS × CLASSES, f32 .npy, pair flips of 20 %)
# and its table; times `flipmend suspects` (quantile T, posterior scores of every row,
# ranking, worklist) against the peer's own functions for the same steps (anchor_matrix
# with the quantile, suspect_scores, argsort) on the same array, and reports peak memory
# against the array's size.
#
# Skips, with a message, when Python or its packages are missing (CI does not run this).
set -euo pipefail
cd "$(dirname "$0")/.."
bench=../shared/bench
if ! command -v python3 >/dev/null || ! python3 -c "import numpy, scipy, pandas, sklearn" 2>/dev/null; then
  echo "skipped: python3 with numpy, scipy, pandas and scikit-learn is needed"
  echo "         (python3 -m pip install numpy scipy pandas scikit-learn)"
  exit 0
fi
[ -f "$bench/peer.py" ] || { echo "skipped: $bench/peer.py not found"; exit 0; }
cargo build --release --quiet
bin=$PWD/target/release/flipmend
median() { printf '%s\n' "$@" | sort -g | awk '{a[NR]=$1} END {print a[int((NR+1)/2)]}'; }

if [ "${1:-}" = "--scale" ]; then
  rows=${2:-1000000}
  classes=${3:-100}
  dir=${TMPDIR:-/tmp}/flipmend-scale-${rows}x${classes}
  mkdir -p "$dir"
  if [ ! -f "$dir/probs.npy" ]; then
    python3 - "$dir" "$rows" "$classes" <<'PY'
import sys
import numpy as np
d, n, k = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
rng = np.random.default_rng(0)
true = rng.integers(0, k, n)
t = np.eye(k) * 0.8 + np.roll(np.eye(k), 1, axis=1) * 0.2  # pair flips of 20 %
flip = rng.random(n) < 0.2
observed = np.where(flip, (true + 1) % k, true)
confidence = rng.beta(5, 2, n)  # a decent model: most mass on the true class
clean = rng.dirichlet(np.full(k, 0.3), n) * (1 - confidence)[:, None]
clean[np.arange(n), true] += confidence
noisy = (clean @ t).astype(np.float32)
noisy /= noisy.sum(1, keepdims=True)
np.save(f"{d}/probs.npy", noisy)
x = rng.normal(size=(n, 2))
with open(f"{d}/table.csv", "w") as f:
    f.write("id,label,truth,f0,f1\n")
    f.writelines(f"{i},c{o},c{c},{a:.4f},{b:.4f}\n" for i, (o, c, (a, b)) in enumerate(zip(observed, true, x)))
PY
  fi
  echo "scale: $rows rows x $classes classes; probabilities $(du -m "$dir/probs.npy" | cut -f1) MiB (.npy, f32)"
  peer_t=() ours_t=() ours_mem=() stage_lines=()
  for _ in 1 2 3; do
    peer_t+=("$(python3 - "$dir" "$bench" <<'PY'
import sys, time
sys.path.insert(0, sys.argv[2])
import numpy as np, pandas as pd
from peer import anchor_matrix, natural_key, suspect_scores
d = sys.argv[1]
start = time.perf_counter()
p = np.load(f"{d}/probs.npy").astype(np.float64)
labels = pd.read_csv(f"{d}/table.csv", usecols=["label"], dtype=str)["label"].to_numpy()
classes = sorted(set(labels), key=natural_key)
y = pd.Categorical(labels, categories=classes).codes
t, _ = anchor_matrix(p, 0.97)
order = np.argsort(-suspect_scores(p, y, t), kind="stable")[:1000]
print(f"{time.perf_counter() - start:.3f}")
PY
)")
    line=$( { FLIPMEND_TIMING=1 /usr/bin/time -f "%e %M" "$bin" suspects --data "$dir/table.csv" \
      --probs "$dir/probs.npy" --top 1000 --out "$dir/worklist.csv" >/dev/null; } 2>&1 )
    stage_lines+=("$(grep '^flipmend timing' <<<"$line")")
    ours_t+=("$(tail -1 <<<"$line" | awk '{print $1}')")
    ours_mem+=("$(tail -1 <<<"$line" | awk '{print $2}')")
  done
  p=$(median "${peer_t[@]}"); o=$(median "${ours_t[@]}")
  echo "peer (load .npy + table labels, anchor-quantile T, posterior scores, argsort): median $p s"
  echo "flipmend suspects (whole process, same steps + worklist file): median $o s; speed-up $(python3 -c "print(f'{$p / $o:.1f}x')")"
  printf '%s\n' "${stage_lines[@]}"
  npy_kib=$(( $(stat -c %s "$dir/probs.npy") / 1024 ))
  peak=$(printf '%s\n' "${ours_mem[@]}" | sort -g | tail -1)
  echo "flipmend peak memory $((peak / 1024)) MiB = $(python3 -c "print(f'{$peak / $npy_kib:.2f}')") x the probability array"
  exit 0
fi

rows=${1:-200000}
runs=${2:-3}
dir=${TMPDIR:-/tmp}/flipmend-peer-${rows}
if [ ! -f "$dir/data.csv" ]; then
  python3 "$bench/make_data.py" --rows "$rows" --features 32 --classes 10 --noise symmetric --rate 0.4 \
    --trusted-frac 0.02 --test-rows 20000 --seed 0 --out "$dir" >/dev/null
fi
peer_lines=() ours_lines=() ours_wall=()
for _ in $(seq "$runs"); do
  python3 "$bench/peer.py" --data "$dir" --json "$dir/peer.json" >/dev/null
  peer_lines+=("$(python3 -c "
import json; j = json.load(open('$dir/peer.json'))
print(' '.join(f'{k}={v}' for k, v in j['stage_seconds'].items()), f\"pipeline={j['pipeline_seconds']}\")")")
  start=$(date +%s.%N)
  line=$(FLIPMEND_TIMING=1 "$bin" compare --data "$dir/data.csv" --test "$dir/test.csv" --json "$dir/ours.json" 2>&1 >/dev/null \
    | grep '^flipmend timing')
  ours_wall+=("$(python3 -c "print($(date +%s.%N) - $start)")")
  ours_lines+=("${line#flipmend timing: }")
done
python3 - "$dir" "$(printf '%s\n' "${peer_lines[@]}")" "$(printf '%s\n' "${ours_lines[@]}")" "${ours_wall[*]}" <<'PY'
import json, statistics, sys
import numpy as np, pandas as pd
d = sys.argv[1]
parse = lambda text: [dict((kv.split("=")[0], float(kv.split("=")[1])) for kv in line.split()) for line in text.splitlines()]
peer_runs, ours_runs = parse(sys.argv[2]), parse(sys.argv[3])
walls = [float(x) for x in sys.argv[4].split()]
med = lambda runs, *keys: statistics.median(sum(r.get(k, 0.0) for k in keys) for r in runs)
# Peer stage(s) ↔ flipmend stage(s) doing the same work.
pairs = [
    ("load", ["a_load"], ["load_table", "load_other"]),
    ("split + standardise", ["b_split_scale"], ["split"]),
    ("out-of-fold probabilities", ["c_oof"], ["probabilities"]),
    ("T (peer quantile, ours default)", ["d_t_anchor_quantile"], ["matrix"]),
    ("train none", ["g_train_none"], ["fit_none"]),
    ("train forward", ["g_train_forward"], ["fit_forward"]),
    ("train backward", ["g_train_backward"], ["fit_backward"]),
]
print(f"{len(walls)} alternating runs; medians in seconds")
print(f"{'stage':<28}{'peer':>8}{'flipmend':>10}{'ratio':>8}")
for name, p_keys, o_keys in pairs:
    p, o = med(peer_runs, *p_keys), med(ours_runs, *o_keys)
    print(f"{name:<28}{p:>8.3f}{o:>10.3f}{p / o if o else float('nan'):>7.1f}x")
extra = med(ours_runs, "fit_prune", "predict", "evaluate", "write")
print(f"{'(flipmend only: prune, predictions, evaluation, output)':<46}{extra:>10.3f}")
p_all, o_all = med(peer_runs, "pipeline"), statistics.median(walls)
print(f"{'whole pipeline':<28}{p_all:>8.3f}{o_all:>10.3f}{p_all / o_all:>7.1f}x   (peer: pipeline_seconds; flipmend: the whole process)")
peer, ours = json.load(open(f"{d}/peer.json")), json.load(open(f"{d}/ours.json"))
mine = {m["correction"]: m for m in ours["models"]}
for mode in ["none", "forward", "backward"]:
    p, o = peer["models"][mode]["test_acc"], mine[mode]["test_accuracy"]
    print(f"test accuracy {mode:<9} peer {p:.4f}  flipmend {o:.4f}  ({100 * (o - p):+.2f} points)")
print(f"test accuracy prune     flipmend {mine['prune']['test_accuracy']:.4f} (the peer has no prune)")
true_t = pd.read_csv(f"{d}/true_matrix.csv", dtype={"class": str}).set_index("class")
classes = ours["classes"]
err = np.abs(np.array(ours["matrix"]) - true_t.loc[classes, classes].to_numpy())
pe = peer["T_error"]["anchor_quantile"]
print(f"quantile T error (mean abs / max abs): peer {pe['mean_abs']:.4f} / {pe['max_abs']:.4f}, "
      f"flipmend {err.mean():.4f} / {err.max():.4f}")
PY
# Suspects on the peer's training part (its split: sklearn, random_state 0).
python3 - "$dir" <<'PY'
import sys, pandas as pd
from sklearn.model_selection import train_test_split
d = sys.argv[1]
df = pd.read_csv(f"{d}/data.csv", dtype={"label": str, "trusted": str}, keep_default_na=False)
tr, _ = train_test_split(range(len(df)), test_size=0.2, stratify=df["label"], random_state=0)
part = df.iloc[sorted(tr)].copy()
truth = pd.read_csv(f"{d}/truth.csv", dtype={"true_label": str}).set_index("id")["true_label"]
part["truth"] = truth.loc[part["id"].astype(int)].to_numpy()
part.to_csv(f"{d}/train_part.csv", index=False)
PY
"$bin" estimate --data "$dir/train_part.csv" --probs-out "$dir/oof_ours.csv" >/dev/null
line=$(FLIPMEND_TIMING=1 "$bin" suspects --data "$dir/train_part.csv" --truth truth --probs "$dir/oof_ours.csv" \
  --top 100 --json "$dir/suspects.json" 2>&1 >/dev/null | grep '^flipmend timing')
python3 - "$dir" "$line" <<'PY'
import json, sys
d, line = sys.argv[1], sys.argv[2]
peer, sus = json.load(open(f"{d}/peer.json")), json.load(open(f"{d}/suspects.json"))["truth"]
stages = dict(kv.split("=") for kv in line.split(": ", 1)[1].split())
ours = sum(float(stages[k]) for k in ("matrix", "scores", "diagnose", "rank"))
p = peer["stage_seconds"]["d_t_anchor_quantile"] + peer["stage_seconds"]["f_suspects"]
print(f"suspects on the training part: peer quantile T + scores + sort {p:.3f} s, flipmend {ours:.3f} s "
      f"(matrix, scores, diagnostics, ranking; one run)")
print(f"suspect AUROC (posterior score, quantile T): peer {peer['suspects']['auroc']:.4f}, flipmend {sus['auroc']:.4f}; "
      f"precision at 100: peer {peer['suspects']['precision_at_n']:.3f}, flipmend {sus['precision_at_n']:.3f}")
PY
