#!/usr/bin/env bash
# make bench: micro-benchmarks and end-to-end replays, written to out/bench.txt
# as tables a person can read.
set -euo pipefail
cd "$(dirname "$0")/.."
mkdir -p out bin
go build -o bin/tallyd ./cmd/tallyd
report=out/bench.txt
{
  echo "# tallyd benchmarks — $(date -u +%Y-%m-%dT%H:%MZ), $(nproc) cores, $(go version | cut -d' ' -f3)"
  echo
  echo "## Micro-benchmarks (go test -bench)"
  echo
  go test -run '^$' -bench . -benchmem ./track/... ./detect ./events/... ./capture/scene/... ./capture/mailbox/... 2>&1 \
    | awk '/^Benchmark/ {printf "%-60s %s\n", $1, substr($0, index($0,$2))} /^(ok|FAIL)/ {print "  " $0}'
  echo
  echo "## End-to-end replay, pace max (decode -> detect -> track -> rules -> publish)"
  echo
  printf '%-34s %10s %10s %10s %12s\n' "input" "frames" "seconds" "frames/s" "peak RSS MiB"
  run() {
    local name=$1; shift
    local t0 t1 out
    t0=$(date +%s.%N)
    out=$(/usr/bin/time -f '%M' ./bin/tallyd replay --summary json "$@" 2>/tmp/tallyd-bench-time) || { echo "$name: failed"; return; }
    t1=$(date +%s.%N)
    local frames rss
    frames=$(echo "$out" | tail -n1 | sed -E 's/.*"frames_processed":([0-9]+).*/\1/')
    rss=$(tail -n1 /tmp/tallyd-bench-time)
    awk -v n="$name" -v f="$frames" -v a="$t0" -v b="$t1" -v r="$rss" \
      'BEGIN {s=b-a; printf "%-34s %10d %10.2f %10.1f %12.0f\n", n, f, s, f/s, r/1024}'
  }
  run "generated demo scene (motion)" -c configs/demo.yaml
  if [ -f ../shared/footage/vtest.avi ]; then
    run "vtest.avi 768x576 (motion)" -c configs/footage.yaml
  else
    echo "vtest.avi: skipped (../shared/footage absent)"
  fi
  echo
  echo "## Counting on every generated seed (go test -tags allseeds; make test runs one seed)"
  echo
  go test -count=1 -tags allseeds -v -run 'TestTruthBoxesCountExactly|TestMotionDetectorWithinFivePercent' ./cmd/tallyd/ 2>&1 \
    | grep -E '^(=== RUN|--- |ok|FAIL)|counted .* truth' | grep -v '=== RUN' | sed 's/^ *//'
  go test -count=1 -tags allseeds -v -run 'TestFaultStudy' ./track/eval/ 2>&1 | grep -v '^=== RUN' | sed 's/^ *//'
} | tee "$report"
echo "written to $report"

# ---------------------------------------------------------------------------
# Delivery: the outbox, JetStream acks, the whole way out (README "Delivery").
{
  echo
  echo "## Delivery: outbox (bbolt), JetStream publish with acks, embedded server on loopback"
  echo
  {
    go test -run '^$' -bench 'AppendGrouped|AppendOne|ReadDelete' -benchtime 3s ./events/outbox/
    go test -tags matprofile -run '^$' -bench 'DeliveryPath' -benchtime 100000x ./internal/pipeline/
    # 30,000 events = a 5-minute outage at 100 events/s, drained from the outbox.
    go test -run '^$' -bench 'Deliver/(mem|outbox)$' -benchtime 30000x ./events/bus/
    go test -run '^$' -bench 'Deliver/paced100' -benchtime 300x ./events/bus/
  } 2>&1 | awk '/^Benchmark/ {printf "%-44s %s\n", $1, substr($0, index($0,$2))} /^(ok|FAIL)/ {print "  " $0}'
  echo
  echo "AppendGrouped: records/s into the outbox with grouped commits; AppendOne: one commit each."
  echo "DeliveryPath: events/s sustained from the rules' hand-off to the JetStream ack (goal >= 20,000)."
  echo "Deliver/outbox at 30000x: the outbox's drain rate after a 5-minute outage at 100 events/s."
  echo "Deliver/paced100: publish -> ack latency at 100 events/s."
} | tee -a "$report"

# ---------------------------------------------------------------------------
# ONNX detectors (detect/onnx): inference alone per engine, pre/post-processing,
# end-to-end replay and per-stage time, appended to the same report.
echo
bash scripts/bench_onnx.sh | tee -a "$report"

# ---------------------------------------------------------------------------
# Live sources at scale (internal/pipeline BenchmarkLiveSources): cameras held
# at 10 fps, frame age and drops at twice that many, a soak with 8 cameras
# (TALLYD_SOAK, default 10m) and the CPU motion gating saves. Long: about
# 15 minutes. Skip with TALLYD_BENCH_LIVE=0.
if [ "${TALLYD_BENCH_LIVE:-1}" != "0" ]; then
  {
    echo
    echo "## Live sources: 10 fps Motion-JPEG cameras over loopback, YOLOX-Nano on ONNX Runtime"
    echo
    export TALLYD_ORT_LIB="${TALLYD_ORT_LIB:-$PWD/.cache/onnxruntime/1.24.1/libonnxruntime.so.1}"
    go test -run '^$' -bench LiveSources -benchtime 1x -timeout 60m ./internal/pipeline/ 2>&1 \
      | sed -n 's/^ *live_bench_test.go:[0-9]*: //p; /^BenchmarkLiveSources/p'
  } | tee -a "$report"
fi
