package pipeline

import (
	"context"
	"fmt"
	"os"
	"strings"
	"syscall"
	"testing"
	"time"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/capture/testsrv"
	"tallyd/capture/testsrv/h264enc"
)

// BenchmarkLiveH264 measures how many 10 fps H.264 cameras (RTSP over
// loopback, media interleaved in the RTSP connection) tallyd holds with the
// motion detector and two detect workers, at three camera sizes: a camera is held when it keeps
// its target rate (at least 9.5 frames/s processed) with frame age p99
// under 1 s. The count is searched by doubling from 2 up to TALLYD_H264_MAX
// (default 24), then bisecting; each step opens the cameras (pipeline.Build
// opens them one after the other; the time is reported) and runs them for
// TALLYD_H264_STEP (default 10s) after a 3 s warm-up.
// Each camera serves a 10 s loop of the generated walkway (libx264, CRF 23,
// a key frame a second), started a whole number of seconds apart.
// TALLYD_H264_SIZES picks sizes (default "640x360,768x576,1920x1080").
// Minutes long: `go test -tags matprofile -run '^$' -bench LiveH264
// -benchtime 1x -timeout 30m ./internal/pipeline`.
func BenchmarkLiveH264(b *testing.B) {
	step := 10 * time.Second
	if v := os.Getenv("TALLYD_H264_STEP"); v != "" {
		d, err := time.ParseDuration(v)
		if err != nil {
			b.Fatalf("TALLYD_H264_STEP: %v", err)
		}
		step = d
	}
	most := 24
	if v := os.Getenv("TALLYD_H264_MAX"); v != "" {
		if _, err := fmt.Sscanf(v, "%d", &most); err != nil || most < 2 {
			b.Fatalf("TALLYD_H264_MAX: %q: want a number from 2", v)
		}
	}
	sizes := "640x360,768x576,1920x1080"
	if v := os.Getenv("TALLYD_H264_SIZES"); v != "" {
		sizes = v
	}
	// TALLYD_H264_DETECTOR=onnx runs YOLOX-Nano with the default session
	// pool (one single-thread session and detect worker per core) instead
	// of the motion detector with two workers.
	det, workers := "detector:\n  motion: {min_area: 200}\n", 2
	if os.Getenv("TALLYD_H264_DETECTOR") == "onnx" {
		det = strings.Replace(onnxBlock(b), "threads: {intra: 2, inter: 1}", "threads: {intra: 1, inter: 1}", 1)
		workers = 0
	}
	for _, size := range strings.Split(sizes, ",") {
		var w, h int
		if _, err := fmt.Sscanf(size, "%dx%d", &w, &h); err != nil {
			b.Fatalf("TALLYD_H264_SIZES: %q: want WIDTHxHEIGHT", size)
		}
		b.Run(size, func(b *testing.B) {
			const fps = 10
			sc, err := scene.New(scene.Config{Seed: 7, Width: w, Height: h, Duration: 60 * time.Second,
				Crossings: 8, Visitors: 2}.WithDefaults())
			if err != nil {
				b.Fatal(err)
			}
			aus, err := h264enc.Encode(h264enc.Config{Width: w, Height: h, FPS: fps, GOP: fps}, 10*fps,
				func(i int, bgr []byte) { sc.Render(i, bgr) })
			if err != nil {
				b.Fatal(err)
			}
			b.ResetTimer()
			for range b.N {
				b.Logf("%-8s %-9s %-9s %-9s %-9s %-9s %-13s %s", "cameras", "fps each", "min fps", "age p50", "age p99", "dropped", "CPU ms/frame", "open (s)")
				results := map[int]h264Run{}
				try := func(n int) bool {
					r := runH264Cameras(b, aus, fps, n, step, det, workers)
					results[n] = r
					b.Logf("%-8d %-9.2f %-9.2f %-9.0f %-9.0f %-9d %-13.2f %.1f", n, r.meanFPS, r.minFPS, r.p50, r.p99, r.dropped, r.cpuMsPerFrame, r.build.Seconds())
					return r.held()
				}
				held, failed := 0, 0
				for n := 2; ; n = min(2*n, most) {
					if !try(n) {
						failed = n
						break
					}
					held = n
					if n == most {
						break
					}
				}
				for failed > 0 && failed-held > 1 {
					if mid := (held + failed) / 2; try(mid) {
						held = mid
					} else {
						failed = mid
					}
				}
				b.Logf("%s: %d cameras held at 10 fps with p99 frame age < 1 s (%d tried at most)", size, held, most)
				b.ReportMetric(float64(held), "cameras_held")
				if r, ok := results[held]; ok {
					b.ReportMetric(r.p99, "p99_age_ms")
					b.ReportMetric(r.cpuMsPerFrame, "cpu-ms/frame")
				}
			}
		})
	}
}

