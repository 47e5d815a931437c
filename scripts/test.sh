#!/usr/bin/env bash
# make test after lint: the pure-Go packages with the race detector and the
# cgo packages (OpenCV, ONNX Runtime) without it, side by side — many cgo
# tests wait on real-time streams, and the race build fills those waits.
# Each package runs once; both logs are printed whole, pure first.
set -uo pipefail
cd "$(dirname "$0")/.."
GO=${GO:-go}
TAGS=${TAGS:-matprofile}
mkdir -p out
pure=$(bash scripts/pkgs.sh pure) || exit 1
cgo=$(bash scripts/pkgs.sh cgo) || exit 1
# shellcheck disable=SC2086
$GO test -race $pure >out/test-pure.log 2>&1 &
pure_pid=$!
# shellcheck disable=SC2086
$GO test -tags "$TAGS" -timeout 20m $cgo >out/test-cgo.log 2>&1 &
cgo_pid=$!
wait $pure_pid; pure_rc=$?
wait $cgo_pid; cgo_rc=$?
echo "== go test -race (pure-Go packages)"; cat out/test-pure.log
echo "== go test -tags $TAGS (cgo packages)"; cat out/test-cgo.log
if [ $pure_rc -ne 0 ] || [ $cgo_rc -ne 0 ]; then
  echo "make test: FAILED (pure exit $pure_rc, cgo exit $cgo_rc)"
  exit 1
fi
echo "make test: ok"
