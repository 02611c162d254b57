#!/bin/sh
# Measures an index that grows (README, "Keeping an index current"): adding 1,000 items to
# the 663,473-word index against a rebuild; 20 additions of 1,000 items, then approximate
# and exact queries on the grown index against a fresh single-part index over the same
# items (same answers for exact, q/s ratio for approximate at the defaults); compaction
# against a rebuild. Items added: British and German words not in the index's list.
# Usage: scripts/bench-growing.sh [WAYMARK]   (default target/release/waymark)
# WAYMARK_GROWING_RUNS (default 2): alternating query runs per index; the q/s ratio printed
# is the median of the runs' ratios (grown ÷ fresh), each run timing both indexes back to back.
set -u
W=${1:-target/release/waymark}
RUNS=${WAYMARK_GROWING_RUNS:-2}
BIG=/usr/share/dict/american-english-insane
T=$(mktemp -d)
trap 'rm -rf "$T"' EXIT
secs() { start=$(date +%s.%N); "$@"; end=$(date +%s.%N); echo "$end - $start" | bc; }
echo "load: $(cat /proc/loadavg)"
# 21,000 new items: words of other lists that the index does not hold.
cat /usr/share/dict/british-english /usr/share/dict/ngerman | sort -u > "$T/other"
sort -u "$BIG" > "$T/big-sorted"
comm -23 "$T/other" "$T/big-sorted" | awk 'NR % 3 == 0' | head -21000 > "$T/new"
split -l 1000 -d -a 2 "$T/new" "$T/add."
# Queries: every 663rd word with its third character replaced by `e` (by characters).
python3 -c 'import sys
w = open(sys.argv[1], encoding="utf-8").read().split("\n")
for x in w[662::663][:1000]: print(x[:2] + "e" + x[3:])' "$BIG" > "$T/q"
echo "build of $(wc -l < "$BIG") words: $(secs "$W" build "$BIG" -o "$T/g.wmk" -q) s"
echo "add 1,000: $(secs "$W" add "$T/g.wmk" "$T/add.00" 2>/dev/null) s"
for i in $(seq -w 1 20); do "$W" add "$T/g.wmk" "$T/add.$i" 2>/dev/null; done
"$W" inspect "$T/g.wmk" | sed -n '1,40p'
cat "$BIG" "$T/new" > "$T/all"
echo "rebuild of $(wc -l < "$T/all") items: $(secs "$W" build "$T/all" -o "$T/one.wmk" -q) s"
: > "$T/ratios"
for run in $(seq 1 "$RUNS"); do
  for idx in g one; do
    "$W" query "$T/$idx.wmk" --queries "$T/q" -k 10 --summary > "$T/a.$idx" 2> "$T/s"
    echo "approximate, $idx (run $run): $(cat "$T/s")"
    sed 's/.*(\([0-9]*\) queries\/s).*/\1/' "$T/s" > "$T/qps.$idx"
  done
  echo "$(cat "$T/qps.g") $(cat "$T/qps.one")" >> "$T/ratios"
done
python3 - "$T/ratios" <<'PY'
import statistics, sys
r = [float(a) / float(b) for a, b in (l.split() for l in open(sys.argv[1]))]
print(f"q/s grown / fresh: median {statistics.median(r):.3f} of {len(r)} runs "
      f"(min {min(r):.3f}, max {max(r):.3f})")
PY
"$W" query "$T/g.wmk" --queries "$T/q" -k 10 --exact | sed 's/,"exact":.*//' > "$T/eg"
"$W" query "$T/one.wmk" --queries "$T/q" -k 10 --exact | sed 's/,"exact":.*//' > "$T/eo"
if cmp -s "$T/eg" "$T/eo"; then echo "exact answers: identical"; else echo "exact answers: DIFFER"; fi
# Threshold recall@10 of the approximate answers: answers within the 10th exact distance.
for idx in g one; do
  python3 - "$T/a.$idx" "$T/eg" "$idx" <<'PY'
import json, sys
a = [json.loads(l) for l in open(sys.argv[1])]
e = [json.loads(l + "}") if not l.rstrip().endswith("}") else json.loads(l) for l in open(sys.argv[2])]
hit = tot = 0
for x, y in zip(a, e):
    kth = y["neighbors"][-1]["distance"]
    hit += min(10, sum(1 for n in x["neighbors"] if n["distance"] <= kth))
    tot += 10
print(f"threshold recall@10, {sys.argv[3]}: {hit / tot:.4f}")
PY
done
echo "compact: $(secs "$W" compact "$T/g.wmk" 2>/dev/null) s"
echo "load: $(cat /proc/loadavg)"
