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
mkdir -p corpus artifacts
for t in $(cargo fuzz list); do
  mkdir -p "corpus/$t"
  echo "== $t: ${secs} s on ${jobs} workers"
  cargo fuzz run "$t" "corpus/$t" -- -max_total_time="$secs" -fork="$jobs" \
    -artifact_prefix="artifacts/$t-" -print_final_stats=1 2>&1 | tail -n 15
done
