#!/usr/bin/env bash
# Install olibra with its test extras into .venv and run the whole test suite.
# Exits non-zero when a test fails or when no test ran at all.
set -euo pipefail
cd "$(dirname "$0")/.."
python3 -m venv .venv
.venv/bin/python -m pip install -q --upgrade pip
.venv/bin/python -m pip install -q -e ".[test,postgres,xtb,cluster]"
status=0
.venv/bin/python -m pytest "$@" || status=$?
if [ "$status" -eq 5 ]; then
  echo "no tests were collected: that is a failure" >&2
  exit 1
fi
exit "$status"
