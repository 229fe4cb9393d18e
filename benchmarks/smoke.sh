#!/bin/sh
# Smoke run of the scan benchmark at a small size (< 60 s); exits non-zero if any step fails.
# Usage (from the repository root): sh benchmarks/smoke.sh [python]
set -eu
cd "$(dirname "$0")/.."
PY="${1:-python}"
WORK="$(mktemp -d)"
trap 'rm -rf "$WORK"' EXIT
PYTHONPATH=. "$PY" benchmarks/run.py --small --work "$WORK"
