package pipeline

import (
	"context"
	"os"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"tallyd/capture"
	"tallyd/detect/onnx"
	"tallyd/internal/config"
)

// BenchmarkReplay replays configs/footage-people.yaml end to end at pace max
// (decode -> prepare on the capture goroutine -> detect -> track -> rules ->
// publish to an embedded NATS server) and reports frames/s, per-frame
// latency percentiles and wall and CPU time per frame by stage. One
// iteration is the whole 795-frame video: run it with -benchtime 1x.
func BenchmarkReplay(b *testing.B) {
	for _, engine := range []onnx.Engine{onnx.EngineORT, onnx.EngineOpenCV} {
		b.Run(string(engine), func(b *testing.B) { benchReplay(b, engine) })
	}
}

func benchReplay(b *testing.B, engine onnx.Engine) {
	if _, err := os.Stat("../../../shared/footage/vtest.avi"); err != nil {
		b.Skipf("shared data absent: %v", err)
	}
	cfg, err := config.Load("../../configs/footage-people.yaml")
	if err != nil {
		b.Fatal(err)
	}
	oc := onnxConfig(cfg)
	oc.Engine = engine
	if engine == onnx.EngineORT {
		oc.Library = os.Getenv(onnx.ORTLibEnv)
		if oc.Library == "" {
			oc.Library = filepath.Join("../..", ".cache", "onnxruntime", onnx.ORTVersion, "libonnxruntime.so.1")
		}
		if _, err := os.Stat(oc.Library); err != nil {
			b.Skipf("ONNX Runtime library absent: %v", err)
		}
	}
	for i := 0; i < b.N; i++ {
		det, err := onnx.New(oc)
		if err != nil {
			b.Fatal(err)
		}
		p, err := Build(cfg, Options{Pace: capture.PaceMax, Detector: det})
		if err != nil {
			b.Fatal(err)
		}
		cpu0 := processCPU()
		start := time.Now()
		if err := p.Run(context.Background()); err != nil {
			b.Fatal(err)
		}
		el, cpu := time.Since(start), processCPU()-cpu0
		sum := p.Summary()
		st := det.Stats() // before Close: the pipeline closes the detector
		_ = p.Close()
		frames := float64(sum.FramesProcessed)
		ms := func(d time.Duration) float64 { return float64(d) / float64(time.Millisecond) }
		b.ReportMetric(frames/el.Seconds(), "frames/s")
		b.ReportMetric(ms(st.Latency.P50), "p50-ms")
		b.ReportMetric(ms(st.Latency.P99), "p99-ms")
		pf := func(s onnx.Stage) onnx.Stage { return st.PerFrame(s) }
		b.ReportMetric(ms(pf(st.Prepare).Wall), "prep-ms")
		b.ReportMetric(ms(pf(st.Prepare).CPU), "prep-cpu-ms")
		b.ReportMetric(ms(pf(st.Infer).Wall), "infer-ms")
		b.ReportMetric(ms(pf(st.Infer).CPU), "infer-cpu-ms")
		b.ReportMetric(ms(pf(st.Post).Wall), "post-ms")
		b.ReportMetric(ms(pf(st.Post).CPU), "post-cpu-ms")
		b.ReportMetric(ms(cpu)/frames, "total-cpu-ms")
		b.Logf("%s: %d frames in %.1f s; events %d; rules %v", engine, sum.FramesProcessed, el.Seconds(), sum.Events.Produced, sum.Rules)
	}
}

func processCPU() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
