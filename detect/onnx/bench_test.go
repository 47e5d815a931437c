package onnx

import (
	"context"
	"testing"
	"time"

	"gocv.io/x/gocv"

	"tallyd/capture"
)

// Benchmarks on the shared model (416x416) and vtest.avi frame 100; `make
// bench` runs them (scripts/bench_onnx.sh, scripts/bench.sh). Each reports
// frames/s and, for the engines, process CPU milliseconds per frame.
//
// BenchmarkInferORT, BenchmarkDetectORT and BenchmarkPostprocess keep the
// setting shipped before the session pool (legacySetting: one session, two
// intra-op threads, ONNX Runtime's spinning and every optimiser on), so
// that their figures stay comparable with earlier reports and serve as the
// "two-thread ORT loop" the pool is measured against.

// legacySetting is the ONNX Runtime setting shipped before the session pool.
func legacySetting(c *Config) {
	c.IntraThreads, c.InterThreads, c.Sessions, c.Spin, c.DisableOptimizers = 2, 1, 1, true, nil
}

func benchDetector(b *testing.B, engine Engine) (*Detector, gocv.Mat) {
	return benchDetectorWith(b, engine, legacySetting)
}

func benchDetectorWith(b *testing.B, engine Engine, set func(*Config)) (*Detector, gocv.Mat) {
	b.Helper()
	cfg := testConfig(b, sharedFile(b, "models/yolox_nano_coco_416.onnx"), engine)
	cfg.Names = sharedFile(b, "models/coco80.names")
	set(&cfg)
	d := mustNew(b, cfg)
	frames := readFrames(b, 100)
	b.Cleanup(func() { _ = frames[0].Close() })
	return d, frames[0]
}

func reportRate(b *testing.B, start time.Time, cpu0 time.Duration) {
	el := time.Since(start)
	b.ReportMetric(float64(b.N)/el.Seconds(), "frames/s")
	b.ReportMetric(float64(processCPU()-cpu0)/float64(time.Millisecond)/float64(b.N), "cpu-ms/frame")
}

// benchInfer runs the engine alone on one prepared input.
func benchInfer(b *testing.B, engine Engine) { benchInferWith(b, engine, legacySetting) }

func benchInferWith(b *testing.B, engine Engine, set func(*Config)) {
	d, m := benchDetectorWith(b, engine, set)
	buf := make([]float32, d.pre.size())
	if _, err := d.pre.fill(m, buf); err != nil {
		b.Fatal(err)
	}
	if _, err := d.eng.run(buf, 1); err != nil { // warm-up
		b.Fatal(err)
	}
	b.ResetTimer()
	start, cpu0 := time.Now(), processCPU()
	for i := 0; i < b.N; i++ {
		if _, err := d.eng.run(buf, 1); err != nil {
			b.Fatal(err)
		}
	}
	reportRate(b, start, cpu0)
}

// BenchmarkInferORT is ONNX Runtime inference alone on a prepared tensor,
// with the setting shipped before the session pool (two intra-op threads).
func BenchmarkInferORT(b *testing.B) { benchInfer(b, EngineORT) }

// BenchmarkInferOpenCV is OpenCV DNN inference alone on the same tensor.
func BenchmarkInferOpenCV(b *testing.B) { benchInfer(b, EngineOpenCV) }

// BenchmarkPrepare is letterbox + conversion of a 768x576 frame to 416x416.
func BenchmarkPrepare(b *testing.B) {
	cfg := Defaults()
	p := newPreproc(cfg, 416, 416)
	m := gocv.NewMatWithSize(576, 768, gocv.MatTypeCV8UC3)
	defer m.Close()
	gocv.RandU(&m, gocv.NewScalar(0, 0, 0, 0), gocv.NewScalar(255, 255, 255, 0))
	buf := make([]float32, p.size())
	b.ResetTimer()
	start, cpu0 := time.Now(), processCPU()
	for i := 0; i < b.N; i++ {
		if _, err := p.fill(m, buf); err != nil {
			b.Fatal(err)
		}
	}
	reportRate(b, start, cpu0)
}

// BenchmarkPostprocess is decoding, mapping and NMS of the real output of
// vtest.avi frame 100 (every class kept, threshold 0.25).
func BenchmarkPostprocess(b *testing.B) {
	d, m := benchDetector(b, EngineORT)
	buf := make([]float32, d.pre.size())
	g, err := d.pre.fill(m, buf)
	if err != nil {
		b.Fatal(err)
	}
	outs, err := d.eng.run(buf, 1)
	if err != nil {
		b.Fatal(err)
	}
	b.ResetTimer()
	var cands []candidate
	for i := 0; i < b.N; i++ {
		cands, _ = d.dec.decode(outs, 0, cands[:0])
		_ = d.post.finish(cands, g, false)
	}
}

// BenchmarkDetectORT is one frame through Detect with nothing prepared ahead:
// letterbox, inference and post-processing in sequence.
func BenchmarkDetectORT(b *testing.B) {
	d, m := benchDetector(b, EngineORT)
	f := &capture.Frame{Source: "bench", Mat: m}
	ctx := context.Background()
	batch := []*capture.Frame{f}
	if _, err := d.Detect(ctx, batch); err != nil {
		b.Fatal(err)
	}
	b.ResetTimer()
	start, cpu0 := time.Now(), processCPU()
	for i := 0; i < b.N; i++ {
		if _, err := d.Detect(ctx, batch); err != nil {
			b.Fatal(err)
		}
	}
	reportRate(b, start, cpu0)
}
