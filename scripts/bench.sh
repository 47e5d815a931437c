#!/usr/bin/env bash
# make bench: micro-benchmarks and end-to-end replays, written to out/bench.txt
# as tables a person can read. Every timed figure is the best of BENCH_RUNS
# runs (default 3) with its CPU time per frame (getrusage: user + system of
# the whole process) beside the rate, and the machine's load average
# (/proc/loadavg) is printed before and after: figures from a loaded machine
# are not comparable.
#
#   bash scripts/bench.sh            everything (make bench)
#   bash scripts/bench.sh sessions   only the inference sessions section
set -euo pipefail
cd "$(dirname "$0")/.."
mkdir -p out bin
runs=${BENCH_RUNS:-3}
loadavg() { cut -d' ' -f1-3 /proc/loadavg 2>/dev/null || echo "?"; }

# ---------------------------------------------------------------------------
# Inference sessions (detect/onnx pool, internal/pipeline scheduler): ONNX
# Runtime settings one by one, n sessions at once, the end-to-end replay with
# the default pool against the setting shipped before it, memory per session.
# Rounds are interleaved (every benchmark once per round) so that a passing
# load spreads over all of them; each figure is the best round.
sessions_section() {
  echo "## Inference sessions: YOLOX-Nano 416 on vtest.avi, ONNX Runtime 1.24.1 (best of $runs interleaved runs)"
  echo
  if [ ! -f ../shared/models/yolox_nano_coco_416.onnx ] || [ ! -f ../shared/footage/vtest.avi ]; then
    echo "skipped: ../shared/models or ../shared/footage absent"
    return 0
  fi
  echo "load average before: $(loadavg)"
  local raw=out/bench_sessions.raw.txt
  : >"$raw"
  go test -tags matprofile -c -o bin/onnx13.test ./detect/onnx/
  go test -tags matprofile -c -o bin/pipeline13.test ./internal/pipeline/
  for r in $(seq "$runs"); do
    (cd detect/onnx && ../../bin/onnx13.test -test.run '^$' -test.bench 'InferORT$|InferSettings|InferSessions' -test.benchtime 200x) >>"$raw" 2>&1
    (cd internal/pipeline && ../../bin/pipeline13.test -test.run '^$' -test.bench 'ReplayPool' -test.benchtime 1x -test.v) >>"$raw" 2>&1
    (cd detect/onnx && ../../bin/onnx13.test -test.run '^$' -test.bench 'SessionMemory' -test.benchtime 1x) >>"$raw" 2>&1
  done
  rm -f bin/onnx13.test bin/pipeline13.test
  # best NAME UNIT max|min: the best value of UNIT over the runs of NAME.
  best() {
    awk -v n="$1" -v u="$2" -v how="$3" '$1 ~ "^"n"(-[0-9]+)?$" { for (i = 3; i < NF; i += 2) if ($(i+1) == u) {
        v = $i + 0; if (!seen || (how == "max" && v > b) || (how == "min" && v < b)) b = v; seen = 1 } }
      END { if (seen) print b }' "$raw"
  }
  printf '%-58s %10s %13s\n' "run (one session unless said)" "frames/s" "CPU ms/frame"
  row() { printf '%-58s %10s %13s\n' "$1" "$(best "$2" frames/s max)" "$(best "$2" cpu-ms/frame min)"; }
  row "inference alone, 2 threads, spinning, all optimisers (old)" 'BenchmarkInferORT'
  row "  2 threads, spinning off" 'BenchmarkInferSettings/threads2-nospin-fused'
  row "  2 threads, spinning off, QuickGelu fusion off" 'BenchmarkInferSettings/threads2-nospin-unfused'
  row "  1 thread, QuickGelu fusion on" 'BenchmarkInferSettings/threads1-fused'
  row "  1 thread, QuickGelu fusion off (a default session)" 'BenchmarkInferSettings/threads1-unfused'
  for n in 1 2 4; do row "inference alone, $n default sessions at once" "BenchmarkInferSessions/sessions-$n"; done
  for n in 1 2; do
    row "end-to-end replay, $n source(s), default pool" "BenchmarkReplayPool/sources-$n/pool"
    row "end-to-end replay, $n source(s), old setting (1 session, 2 threads)" "BenchmarkReplayPool/sources-$n/legacy"
  done
  echo
  local cores old mhz fpc
  cores=$(nproc)
  old=$(best 'BenchmarkInferORT' frames/s max)
  mhz=$(awk -F: '/^cpu MHz/ { printf "%.0f", $2; exit }' /proc/cpuinfo 2>/dev/null || echo 0)
  # FP32 FLOP per cycle and core (from memory): two FMA units of 16 lanes
  # with AVX-512 (64), of 8 lanes with AVX2 (32). Override for your CPU.
  fpc=32
  if grep -qw avx512f /proc/cpuinfo 2>/dev/null; then fpc=64; fi
  fpc=${BENCH_FLOPS_PER_CYCLE:-$fpc}
  for n in 1 2; do
    [ "$n" -le "$cores" ] || continue
    awk -v n="$n" -v a="$(best "BenchmarkInferSessions/sessions-$n" frames/s max)" -v o="$old" \
      -v e="$(best "BenchmarkReplayPool/sources-$n/pool" frames/s max)" -v eo="$(best "BenchmarkReplayPool/sources-$n/legacy" frames/s max)" 'BEGIN {
      if (a > 0) printf "%d source(s): end-to-end / inference alone on %d session(s): %.2f (goal >= 0.95)\n", n, n, e / a
      if (o > 0) printf "%d source(s): end-to-end / the old two-thread inference loop alone: %.2fx (goal >= 1.2x)\n", n, e / o
      if (eo > 0) printf "%d source(s): end-to-end, default pool / old setting end-to-end: %.2fx\n", n, e / eo }'
  done
  awk -v mhz="$mhz" -v fpc="$fpc" -v inf="$(best 'BenchmarkInferSettings/threads1-unfused' cpu-ms/frame min)" \
    -v c="$(best 'BenchmarkReplayPool/sources-1/pool' cpu-ms/frame min)" 'BEGIN {
    # 1.05 GFLOP per 416x416 frame (YOLOX-Nano; the paper gives 1.08 GFLOPs).
    if (inf > 0 && mhz > 0) printf "inference, 1 thread: %.2f CPU ms/frame = %.0f GFLOP/s per core = %.0f%% of %d FP32 FLOP/cycle at %d MHz (BENCH_FLOPS_PER_CYCLE; a turbo clock lowers the share)\n", inf, 1.05 / inf * 1000, 100 * (1.05 / inf * 1000) / (fpc * mhz / 1000), fpc, mhz
    if (c > 0) printf "end-to-end, 1 source: %.2f CPU ms/frame for everything (decode, prepare, inference, tracking, rules, publishing)\n", c }'
  grep -E '^ *pool_bench_test.go:[0-9]+: .*line counts' "$raw" | sed -E 's/^ *pool_bench_test.go:[0-9]+: [0-9]+ frames in [0-9.]+ s, //' \
    | sort | uniq -c | awk '{ n = $1; $1 = ""; printf "%s run(s):%s\n", n, $0 }'
  awk '$1 ~ /^BenchmarkSessionMemory/ { for (i = 3; i < NF; i += 2) if ($(i+1) == "MiB/session") m = m " " $i }
    END { if (m != "") printf "resident memory per extra session (MiB, per run):%s\n", m }' "$raw"
  echo "load average after: $(loadavg). Raw go test output: $raw"
}

