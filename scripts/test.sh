#!/usr/bin/env bash
# The project's test command: the Rust tests, then the Python package built from python/
# into a fresh virtual environment (`pip install ./python`, as a user installs it) and its
# tests. Arguments go to `cargo test`. VOXSTRATA_TEST_VENV names the venv folder (default:
# a new temporary one, removed afterwards).
set -euo pipefail
cd "$(dirname "$0")/.."
root=$(pwd)
cargo test "$@"
if [ -n "${VOXSTRATA_TEST_VENV:-}" ]; then
  venv=$VOXSTRATA_TEST_VENV
  rm -rf "$venv"
else
  tmp=$(mktemp -d)
  trap 'rm -rf "$tmp"' EXIT
  venv=$tmp/venv
fi
python3 -m venv "$venv"
"$venv/bin/python" -m pip install -q -r python/tests/requirements.txt
"$venv/bin/python" -m pip install -q ./python
# From the repository root, so `import voxstrata` is the installed package, not python/'s
# source folder.
cd "$root"
"$venv/bin/python" -m pytest -q python/tests
