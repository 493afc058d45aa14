#!/usr/bin/env bash
# Evaluates the demo model folder (cmd/evaluate, package study): fresh synthetic
# phantoms generated in memory from a seed never used in training (200
# in-distribution and 20 of each shift type by default) and the real scans of
# Debian's nibabel and pydicom test data, scored through ONNX Runtime as
# `brightfold score` scores them. Prints the figures, writes
# out/evaluation/{evaluation.json,cases.csv,evaluation.md}, recomputes every
# AUROC and ECE from cases.csv with sklearn under /usr/bin/python3, and
# refreshes the figures block of docs/evaluation.md.
#
# EVAL_N, EVAL_PER_SHIFT, EVAL_SEED and EVAL_MODEL (a model folder folder or zip)
# change the run; EVAL_DOC= (empty) leaves docs/evaluation.md alone.
set -euo pipefail
cd "$(dirname "$0")/.."
export BRIGHTFOLD_ORT_LIB=${BRIGHTFOLD_ORT_LIB:-$PWD/.cache/onnxruntime/libonnxruntime.so.1}
args=(-out out/evaluation -n "${EVAL_N:-200}" -per-shift "${EVAL_PER_SHIFT:-20}")
[[ -n "${EVAL_SEED:-}" ]] && args+=(-seed "$EVAL_SEED")
[[ -n "${EVAL_MODEL:-}" ]] && args+=(-model "$EVAL_MODEL")
doc=${EVAL_DOC-docs/evaluation.md}
[[ -n "$doc" ]] && args+=(-doc "$doc")
mkdir -p bin
${GO:-go} build -o bin/evaluate ./cmd/evaluate
exec bin/evaluate "${args[@]}"