if [ "${1:-}" = "sessions" ]; then
  sessions_section | tee out/bench_sessions.txt
  exit 0
fi

go build -o bin/tallyd ./cmd/tallyd
report=out/bench.txt
{
  echo "# tallyd benchmarks — $(date -u +%Y-%m-%dT%H:%MZ), $(nproc) cores, $(go version | cut -d' ' -f3)"
  echo "load average at the start: $(loadavg)"
  echo
  echo "## Micro-benchmarks (go test -bench)"
  echo
  go test -run '^$' -bench . -benchmem ./track/... ./detect ./events/... ./capture/scene/... ./capture/mailbox/... 2>&1 \
    | awk '/^Benchmark/ {printf "%-60s %s\n", $1, substr($0, index($0,$2))} /^(ok|FAIL)/ {print "  " $0}'
  echo
  echo "## End-to-end replay, pace max (decode -> detect -> track -> rules -> publish), best of $runs runs"
  echo
  printf '%-34s %8s %9s %10s %13s %12s\n' "input" "frames" "seconds" "frames/s" "CPU ms/frame" "peak RSS MiB"
  # run NAME ARGS...: the fastest of $runs replays, with the CPU time
  # (user + system, from getrusage via /usr/bin/time) per frame of that run.
  run() {
    local name=$1; shift
    local t0 t1 out frames rss cpu bestline="" line
    for _ in $(seq "$runs"); do
      t0=$(date +%s.%N)
      out=$(/usr/bin/time -f '%M %U %S' ./bin/tallyd replay --summary json "$@" 2>/tmp/tallyd-bench-time) || { echo "$name: failed"; return; }
      t1=$(date +%s.%N)
      frames=$(echo "$out" | tail -n1 | sed -E 's/.*"frames_processed":([0-9]+).*/\1/')
      read -r rss u s < <(tail -n1 /tmp/tallyd-bench-time)
      line=$(awk -v n="$name" -v f="$frames" -v a="$t0" -v b="$t1" -v r="$rss" -v u="$u" -v s="$s" \
        'BEGIN {t=b-a; printf "%.6f %-34s %8d %9.2f %10.1f %13.2f %12.0f", f/t, n, f, t, f/t, (u+s)*1000/f, r/1024}')
      if [ -z "$bestline" ] || awk -v x="${line%% *}" -v y="${bestline%% *}" 'BEGIN {exit !(x > y)}'; then bestline=$line; fi
    done
    echo "${bestline#* }"
  }
  run "generated demo scene (motion)" -c configs/demo.yaml
  if [ -f ../shared/footage/vtest.avi ]; then
    run "vtest.avi 768x576 (motion)" -c configs/footage.yaml
    if [ -f ../shared/models/yolox_nano_coco_416.onnx ]; then
      run "vtest.avi 768x576 (YOLOX-Nano, pool)" -c configs/footage-people.yaml
    fi
  else
    echo "vtest.avi: skipped (../shared/footage absent)"
  fi
  echo "load average after the replays: $(loadavg)"
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
echo | tee -a "$report"
sessions_section | tee -a "$report"

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
    echo
    echo "Cameras held at 10 fps, default session pool against the old setting (1 session, 2 threads):"
    echo "load average before: $(loadavg)"
    go test -tags matprofile -run '^$' -bench LiveCamerasPool -benchtime 1x -timeout 60m ./internal/pipeline/ 2>&1 \
      | sed -n 's/^ *pool_bench_test.go:[0-9]*: //p; /^BenchmarkLiveCamerasPool/p'
    echo "load average after: $(loadavg)"
  } | tee -a "$report"
