#!/bin/sh
# Full benchmark run (a few minutes on 2 cores); figures go to bench/last-run.json and .txt.
# Usage: [PYTHON=/path/to/python] bench/run.sh [raytrace bench options, e.g. --workers 2]
set -e
cd "$(dirname "$0")/.."
"${PYTHON:-python3}" -m raytrace.cli bench --json bench/last-run.json "$@" | tee bench/last-run.txt
