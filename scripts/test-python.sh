#!/usr/bin/env bash
# Builds the Python package (python/, one release build with maturin into the workspace's
# target/), installs it into the test environment that scripts/test-data.sh makes, and runs
# its pytest suite (python/tests/). The tests run the release binary target/release/waymark
# too (same answers as the command line): it is built here when missing.
set -euo pipefail
cd "$(dirname "$0")/.."
venv=.venv-test
if [ ! -x "$venv/bin/maturin" ]; then
  echo "scripts/test-python.sh: $venv is missing or incomplete: run scripts/test-data.sh first" >&2
  exit 1
fi
cargo build --release --locked --bin waymark
# `maturin develop` builds the extension and installs the package into the active
# environment, without a wheel on disk or an isolated build environment.
VIRTUAL_ENV="$PWD/$venv" "$venv/bin/maturin" develop --release --locked \
  --manifest-path python/Cargo.toml -q
WAYMARK_BIN="$PWD/target/release/waymark" "$venv/bin/python" -m pytest -q python/tests "$@"