fi

# Tracking: the comparison table with SORT's published row, and tracker
# updates per second on one core (README "Tracking").
{
  echo
  echo "## Tracking: default and tuned settings on the public detections and the fault study"
  echo
  go test ./track/eval -run TrackingTable -tune -v 2>&1 | grep '^ *|' | sed 's/^ *//'
  echo
  echo "Tracker updates (one core):"
  go test ./track -run '^$' -bench 'BenchmarkUpdate/bytetrack' -cpu 1 -benchtime 2s 2>&1 | grep '^Benchmark'
} | tee -a "$report"

# H.264 decode cost through capture (README "H.264 cameras").
{
  echo
  echo "## H.264 decode cost through capture (CPU per frame)"
  echo "load average before: $(loadavg)"
  go test -tags matprofile -run '^$' -bench H264Decode -benchtime 3x -count "$runs" ./capture/ 2>&1 | grep '^BenchmarkH264Decode'
  echo "load average after: $(loadavg)"
} | tee -a "$report"
# A site over several daemons (internal/fleet): 3-node JetStream cluster on
# loopback inside the test binary, R3 buckets and stream (README "Running a
# site on several machines"). About 2 minutes.
{
  echo
  echo "## Shared site: hand-over, lease traffic, R3 publish (3-node cluster on loopback)"
  echo "load average before: $(loadavg)"
  go test -run '^$' -bench 'BenchmarkHandover|BenchmarkLeaseTraffic' -benchtime 1x -timeout 10m ./internal/fleet/ 2>&1 | grep '^Benchmark'
  go test -run '^$' -bench 'BenchmarkR3Publish' -count "$runs" -timeout 10m ./internal/fleet/ 2>&1 | grep '^Benchmark'
  go test -tags matprofile -run '^$' -bench 'BenchmarkSharedHandover' -benchtime 1x -timeout 10m ./internal/pipeline/ 2>&1 | grep '^Benchmark'
  echo "load average after: $(loadavg)"
  echo "(Handover: kill = a member stops renewing, TTL 2 s, 20 kills, p50/p99/max ms from the kill to the next holder's Start."
  echo " LeaseTraffic: one member holding 2 of 6 sources among 3 members, its connection's msgs and bytes per second."
  echo " R3Publish: 300-byte events with Nats-Msg-Id, 1024 acknowledgements in flight."
  echo " SharedHandover: two daemons (pipeline + member) share a 10 fps camera, TTL 2 s, 20 kills at random points of the"
  echo " renewal cycle; kill to the first frame counted under the new holder's lease.)"
} | tee -a "$report"
if [ "${TALLYD_BENCH_LIVE:-1}" != "0" ]; then
  {
    echo
    echo "## H.264 cameras (10 fps, RTSP over loopback) held by the motion detector"
    go test -tags matprofile -run '^$' -bench LiveH264 -benchtime 1x -timeout 40m ./internal/pipeline/ 2>&1 \
      | sed -n 's/^ *h264_bench_test.go:[0-9]*: //p; /^BenchmarkLiveH264/p'
  } | tee -a "$report"
fi
if [ "${TALLYD_BENCH_LIVE:-1}" != "0" ]; then
  {
    echo
    echo "## H.264 cameras (10 fps, RTSP over loopback) held by YOLOX-Nano with the default session pool"
    TALLYD_H264_DETECTOR=onnx TALLYD_H264_SIZES=640x360,768x576 TALLYD_H264_MAX=16 \
      go test -tags matprofile -run '^$' -bench LiveH264 -benchtime 1x -timeout 40m ./internal/pipeline/ 2>&1 \
      | sed -n 's/^ *h264_bench_test.go:[0-9]*: //p; /^BenchmarkLiveH264/p'
  } | tee -a "$report"
fi
