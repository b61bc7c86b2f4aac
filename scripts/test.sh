#!/usr/bin/env bash
# The one test command (README): formatting, lints, the Rust test suite, then
# the external reference checks (nibabel, scipy, ...) in a Python virtual
# environment that this script creates and fills from PyPI.
set -euo pipefail
cd "$(dirname "$0")/.."
root=$(pwd)
target=${CARGO_TARGET_DIR:-$root/target}
artifacts=$target/test-artifacts
rm -rf "$artifacts"
mkdir -p "$artifacts"
export HOROSPHERE_ARTIFACTS=$artifacts

echo "== cargo fmt --check"
cargo fmt --all -- --check
echo "== cargo clippy"
cargo clippy --all-targets -- -D warnings
echo "== cargo test"
cargo test --all-targets
# Doc tests run in the same dev profile.
cargo test --doc

echo "== reference checks (Python venv)"
venv=${HOROSPHERE_VENV:-$root/.venv}
if [ ! -x "$venv/bin/python" ]; then
  python3 -m venv "$venv"
fi
"$venv/bin/python" -m pip install --quiet --upgrade pip
"$venv/bin/python" -m pip install --quiet -r tests/reference/requirements.txt
export HOROSPHERE_BIN=$target/debug/horosphere
set +e
"$venv/bin/python" -m pytest tests/reference -q
status=$?
set -e
# pytest exits 5 when it collects no test: that is a failure of this script too.
if [ $status -ne 0 ]; then
  echo "reference checks failed (pytest exit $status)" >&2
  exit $status
fi
echo "all checks passed"
