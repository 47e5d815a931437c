package pipeline

import (
	"bufio"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/capture/testsrv"
)

// BenchmarkLiveSources measures, with the shared YOLOX-Nano model on ONNX
// Runtime, how many 10 fps cameras served over loopback (Motion-JPEG over
// HTTP, the generated walkway) tallyd keeps at their target rate; at twice
// that many, the frame age and the drops; memory and goroutines over a long
// run with 8 cameras; and the CPU motion gating saves on a quiet scene.
// It takes minutes: run it with `make bench` or
// `go test -run '^$' -bench LiveSources -benchtime 1x ./internal/pipeline`.
// TALLYD_SOAK sets the long run's length (default 10m).
func BenchmarkLiveSources(b *testing.B) {
	onnx := onnxBlock(b)
	frames := encodedScene(b)
	b.ResetTimer()
	for range b.N {
		const step = 20 * time.Second
		b.Logf("%-8s %-10s %-12s %-10s %-10s %-10s", "cameras", "fps each", "min fps", "age p50", "age p99", "dropped")
		held := 0
		for n := 1; n <= 16; n++ {
			r := runCameras(b, onnx, frames, n, step)
			b.Logf("%-8d %-10.2f %-12.2f %-10.0f %-10.0f %-10d", n, r.meanFPS, r.minFPS, r.p50, r.p99, r.dropped)
			if r.minFPS < 9.5 {
				break
			}
			held = n
		}
		b.ReportMetric(float64(held), "cameras_held")
		if held > 0 {
			r := runCameras(b, onnx, frames, 2*held, step)
			b.Logf("at %d cameras (2x): %.2f fps each (min %.2f), frame age p50 %.0f ms p99 %.0f ms, dropped %d (mailbox %d, old %d) of %d read",
				2*held, r.meanFPS, r.minFPS, r.p50, r.p99, r.dropped, r.mailbox, r.old, r.read)
			b.ReportMetric(r.p99, "p99_age_ms_at_2x")
		}
		soak := 10 * time.Minute
		if v := os.Getenv("TALLYD_SOAK"); v != "" {
			if d, err := time.ParseDuration(v); err == nil {
				soak = d
			}
		}
		r := runCameras(b, onnx, frames, 8, soak)
		b.Logf("soak, 8 cameras for %v: RSS MiB %s; goroutines %s", soak, r.rss, r.goroutines)
		gated, ungated := gatingCPU(b, onnx)
		b.Logf("quiet scene (300 s, one walker each way), CPU seconds: ungated %.1f, gated %.1f (%.1fx less)", ungated, gated, ungated/gated)
		b.ReportMetric(ungated/gated, "gating_cpu_saving_x")
	}
}

// onnxBlock is the detector block for the shared model, or skips.
func onnxBlock(b *testing.B) string {
	model, _ := filepath.Abs("../../../shared/models/yolox_nano_coco_416.onnx")
	names, _ := filepath.Abs("../../../shared/models/coco80.names")
	if _, err := os.Stat(model); err != nil {
		b.Skipf("shared model absent (%v)", err)
	}
	lib := os.Getenv("TALLYD_ORT_LIB")
	if lib == "" {
		lib, _ = filepath.Abs("../../.cache/onnxruntime/1.24.1/libonnxruntime.so.1")
	}
	if _, err := os.Stat(lib); err != nil {
		b.Skipf("ONNX Runtime library absent (%v); run make setup", err)
	}
	return fmt.Sprintf(`detector:
  kind: onnx
  onnx: {model: %s, names: %s, library: %s, engine: ort, threads: {intra: 2, inter: 1}, classes: [person], score_threshold: 0.3}
`, model, names, lib)
}

// encodedScene is one minute of the walkway, JPEG-encoded once so that the
// test servers spend no CPU on encoding.
func encodedScene(b *testing.B) [][]byte {
	cfg := scene.Config{Seed: 7, Duration: 60 * time.Second, Crossings: 8, Visitors: 2}.WithDefaults()
	sc, err := scene.New(cfg)
	if err != nil {
		b.Fatal(err)
	}
	w, h := sc.Size()
	buf := make([]byte, w*h*3)
	out := make([][]byte, sc.Frames())
	for i := range out {
		sc.Render(i, buf)
		out[i] = testsrv.EncodeBGR(buf, w, h, 80)
	}
	return out
}

type camResult struct {
	meanFPS, minFPS, p50, p99 float64
	dropped, mailbox, old     int64
	read                      int64
	rss, goroutines           string
}

