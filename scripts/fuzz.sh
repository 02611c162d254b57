#!/usr/bin/env bash
# Runs every fuzz target for a set time, split over the cores, and prints what libFuzzer saw.
#   scripts/fuzz.sh [SECONDS_PER_TARGET]   (default 60)
# Needs cargo-fuzz (`cargo install cargo-fuzz`); the sanitizer flags it passes need a nightly
# compiler, which RUSTC_BOOTSTRAP=1 unlocks on the stable toolchain.
set -euo pipefail
cd "$(dirname "$0")/../fuzz"
secs=${1:-60}
jobs=$(nproc)
export RUSTC_BOOTSTRAP=1
mkdir -p corpus/index_file corpus/ingest corpus/query_text artifacts
# Seeds: real index files (so mutations start past the magic number) and real inputs.
if [ ! -f corpus/index_file/seed-small.wmk ]; then
  (cd .. && cargo build --release -q)
  tmp=$(mktemp -d)
  printf 'Skerry Light\nSalt Store\nNorth Mole\nHarbour Office\nKeth Landing\n' > "$tmp/a.txt"
  ../target/release/waymark build "$tmp/a.txt" -o corpus/index_file/seed-small.wmk --dim 3 -q
  printf 'code,name\nA1,Skerry Light\nA2,"Salt, Store"\n' > "$tmp/b.csv"
  ../target/release/waymark build "$tmp/b.csv" -o corpus/index_file/seed-csv.wmk --field name --id-field code --fold-case -q
  printf '\x00Skerry Light\r\nSalt Store\n' > corpus/ingest/text
  printf '\x05code,name\nA1,Skerry Light\nA2,"Salt, Store"\n' > corpus/ingest/csv
  printf '\x07{"code":"A1","name":"Skerry Light"}\n{"code":7,"name":"Salt Store"}\n' > corpus/ingest/jsonl
  printf 'Skery Lihgt' > corpus/query_text/typo
  rm -rf "$tmp"
fi
for t in $(cargo fuzz list); do
  mkdir -p "corpus/$t"
  echo "== $t: ${secs} s on ${jobs} workers"
  cargo fuzz run "$t" "corpus/$t" -- -max_total_time="$secs" -fork="$jobs" \
    -artifact_prefix="artifacts/$t-" -print_final_stats=1 2>&1 | tail -n 15
done
