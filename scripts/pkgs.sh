#!/usr/bin/env bash
# Lists the module's packages of one kind: `pure` (no cgo anywhere in their
# dependencies: tested with -race) or `cgo` (OpenCV or ONNX Runtime below
# them: tested without). Every package is in exactly one list.
set -euo pipefail
cd "$(dirname "$0")/.."
kind=${1:?usage: pkgs.sh pure|cgo}
go list -f '{{.ImportPath}} {{join .Deps " "}}' ./... | awk -v kind="$kind" '{
  cgo = 0
  for (i = 2; i <= NF; i++) if ($i ~ /^gocv\.io\/|^github\.com\/yalue\/onnxruntime_go/) { cgo = 1; break }
  if ((kind == "cgo") == cgo) print $1
}'
