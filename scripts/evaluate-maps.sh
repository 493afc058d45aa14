#!/usr/bin/env bash
# First compares the LRP composite candidates on the first SEARCH_N (default
# 50) pattern-positive 1 mm phantoms of the tuning seed 20261230
# (study.RuleSearchSeed; cmd/evaluate -rule-search: the choice of the default
# composite by the rule of study.RuleSearchSeed's comment; about 7 minutes on
# 2 idle cores). With SEARCH_ONLY=1 (make evaluate-lrp-rules) it stops there.
# Then measures the relevance maps of the demo model folder (cmd/evaluate
# -maps, package study): every method on the first MAPS_N (default 50)
# pattern-positive 1 mm phantoms of seed MAPS_SEED (default 20261210, used
# for no training or fitting; earlier LRP configurations were looked at on
# it), relevance mass accuracy against the ground-truth mask and the share
# of the logit each map carries. Writes out/evaluation/maps.json and
# refreshes the rule-search and relevance-map blocks of docs/evaluation.md
# (MAPS_DOC= leaves it alone). About 45 minutes on 2 idle cores for 50 cases.
set -euo pipefail
cd "$(dirname "$0")/.."
export BRIGHTFOLD_ORT_LIB=${BRIGHTFOLD_ORT_LIB:-$PWD/.cache/onnxruntime/libonnxruntime.so.1}
args=(-maps -out out/evaluation -n "${MAPS_N:-50}")
[[ -n "${MAPS_SEED:-}" ]] && args+=(-seed "$MAPS_SEED")
[[ -n "${EVAL_MODEL:-}" ]] && args+=(-model "$EVAL_MODEL")
doc=${MAPS_DOC-docs/evaluation.md}
[[ -n "$doc" ]] && args+=(-doc "$doc")
mkdir -p bin
${GO:-go} build -o bin/evaluate ./cmd/evaluate
search=(-rule-search -n "${SEARCH_N:-50}")
[[ -n "${EVAL_MODEL:-}" ]] && search+=(-model "$EVAL_MODEL")
[[ -n "$doc" ]] && search+=(-doc "$doc")
bin/evaluate "${search[@]}"
[[ "${SEARCH_ONLY:-}" == 1 ]] && exit 0
exec bin/evaluate "${args[@]}"
