#!/usr/bin/env bash
# Runs the whole test suite of a build directory: the C++ tests through CTest, and the Python
# reference tests (which check the PyTorch reference modules themselves).
set -euo pipefail
BUILD="${1:-build}"
ROOT="$(cd "$(dirname "$0")/.." && pwd)"

echo "== C++ tests (ctest)"
ctest --test-dir "$BUILD" --output-on-failure -j "$(nproc)" --timeout 900

echo "== Python reference tests"
PYTHONPATH="$ROOT/converter/python" /usr/bin/python3 -m unittest discover \
  -s "$ROOT/tests/python" -p 'test_*.py'
