#!/usr/bin/env bash
# Makes .venv-bench/ (git-ignored) with the reference library the benches measure against:
# rapidfuzz (a general-purpose fuzzy-string library) and numpy, from PyPI. The benches find
# .venv-bench/bin/python, or the Python named by WAYMARK_PYTHON.
set -euo pipefail
cd "$(dirname "$0")/.."
python3 -m venv .venv-bench
.venv-bench/bin/pip install --quiet --upgrade pip
.venv-bench/bin/pip install --quiet rapidfuzz numpy threadpoolctl
.venv-bench/bin/python -c 'import numpy, rapidfuzz; print("reference scan ready: rapidfuzz", rapidfuzz.__version__, "numpy", numpy.__version__)'
