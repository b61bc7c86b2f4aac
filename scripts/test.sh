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

echo "== chromium (for the report check in a real browser)"
# tests/reference/test_report_chromium.py opens the HTML report in Debian's
# chromium through Playwright (no browser download). Install it when missing.
if [ ! -x /usr/bin/chromium ]; then
  if [ "$(id -u)" -eq 0 ]; then
    apt-get update -qq && apt-get install -y -qq chromium
  elif command -v sudo >/dev/null 2>&1; then
    sudo apt-get update -qq && sudo apt-get install -y -qq chromium
  else
    echo "chromium is missing and neither root nor sudo is available; the browser check will skip (or fail when CI is set)" >&2
  fi
fi

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
