#!/usr/bin/env bash
# Full recovery evaluation of internal/register (the alignment issue): 30
# random affine transforms on a demo phantom and on nibabel's anatomical.nii,
# 10 perturbed starting points, 10 T2-to-T1 cross-contrast transforms, and
# dipy 1.6 on every anatomical.nii pair and on nibabel's moved copies, in
# one run. `go test` runs a few of each; this runs all (about 10-20 minutes
# on 2 cores). Prints the figures the tests log.
set -euo pipefail
cd "$(dirname "$0")/.."
BRIGHTFOLD_REGISTER_FULL=1 go test -count=1 -timeout 180m -v \
  -run 'TestPhantomRecovery|TestPerturbedStarts|TestCrossContrast|TestNibabelAnatomicalRecovery|TestNibabelMovedCopies' \
  ./internal/register | grep -E 'register_test.go|^(--- |ok|FAIL)'
