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
  log=$(mktemp)
  if ! go test -run '^$' -fuzz "^${name}\$" -fuzztime "$t" -fuzzminimizetime 0 "$pkg" >"$log" 2>&1; then
    # A finding always writes its input ("Failing input written to ...").
    # The fuzzing engine can also stop with a bare "context deadline
    # exceeded" when the time budget ends mid-run; that is not a finding.
    if grep -q "Failing input written\|panic:" "$log" || ! grep -q "context deadline exceeded" "$log"; then
      cat "$log"; rm -f "$log"; exit 1
    fi
    echo "fuzz: $name: the engine stopped at its deadline without a finding"
  fi
  rm -f "$log"
done
