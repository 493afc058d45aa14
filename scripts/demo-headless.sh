#!/usr/bin/env bash
# The headless demo (what `make run` does without a display): makes a small
# demo cohort with shifted cases, inspects one case, and scores an
# in-distribution case with a relevance map, a shifted case, and a real
# reference scan from Debian's nibabel test data.
set -euo pipefail
bin=${1:-bin/brightfold}
out=${BRIGHTFOLD_DEMO_OUT:-out/demo}
mkdir -p "$out"
cohort="$out/cohort"
if [ ! -f "$cohort/cohort.csv" ]; then
  "$bin" demo cohort "$cohort" --n 10 --shifts
fi
line() { printf '\n== %s\n' "$*"; }
first_in=$(awk -F, 'NR>1 && $10=="none" {print $1; exit}' "$cohort/cohort.csv")
first_shift=$(awk -F, 'NR>1 && $10!="none" {print $1; exit}' "$cohort/cohort.csv")
scan_of() { awk -F, -v id="$1" 'NR>1 && $1==id {print $2}' "$cohort/cohort.csv"; }

line "inspect $first_in"
"$bin" inspect "$cohort/$(scan_of "$first_in")"

line "score $first_in with an LRP relevance map (outputs in $out/$first_in)"
"$bin" score "$cohort/$(scan_of "$first_in")" --map lrp --out "$out/$first_in"

line "score $first_shift (a deliberately shifted case)"
"$bin" score "$cohort/$(scan_of "$first_shift")" --out "$out/$first_shift"

ref=/usr/lib/python3/dist-packages/nibabel/tests/data/anatomical.nii
if [ -f "$ref" ]; then
  line "score a real scan the demo model was never meant for ($ref)"
  "$bin" score "$ref" --out "$out/anatomical"
fi
line "done: results, relevance.nii.gz and overlay.png are under $out"
