#!/usr/bin/env bash
# Sharded build against the plain build on the 663,473 words of Debian's
# american-english-insane (package wamerican-insane): wall time and peak memory of
# `waymark build` with and without `--shards 2` (/usr/bin/time -v), then queries per second
# over both indexes, exact (-k 10) and approximate (-k 10, the index's default candidates),
# and whether the exact answers agree. Run in one go: the machine is shared, so compare the
# ratios of one run. Usage: scripts/bench-shards.sh [WORK_DIR]
set -euo pipefail
cd "$(dirname "$0")/.."
words=/usr/share/dict/american-english-insane
if [ ! -f "$words" ]; then
  echo "scripts/bench-shards.sh: install Debian's wamerican-insane first (apt-get install wamerican-insane)" >&2
  exit 1
fi
cargo build --release --locked --bin waymark
bin="$PWD/target/release/waymark"
work=${1:-$(mktemp -d)}
mkdir -p "$work"
# Queries: 1,000 lower-case ASCII words of the British list (every 41st) with their middle
# letter doubled (the first 200 for exact).
grep -E '^[a-z]+$' /usr/share/dict/british-english \
  | awk 'NR % 41 == 0 && n < 1000 { n++; m = int(length($0) / 2) + 1; print substr($0, 1, m) substr($0, m) }' \
  > "$work/queries.txt"
head -200 "$work/queries.txt" > "$work/queries-exact.txt"
peak() { grep -E "Elapsed|Maximum resident" "$1" | sed 's/^\s*//'; }
for run in plain shards; do
  extra=()
  [ "$run" = shards ] && extra=(--shards 2)
  /usr/bin/time -v "$bin" build "$words" -o "$work/$run.wmk" --no-calibration -q "${extra[@]}" \
    2> "$work/$run.time"
  echo "build $run: $(peak "$work/$run.time" | tr '\n' ' ')"
done
for run in plain shards; do
  "$bin" query "$work/$run.wmk" -k 10 --queries "$work/queries.txt" --summary \
    > "$work/$run.approx.json" 2> "$work/$run.approx.err"
  echo "approximate $run: $(tail -1 "$work/$run.approx.err")"
  "$bin" query "$work/$run.wmk" -k 10 --exact --queries "$work/queries-exact.txt" --summary \
    --format tsv > "$work/$run.exact.tsv" 2> "$work/$run.exact.err"
  echo "exact $run: $(tail -1 "$work/$run.exact.err")"
done
if cmp -s <(cut -f1-5 "$work/plain.exact.tsv") <(cut -f1-5 "$work/shards.exact.tsv"); then
  echo "exact answers: identical"
else
  echo "exact answers: DIFFER"
fi
# Threshold recall@10 of the approximate answers of the first 200 queries, against the
# plain index's exact answers (an answer counts when within the 10th true distance).
python3 - "$work" <<'PY'
import json, sys
work = sys.argv[1]
kth = {}
for line in open(f"{work}/plain.exact.tsv", encoding="utf-8"):
    q, rank, _, _, d = line.rstrip("\n").split("\t")[:5]
    if rank == "10":
        kth[q] = float(d)
for run in ("plain", "shards"):
    lines = [json.loads(l) for l in open(f"{work}/{run}.approx.json", encoding="utf-8")][:200]
    hit = sum(min(10, sum(n["distance"] <= kth[o["query"]] for n in o["neighbors"])) for o in lines)
    print(f"recall@10 {run}: {hit / (10 * len(lines)):.4f} on {len(lines)} queries")
PY
