#!/usr/bin/env bash
# Installs the open datasets the tests check against when they are missing: Debian's word
# list (apt-get, as root) and scikit-learn's bundled digits (pip).
set -euo pipefail
cd "$(dirname "$0")/.."
export DEBIAN_FRONTEND=noninteractive
if [ ! -f /usr/share/dict/american-english ]; then
  if [ "$(id -u)" = 0 ]; then
    apt-get update -qq && apt-get install -y -qq wamerican >/dev/null
  else
    echo "scripts/test-data.sh: install Debian's word list first: sudo apt-get install -y wamerican" >&2
    exit 1
  fi
fi
python3 -c "import sklearn, numpy" 2>/dev/null || python3 -m pip install -q scikit-learn