// runCameras serves n cameras at 10 fps and runs the daemon on them for d.
func runCameras(b *testing.B, onnx string, frames [][]byte, n int, d time.Duration) camResult {
	var sb strings.Builder
	sb.WriteString("site: bench\nsources:\n")
	var servers []*testsrv.MJPEGServer
	for i := range n {
		off := i * len(frames) / max(n, 1)
		srv := testsrv.StartMJPEG(b, testsrv.MJPEGOptions{FPS: 10, Frames: func(k int) []byte { return frames[(k+off)%len(frames)] }})
		servers = append(servers, srv)
		fmt.Fprintf(&sb, "  - {id: cam%d, url: %q, fps: 10, max_age: 1s}\n", i, srv.URL())
	}
	sb.WriteString(onnx)
	sb.WriteString("rules:\n")
	for i := range n {
		fmt.Fprintf(&sb, "  - {name: gate%d, source: cam%d, line: [[0.15, 0.55], [0.85, 0.55]]}\n", i, i)
	}
	sb.WriteString("output:\n  nats:\n    embedded: {port: 0}\nlog: {level: error}\n")
	cfg := siteFile(b, sb.String())
	p, err := Build(cfg, Options{Pace: capture.PaceRealtime})
	if err != nil {
		b.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- p.Run(ctx) }()
	time.Sleep(3 * time.Second) // connect and warm up
	before := p.Status()
	start := time.Now()
	var rss, gor []string
	every := max(d/10, time.Second)
	for time.Since(start) < d {
		time.Sleep(min(every, d-time.Since(start)))
		rss = append(rss, fmt.Sprintf("%.0f", rssMiB()))
		gor = append(gor, strconv.Itoa(runtime.NumGoroutine()))
	}
	after := p.Status()
	elapsed := time.Since(start).Seconds()
	cancel()
	if err := <-done; err != nil {
		b.Fatal(err)
	}
	_ = p.Close()
	for _, s := range servers {
		s.Close()
	}
	r := camResult{minFPS: 1e9, rss: strings.Join(rss, " "), goroutines: strings.Join(gor, " ")}
	var p50, p99 float64
	for i, a := range after {
		fps := float64(a.Processed-before[i].Processed) / elapsed
		r.meanFPS += fps / float64(len(after))
		r.minFPS = min(r.minFPS, fps)
		p50, p99 = max(p50, a.AgeP50ms), max(p99, a.AgeP99ms)
		r.mailbox += a.Dropped.Mailbox - before[i].Dropped.Mailbox
		r.old += a.Dropped.TooOld - before[i].Dropped.TooOld
		r.dropped += (a.Dropped.Mailbox + a.Dropped.TooOld + a.Dropped.ForRate) - (before[i].Dropped.Mailbox + before[i].Dropped.TooOld + before[i].Dropped.ForRate)
		r.read += a.Read - before[i].Read
	}
	r.p50, r.p99 = p50, p99
	return r
}

// gatingCPU replays a quiet generated scene with and without the motion
// gate and returns the process CPU seconds each took.
func gatingCPU(b *testing.B, onnx string) (gated, ungated float64) {
	run := func(gate string) float64 {
		cfg := siteFile(b, "site: bench\nsources:\n  - id: walkway\n"+gate+
			"    scene: {seed: 3, duration: 300s, crossings: 1, visitors: 0}\n"+onnx+
			"rules:\n  - {name: gate, source: walkway, line: [[0.15, 0.55], [0.85, 0.55]]}\n"+
			"output:\n  nats:\n    embedded: {port: 0}\nlog: {level: error}\n")
		p, err := Build(cfg, Options{Pace: capture.PaceMax})
		if err != nil {
			b.Fatal(err)
		}
		c0 := cpuSeconds()
		if err := p.Run(context.Background()); err != nil {
			b.Fatal(err)
		}
		c := cpuSeconds() - c0
		b.Logf("quiet scene, gate %q: %d frames, %d detector calls, counts %+v, %.1f CPU s", strings.TrimSpace(gate),
			p.Summary().FramesRead, p.DetectCalls(), p.Summary().Rules["gate"], c)
		_ = p.Close()
		return c
	}
	return run("    gate: {where: anywhere}\n"), run("")
}

func cpuSeconds() float64 {
	var ru syscall.Rusage
	_ = syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
	tv := func(t syscall.Timeval) float64 { return float64(t.Sec) + float64(t.Usec)/1e6 }
	return tv(ru.Utime) + tv(ru.Stime)
}

// rssMiB is the current resident set size from /proc/self/status.
func rssMiB() float64 {
	f, err := os.Open("/proc/self/status")
	if err != nil {
		return 0
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		if rest, ok := strings.CutPrefix(sc.Text(), "VmRSS:"); ok {
			kb, _ := strconv.ParseFloat(strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(rest), "kB")), 64)
			return kb / 1024
		}
	}
	return 0
}
