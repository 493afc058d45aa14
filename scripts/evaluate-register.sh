#!/usr/bin/env bash
# Full recovery evaluation of internal/register (the alignment issue): 30
# random affine transforms on a demo phantom and on nibabel's anatomical.nii,
# 10 perturbed starting points, 10 T2-to-T1 cross-contrast transforms, and
# dipy 1.6 on every anatomical.nii pair and on nibabel's moved copies, in
# one run with the transforms' seed 14; then the anatomical.nii comparison
# (our NCC and MI against dipy, 30 pairs) again with a second seed
# (REGISTER_SEED2, default 20261203). `go test` runs a few of each; this
# runs all (about 20-30 minutes on 2 busy cores). Prints the figures the
# tests log, keeps them in out/evaluation/register.txt and refreshes the
# alignment block of docs/evaluation.md (REGISTER_DOC= leaves it alone).
# Exits non-zero when a check failed (after writing the figures).
set -uo pipefail
cd "$(dirname "$0")/.."
seed2=${REGISTER_SEED2:-20261203}
doc=${REGISTER_DOC-docs/evaluation.md}
mkdir -p out/evaluation
log=out/evaluation/register.txt
filter() { grep -E '_test.go:[0-9]+: |^(--- |ok|FAIL)' | sed -E 's/^ +//'; }
started=$(date -u '+%Y-%m-%d %H:%M UTC')
status=0
{
  echo "## seed 14: every check"
  BRIGHTFOLD_REGISTER_FULL=1 go test -count=1 -timeout 180m -v \
    -run 'TestPhantomRecovery|TestPerturbedStarts|TestCrossContrast|TestNibabelAnatomicalRecovery|TestNibabelMovedCopies' \
    ./internal/register | filter
} | tee "$log"
[[ ${PIPESTATUS[0]} -eq 0 ]] || status=1
grep -q '^FAIL' "$log" && status=1
{
  echo "## seed $seed2: anatomical.nii against dipy again"
  BRIGHTFOLD_REGISTER_FULL=1 BRIGHTFOLD_REGISTER_SEED=$seed2 go test -count=1 -timeout 180m -v \
    -run 'TestNibabelAnatomicalRecovery' ./internal/register | filter
} | tee -a "$log"
grep -q '^FAIL' "$log" && status=1
if [[ -n "$doc" ]]; then
  /usr/bin/python3 - "$doc" "$log" "$started" <<'PY'
import re, sys
doc, log, started = sys.argv[1:4]
begin = "<!-- alignment figures: begin (written by `make evaluate-register`) -->"
end = "<!-- alignment figures: end -->"
lines = [f"Run started {started} (`make evaluate-register`, scripts/evaluate-register.sh); "
         "figures as the tests log them (mean and maximum displacement over the head between the found "
         "and the true transform; dipy 1.6 measured in the same run):", ""]
for l in open(log).read().splitlines():
    if l.startswith("## "):
        lines += ["", "**" + l[3:] + "**", ""]
        continue
    l = re.sub(r"^\S+_test\.go:\d+: ", "", l)
    lines.append("- " + l.replace("|", "\\|"))
block = begin + "\n" + "\n".join(lines).strip() + "\n" + end
text = open(doc).read()
if begin in text and end in text:
    text = text[:text.index(begin)] + block + text[text.index(end) + len(end):]
else:
    text = text.rstrip("\n") + "\n\n" + block + "\n"
open(doc, "w").write(text)
PY
fi
exit $status
