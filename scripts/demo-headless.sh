#!/usr/bin/env bash
# The headless demo: makes the demo cohort, inspects and scores a case.
set -euo pipefail
bin=${1:-bin/brightfold}
out=out/demo
mkdir -p "$out"
"$bin" demo cohort "$out/cohort" --n 12 --shifts
