#!/usr/bin/env bash
# Installs what the tests check against when it is missing: Debian's word list (apt-get, as
# root) and the test environment .venv-test/ (a Python virtual environment, git-ignored)
# with NumPy, scikit-learn (its bundled digits), pytest, maturin and pyspark (the Spark jobs'
# tests, in local mode; Spark needs Java 17 or later) from PyPI. Nothing is
# installed into the system Python.
set -euo pipefail
cd "$(dirname "$0")/.."
export DEBIAN_FRONTEND=noninteractive
if [ ! -f /usr/share/dict/american-english ] || [ ! -f /usr/share/dict/british-english ]; then
  if [ "$(id -u)" = 0 ]; then
    apt-get update -qq && apt-get install -y -qq wamerican wbritish >/dev/null
  else
    echo "scripts/test-data.sh: install Debian's word lists first: sudo apt-get install -y wamerican wbritish" >&2
    exit 1
  fi
fi
# The Spark jobs' tests run Spark in local mode, which needs a Java runtime (17 or later).
if ! command -v java >/dev/null 2>&1; then
  if [ "$(id -u)" = 0 ]; then
    apt-get update -qq && apt-get install -y -qq openjdk-17-jre-headless >/dev/null
  else
    echo "scripts/test-data.sh: install a Java runtime (17 or later) first: sudo apt-get install -y openjdk-17-jre-headless" >&2
    exit 1
  fi
fi
venv=.venv-test
if [ ! -x "$venv/bin/python" ]; then
  python3 -m venv "$venv"
fi
# The versions are left to pip (the newest that suit the Python); an environment that
# already has them all is left as it is.
if ! "$venv/bin/python" -c "import numpy, sklearn, pytest, pyspark" 2>/dev/null \
  || [ ! -x "$venv/bin/maturin" ]; then
  "$venv/bin/python" -m pip install -q --upgrade pip
  "$venv/bin/python" -m pip install -q numpy scikit-learn pytest maturin pyspark
fi
