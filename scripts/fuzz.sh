#!/usr/bin/env bash
# Runs fuzz targets for a set time each, split over the cores, and prints what libFuzzer saw
# and the CPU time the fuzzers got.
#   scripts/fuzz.sh [SECONDS_PER_TARGET] [TARGET...]   (default 60, every target)
#   FUZZ_JOBS=N   workers per target (default: the number of cores)
#   FUZZ_NICE=N   niceness of the fuzzers (default 19: builds of other people come first)
# Needs cargo-fuzz (`cargo install cargo-fuzz --locked`); the sanitizer flags it passes need
# a nightly compiler, which RUSTC_BOOTSTRAP=1 unlocks on the stable toolchain.
# Corpora persist in fuzz/corpus/, so a second run goes on from where the first stopped.
# A crash stops that target and leaves its input in fuzz/artifacts/TARGET-crash-*.
set -euo pipefail
cd "$(dirname "$0")/../fuzz"
secs=${1:-60}
shift || true
jobs=${FUZZ_JOBS:-$(nproc)}
nice_level=${FUZZ_NICE:-19}
export RUSTC_BOOTSTRAP=1
mkdir -p corpus/index_file corpus/index_meta corpus/ingest corpus/query_text artifacts
# Seeds: real index files (so mutations start past the magic number) and real inputs.
if [ ! -f corpus/index_file/seed-small.wmk ]; then
  (cd .. && cargo build --release -q)
  tmp=$(mktemp -d)
  printf 'Skerry Light\nSalt Store\nNorth Mole\nHarbour Office\nKeth Landing\n' > "$tmp/a.txt"
  ../target/release/waymark build "$tmp/a.txt" -o corpus/index_file/seed-small.wmk --dim 3 -q
  printf 'code,name\nA1,Skerry Light\nA2,"Salt, Store"\n' > "$tmp/b.csv"
  ../target/release/waymark build "$tmp/b.csv" -o corpus/index_file/seed-csv.wmk --field name --id-field code --fold-case -q
  printf '\x00Skerry Light\r\nSalt Store\n' > corpus/ingest/text
  # The first byte picks the format (its value mod 6) and the field (its value / 6 mod 3):
  # see fuzz_targets/ingest.rs.
  printf '\x07code,name\nA1,Skerry Light\nA2,"Salt, Store"\n' > corpus/ingest/csv
  printf '\x0b{"code":"A1","name":"Skerry Light"}\n{"code":7,"name":"Salt Store"}\n' > corpus/ingest/jsonl
  printf '\x03>bc1 plate1\nACGT\nAC\n>bc2\nTTGA\n' > corpus/ingest/fasta
  printf '\x04@r1 x\nACGT\n+\nIIII\n@r2\nAC\n+\n@+\n' > corpus/ingest/fastq
  printf 'Skery Lihgt' > corpus/query_text/typo
  rm -rf "$tmp"
fi
if [ $# -gt 0 ]; then targets=("$@"); else mapfile -t targets < <(cargo fuzz list); fi

# CPU seconds (user + sys) of this shell's finished children, from bash's `times` (run in
# this shell, not in a pipeline, which would be a subshell with children of its own).
cpu_file=$(mktemp)
trap 'rm -f "$cpu_file" "$cpu_file".*' EXIT
child_cpu() {
  times >"$cpu_file"
  tail -n 1 "$cpu_file" | awk '{
    t = 0
    for (i = 1; i <= 2; i++) { split($i, p, "m"); sub("s", "", p[2]); t += p[1] * 60 + p[2] }
    printf "%.1f", t
  }'
}

# Build first, so that compiling is not counted as fuzzing time.
for t in "${targets[@]}"; do cargo fuzz build "$t" >/dev/null; done
total=0
for t in "${targets[@]}"; do
  mkdir -p "corpus/$t"
  echo "== $t: ${secs} s on ${jobs} workers at nice ${nice_level}"
  child_cpu >"$cpu_file.before"
  status=0
  nice -n "$nice_level" cargo fuzz run "$t" "corpus/$t" -- -max_total_time="$secs" \
    -fork="$jobs" -artifact_prefix="artifacts/$t-" -print_final_stats=1 \
    >"artifacts/$t.log" 2>&1 || status=$?
  child_cpu >"$cpu_file.after"
  cpu=$(awk -v a="$(cat "$cpu_file.after")" -v b="$(cat "$cpu_file.before")" \
    'BEGIN { printf "%.1f", a - b }')
  total=$(awk -v a="$total" -v b="$cpu" 'BEGIN { printf "%.1f", a + b }')
  tail -n 15 "artifacts/$t.log"
  echo "== $t: exit ${status}, CPU ${cpu} s (user + sys of the fuzzers), log in fuzz/artifacts/$t.log"
done
echo "== total fuzzing CPU: ${total} s ($(awk -v t="$total" 'BEGIN { printf "%.1f", t / 60 }') min)"
