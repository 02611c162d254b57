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
# Queries: 1,000 words of the British list with their middle letter doubled (200 for exact).
awk 'NR % 97 == 0 { m = int(length($0) / 2) + 1; print substr($0, 1, m) substr($0, m) }' \
  /usr/share/dict/british-english | head -1000 > "$work/queries.txt"
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
