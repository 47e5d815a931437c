#!/usr/bin/env bash
# ONNX detector benchmarks (detect/onnx) as a table a person can read: the
# shared YOLOX-Nano model at 416x416 on ../shared/footage/vtest.avi, ONNX
# Runtime with 2 intra-op threads, side by side with OpenCV DNN, and the
# end-to-end replay. make bench appends this table to out/bench.txt; run it
# alone with `bash scripts/bench_onnx.sh`. Heavy: about two minutes on 2 cores.
set -euo pipefail
cd "$(dirname "$0")/.."

echo "## ONNX detector: YOLOX-Nano 416x416 on vtest.avi 768x576 (ONNX Runtime 1.24.1, 2 intra-op threads)"
echo
if [ ! -f ../shared/models/yolox_nano_coco_416.onnx ] || [ ! -f ../shared/footage/vtest.avi ]; then
  echo "skipped: ../shared/models or ../shared/footage absent"
  exit 0
fi
load=$(cut -d' ' -f1 /proc/loadavg 2>/dev/null || echo "?")
echo "load average before the run: $load (figures are only comparable on an idle machine)"
echo

mkdir -p out bin
go build -o bin/tallyd ./cmd/tallyd
raw=out/bench_onnx.raw.txt
: >"$raw"
# One package, run in sequence: never two heavy runs at once on 2 cores.
# ONNX Runtime alone and its end-to-end replay back to back, so that both
# see the same machine; then OpenCV; then the small stages.
# The end-to-end replay lives with the pipeline (internal/pipeline).
go test -c -o bin/onnx.test ./detect/onnx/
go test -c -o bin/pipeline.test ./internal/pipeline/
bench() { (cd detect/onnx && ../../bin/onnx.test -test.run '^$' -test.timeout 30m "$@") >>"$raw" 2>&1; }
replay() { (cd internal/pipeline && ../../bin/pipeline.test -test.run '^$' -test.timeout 30m "$@") >>"$raw" 2>&1; }
bench -test.bench 'InferORT$' -test.benchtime 300x
replay -test.bench 'Replay/ort' -test.benchtime 1x
bench -test.bench 'InferOpenCV$' -test.benchtime 100x
replay -test.bench 'Replay/opencv' -test.benchtime 1x
bench -test.bench 'DetectORT$' -test.benchtime 300x
bench -test.bench 'Prepare$|Postprocess$' -test.benchtime 2s
rm -f bin/onnx.test bin/pipeline.test

# metric NAME UNIT: the value of UNIT on the benchmark line starting with NAME.
metric() {
  awk -v n="$1" -v u="$2" '$1 ~ "^"n"(-[0-9]+)?$" { for (i = 3; i < NF; i += 2) if ($(i+1) == u) { print $i; exit } }' "$raw"
}
row() { # label frames/s ns/op cpu-ms
  awk -v l="$1" -v f="$2" -v ns="$3" -v c="$4" 'BEGIN {
    printf "%-46s %10s %10s %12s\n", l, (f == "" ? "-" : sprintf("%.1f", f)), (ns == "" ? "-" : sprintf("%.2f", ns / 1e6)), (c == "" ? "-" : sprintf("%.2f", c)) }'
}

printf '%-46s %10s %10s %12s\n' "run" "frames/s" "ms/frame" "CPU ms/frame"
row "ONNX Runtime inference alone (prepared tensor)" "$(metric BenchmarkInferORT frames/s)" "$(metric BenchmarkInferORT ns/op)" "$(metric BenchmarkInferORT cpu-ms/frame)"
row "OpenCV DNN inference alone (same tensor)" "$(metric BenchmarkInferOpenCV frames/s)" "$(metric BenchmarkInferOpenCV ns/op)" "$(metric BenchmarkInferOpenCV cpu-ms/frame)"
row "Detect, nothing prepared ahead (ORT)" "$(metric BenchmarkDetectORT frames/s)" "$(metric BenchmarkDetectORT ns/op)" "$(metric BenchmarkDetectORT cpu-ms/frame)"
row "prepare: letterbox 768x576 -> 416x416" "$(metric BenchmarkPrepare frames/s)" "$(metric BenchmarkPrepare ns/op)" "$(metric BenchmarkPrepare cpu-ms/frame)"
row "post: decode + NMS, 80 classes kept" "" "$(metric BenchmarkPostprocess ns/op)" ""
for e in ort opencv; do
  row "end-to-end replay, $e (pace max)" "$(metric BenchmarkReplay/$e frames/s)" "" "$(metric BenchmarkReplay/$e total-cpu-ms)"
done

# The daemon itself, as an operator runs it.
t0=$(date +%s.%N)
out=$(./bin/tallyd replay -c configs/footage-people.yaml --summary json 2>/dev/null) || { echo "tallyd replay failed"; exit 1; }
t1=$(date +%s.%N)
frames=$(echo "$out" | tail -n1 | sed -E 's/.*"frames_processed":([0-9]+).*/\1/')
cli=$(awk -v f="$frames" -v a="$t0" -v b="$t1" 'BEGIN { printf "%.3f", f / (b - a) }')
row "tallyd replay footage-people.yaml (CLI, ORT)" "$cli" "" ""
echo
alone=$(metric BenchmarkInferORT frames/s)
awk -v a="$alone" -v r="$(metric BenchmarkReplay/ort frames/s)" -v c="$cli" -v i="$(metric BenchmarkReplay/ort infer-ms)" 'BEGIN {
  if (a > 0) printf "end-to-end / inference alone: %.2f (bench replay), %.2f (CLI, includes start-up); target >= 0.90\n", r / a, c / a
  if (i > 0) printf "time inside inference during the replay: %.2f of the wall time (1 - this = pipeline overhead on the critical path)\n", r * i / 1000 }'
echo
echo "Per frame in the end-to-end replay (ms; latency = capture to detections, waiting included):"
printf '%-8s %8s %8s | %9s %9s | %9s %9s | %9s %9s | %9s\n' engine "p50" "p99" "prep" "prep CPU" "infer" "infer CPU" "post" "post CPU" "all CPU"
for e in ort opencv; do
  printf '%-8s %8.1f %8.1f | %9.2f %9.2f | %9.2f %9.2f | %9.2f %9.2f | %9.2f\n' "$e" \
    "$(metric BenchmarkReplay/$e p50-ms)" "$(metric BenchmarkReplay/$e p99-ms)" \
    "$(metric BenchmarkReplay/$e prep-ms)" "$(metric BenchmarkReplay/$e prep-cpu-ms)" \
    "$(metric BenchmarkReplay/$e infer-ms)" "$(metric BenchmarkReplay/$e infer-cpu-ms)" \
    "$(metric BenchmarkReplay/$e post-ms)" "$(metric BenchmarkReplay/$e post-cpu-ms)" \
    "$(metric BenchmarkReplay/$e total-cpu-ms)"
done
echo "prep runs on the capture goroutine, overlapping inference; prep and post CPU are their own thread's;"
echo "infer CPU is the whole process's during the call (the engine's threads and the overlapped capture work);"
echo "all CPU is the process total per frame. Raw go test output: $raw"
echo "load average after the run: $(cut -d' ' -f1 /proc/loadavg 2>/dev/null || echo "?")"
