#!/usr/bin/env bash
# Runs every fuzz target listed in scripts/fuzz.list ("./pkg FuzzName" per line)
# for a short budget each (FUZZTIME, default 10s).
set -euo pipefail
cd "$(dirname "$0")/.."
t=${FUZZTIME:-10s}
[ -f scripts/fuzz.list ] || exit 0
grep -v '^\s*#' scripts/fuzz.list | while read -r pkg name; do
  [ -n "${pkg:-}" ] || continue
  echo "fuzz: $pkg $name ($t)"
  go test -run '^$' -fuzz "^${name}\$" -fuzztime "$t" -fuzzminimizetime 0 "$pkg" >/tmp/brightfold-fuzz.log 2>&1 || { cat /tmp/brightfold-fuzz.log; exit 1; }
done
