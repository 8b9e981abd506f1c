#!/bin/sh
# Full benchmark run (a few minutes on 2 cores); figures go to bench/last-run.json and .txt.
# Usage: bench/run.sh [extra raytrace bench options, e.g. --workers 2]
set -e
cd "$(dirname "$0")/.."
raytrace bench --json bench/last-run.json "$@" | tee bench/last-run.txt
