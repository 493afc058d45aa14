#!/usr/bin/env bash
# Installs what Brightfold needs on Debian 12 and is quiet when all is there:
# Debian packages for building, references and the screenshot check, and the
# ONNX Runtime shared library taken from the npm package onnxruntime-node.
set -euo pipefail
cd "$(dirname "$0")/.."

# Build: gcc, libgl1-mesa-dev, xorg-dev, pkg-config.
# References the tests require: python3-nibabel, python3-pydicom, python3-sklearn,
# python3-scipy, python3-torch, python3-statsmodels, python3-dipy, r-cran-proc,
# libonnx-testdata. A private Slurm cluster for the sweep test: slurmctld,
# slurmd, slurm-client, munge. Checks of outputs: xvfb, xauth (screenshots),
# poppler-utils (pdftotext/pdftoppm on PDF reports), tesseract-ocr (exports).
PKGS="gcc libgl1-mesa-dev xorg-dev pkg-config python3-nibabel python3-pydicom python3-sklearn python3-scipy python3-torch python3-statsmodels python3-dipy r-cran-proc libonnx-testdata slurmctld slurmd slurm-client munge xvfb xauth poppler-utils tesseract-ocr"
missing=""
for p in $PKGS; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing="$missing $p"
done
if [ -n "$missing" ]; then
  if [ "$(id -u)" = 0 ]; then
    echo "setup: installing Debian packages:$missing"
    export DEBIAN_FRONTEND=noninteractive
    apt-get update -q >/dev/null
    apt-get install -y -q --no-install-recommends $missing >/dev/null
  else
    echo "setup: missing Debian packages. Run as root:"
    echo "  sudo apt-get update && sudo apt-get install -y$missing"
    exit 1
  fi
fi

# ONNX Runtime 1.30.0 (MIT) from the npm package; only the Linux x64 library is kept.
ORT_VERSION=1.30.0
ORT_SHA256=ffb75a925ba05e47b235bb66e3e3911714a80b328a9c9425539feb204aa32a23
ORT_DIR=.cache/onnxruntime
ORT_LIB=$ORT_DIR/libonnxruntime.so.1
have_ok() { [ -f "$ORT_LIB" ] && echo "$ORT_SHA256  $ORT_LIB" | sha256sum -c --quiet - >/dev/null 2>&1; }
if ! have_ok; then
  command -v npm >/dev/null || { echo "setup: npm is needed to fetch onnxruntime-node@$ORT_VERSION"; exit 1; }
  echo "setup: fetching ONNX Runtime $ORT_VERSION (npm package onnxruntime-node)"
  mkdir -p "$ORT_DIR"
  tmp=$(mktemp -d)
  trap 'rm -rf "$tmp"' EXIT
  (cd "$tmp" && npm pack --silent "onnxruntime-node@$ORT_VERSION" >/dev/null)
  tar xzf "$tmp"/onnxruntime-node-$ORT_VERSION.tgz -C "$tmp" package/bin/napi-v6/linux/x64/libonnxruntime.so.1
  mv "$tmp/package/bin/napi-v6/linux/x64/libonnxruntime.so.1" "$ORT_LIB.part"
  if ! echo "$ORT_SHA256  $ORT_LIB.part" | sha256sum -c --quiet -; then
    rm -f "$ORT_LIB.part"
    echo "setup: $ORT_LIB: sha256 does not match the pinned $ORT_SHA256; refusing it"
    exit 1
  fi
  mv "$ORT_LIB.part" "$ORT_LIB"
fi
