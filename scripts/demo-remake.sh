#!/usr/bin/env bash
# `model make` on the committed demo model with the demo recipe's own cases
# (its 500 validation and calibration phantoms as the calibration split, its
# 200 held-out phantoms as the validation split), compared with
# assets/demo-model/card.json: same model.onnx, held-out AUROC within the
# recipe's tolerance 0.02, temperature within 0.2. Writes 700 1 mm phantoms
# (about 1 GB) to DEMO_REMAKE_DIR (default: a temporary folder); slow (tens
# of minutes on 2 cores), hence a script and not a test. Research use only.
set -euo pipefail
cd "$(dirname "$0")/.."
export BRIGHTFOLD_ORT_LIB="${BRIGHTFOLD_ORT_LIB:-$PWD/.cache/onnxruntime/libonnxruntime.so.1}"
work="${DEMO_REMAKE_DIR:-$(mktemp -d)}"
[ -n "${DEMO_REMAKE_DIR:-}" ] || trap 'rm -rf "$work"' EXIT
go run ./cmd/traindemo -out assets/demo-model -remake "$work" "$@"
