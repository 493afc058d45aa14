#!/usr/bin/env bash
# Runs the benchmarks and prints ratios against references measured in the same run.
set -euo pipefail
cd "$(dirname "$0")/.."
go test -run '^$' -bench . -benchmem ./...

# --- score overhead and peak memory (issue 4) ---------------------------------
# One process: wall time of scoring a 256×256×176 1 mm scan against the bare
# ONNX Runtime Run on the same tensor (goal: (score − Run)/Run ≤ 0.2), and the
# peak resident memory of `brightfold score` in a child process (goal ≤ 600 MB).
echo "== score overhead (cmd/brightfold BenchmarkScoreOverhead) =="
go test -run '^$' -bench '^BenchmarkScoreOverhead$' -benchtime 5x ./cmd/brightfold | grep -E '^(Benchmark|ok|FAIL)'