// h264Run is one step of BenchmarkLiveH264.
type h264Run struct {
	meanFPS, minFPS, p50, p99 float64
	dropped                   int64
	cpuMsPerFrame             float64       // process CPU per processed frame
	build                     time.Duration // Build: opening every camera
}

func (r h264Run) held() bool { return r.minFPS >= 9.5 && r.p99 < 1000 }

// runH264Cameras serves n H.264 cameras at fps and runs the daemon with the
// detector block det on them for d; camera i starts i seconds into the loop.
func runH264Cameras(b *testing.B, aus [][]byte, fps, n int, d time.Duration, det string, workers int) h264Run {
	var sb strings.Builder
	sb.WriteString("site: bench\nsources:\n")
	var servers []*testsrv.RTSPServer
	for i := range n {
		off := (i * fps) % len(aus) // a key frame
		loop := append(append([][]byte{}, aus[off:]...), aus[:off]...)
		srv := testsrv.StartRTSPH264(b, testsrv.H264Options{AccessUnits: loop, FPS: float64(fps), Loop: true})
		servers = append(servers, srv)
		fmt.Fprintf(&sb, "  - {id: cam%d, url: %q, fps: %d, max_age: 1s}\n", i, srv.URL(), fps)
	}
	sb.WriteString(det + "rules:\n")
	for i := range n {
		fmt.Fprintf(&sb, "  - {name: gate%d, source: cam%d, line: [[0.15, 0.55], [0.85, 0.55]]}\n", i, i)
	}
	sb.WriteString("output:\n  nats:\n    embedded: {port: 0}\nlog: {level: error}\n")
	cfg := siteFile(b, sb.String())
	t0 := time.Now()
	p, err := Build(cfg, Options{Pace: capture.PaceRealtime, Workers: workers})
	if err != nil {
		b.Fatal(err)
	}
	build := time.Since(t0)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- p.Run(ctx) }()
	time.Sleep(3 * time.Second) // connect and warm up
	before := p.Status()
	cpu0, start := h264CPU(), time.Now()
	time.Sleep(d)
	after := p.Status()
	elapsed := time.Since(start).Seconds()
	cpu := h264CPU() - cpu0
	cancel()
	if err := <-done; err != nil {
		b.Fatal(err)
	}
	_ = p.Close()
	for _, s := range servers {
		s.Close()
	}
	r := h264Run{minFPS: 1e9, build: build}
	var processed int64
	for i, a := range after {
		k := a.Processed - before[i].Processed
		processed += k
		fps := float64(k) / elapsed
		r.meanFPS += fps / float64(len(after))
		r.minFPS = min(r.minFPS, fps)
		r.p50, r.p99 = max(r.p50, a.AgeP50ms), max(r.p99, a.AgeP99ms)
		r.dropped += (a.Dropped.Mailbox + a.Dropped.TooOld) - (before[i].Dropped.Mailbox + before[i].Dropped.TooOld)
	}
	if processed > 0 {
		r.cpuMsPerFrame = cpu.Seconds() * 1000 / float64(processed)
	}
	return r
}

// h264CPU is the process's user plus system CPU time so far.
func h264CPU() time.Duration {
	var ru syscall.Rusage
	_ = syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
