#!/bin/sh
# Measures a graph index that grows (README, "Keeping an index current", graphs): an
# invented road network of 224 × 224 = 50,176 junctions (a grid with pseudo-random road
# lengths and a diagonal shortcut in one cell of 7). The build holds rows 0 to 199 (44,800
# junctions); the addition is rows 200 to 223 with the roads that join them to row 199, a
# ring road between old junctions (it shortens old routes) and an island. Times: the
# build, the add (which rewrites the index on the union graph), a build of the union graph
# in one go; then exact answers of the grown index against the one-go build (distances
# compared) and the approximate recall@10 of both.
# Usage: scripts/bench-graph-growth.sh [WAYMARK]   (default target/release/waymark)
set -u
W=${1:-target/release/waymark}
T=$(mktemp -d)
trap 'rm -rf "$T"' EXIT
secs() { start=$(date +%s.%N); "$@"; end=$(date +%s.%N); echo "$end - $start" | bc; }
echo "load: $(cat /proc/loadavg)"
python3 - "$T" <<'PY'
import sys
t = sys.argv[1]
N = 224
state = 0x9E3779B97F4A7C15
def rnd(k):
    global state
    state = (state * 6364136223846793005 + 1442695040888963407) % (1 << 64)
    return (state >> 33) % k
def name(r, c):
    return f"J{r:03d}x{c:03d}"
base, more = [], []
for r in range(N):
    for c in range(N):
        edges = []
        if c + 1 < N:
            edges.append((name(r, c), name(r, c + 1)))
        if r + 1 < N:
            edges.append((name(r, c), name(r + 1, c)))
        if r + 1 < N and c + 1 < N and rnd(7) == 0:
            edges.append((name(r, c), name(r + 1, c + 1)))
        for a, b in edges:
            w = (rnd(160) + 4) / 4
            # An edge into row 200 or below belongs to the addition.
            (more if max(int(a[1:4]), int(b[1:4])) >= 200 else base).append((a, b, w))
# A ring road over old junctions, much faster than the grid roads.
ring = [name(20, c) for c in range(20, 180, 10)] + [name(r, 180) for r in range(20, 180, 10)]
for a, b in zip(ring, ring[1:]):
    more.append((a, b, 0.5))
more += [("Isle-N", "Isle-S", 3.0)]
with open(f"{t}/base.txt", "w") as f:
    f.write("# invented road network: junction, junction, minutes\n")
    f.writelines(f"{a} {b} {w}\n" for a, b, w in base)
with open(f"{t}/more.txt", "w") as f:
    f.writelines(f"{a} {b} {w}\n" for a, b, w in more)
with open(f"{t}/all.txt", "w") as f:
    f.writelines(f"{a} {b} {w}\n" for a, b, w in base + more)
with open(f"{t}/q", "w") as f:
    for i in range(500):
        f.write(name(rnd(N), rnd(N)) + "\n")
PY
echo "edges: base $(grep -vc '^#' "$T/base.txt"), addition $(wc -l < "$T/more.txt")"
echo "build of the base: $(secs "$W" build "$T/base.txt" -o "$T/g.wmk" --metric graph -q) s"
echo "add: $(secs "$W" add "$T/g.wmk" "$T/more.txt" --metric graph 2>"$T/add.log") s"
cat "$T/add.log"
echo "build of the union graph: $(secs "$W" build "$T/all.txt" -o "$T/one.wmk" --metric graph -q) s"
for idx in g one; do
  "$W" query "$T/$idx.wmk" --queries "$T/q" -k 10 --exact > "$T/e.$idx"
  "$W" query "$T/$idx.wmk" --queries "$T/q" -k 10 > "$T/a.$idx"
done
python3 - "$T" <<'PY'
import json, sys
t = sys.argv[1]
load = lambda p: [json.loads(l) for l in open(p)]
eg, eo = load(f"{t}/e.g"), load(f"{t}/e.one")
same = all([n["distance"] for n in x["neighbors"]] == [n["distance"] for n in y["neighbors"]]
           for x, y in zip(eg, eo)) and len(eg) == len(eo)
print("exact distances, grown vs one-go build:", "identical" if same else "DIFFER")
for idx in ("g", "one"):
    a = load(f"{t}/a.{idx}")
    hit = sum(min(10, sum(1 for n in x["neighbors"] if n["distance"] <= y["neighbors"][-1]["distance"]))
              for x, y in zip(a, eg))
    print(f"recall@10 ({'grown' if idx == 'g' else 'one-go'}): {hit / (10 * len(a)):.3f}")
PY
