#!/usr/bin/env bash
# Runs the benchmarks and prints ratios against references measured in the same run.
set -euo pipefail
cd "$(dirname "$0")/.."
go test -run '^$' -bench . -benchmem ./...
