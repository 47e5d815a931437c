package capture

import (
	"fmt"
	"image"
	"os"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"gocv.io/x/gocv"

	"tallyd/capture/scene"
	"tallyd/capture/testsrv/h264enc"
)

// BenchmarkH264Decode measures what decoding H.264 costs through capture
// (OpenCV's FFmpeg backend: demux, decode, conversion to 8-bit BGR) at three
// camera sizes, for two contents: the generated walkway and the shared
// recorded footage (vtest.avi, 768x576, scaled to each size), each coded by
// libx264 (CRF 23, a key frame a second at 10 fps, no B-frames) and read
// from a raw Annex-B file, so that no server shares the process's CPU time.
// It reports process CPU milliseconds per frame (getrusage), wall
// milliseconds per frame and the stream's bit rate at 10 fps. Run it alone:
// `go test -tags matprofile -run '^$' -bench H264Decode -benchtime 3x ./capture`.
func BenchmarkH264Decode(b *testing.B) {
	const frames, fps = 100, 10
	for _, content := range []string{"walkway", "footage"} {
		for _, size := range [][2]int{{640, 360}, {768, 576}, {1920, 1080}} {
			b.Run(fmt.Sprintf("%s/%dx%d", content, size[0], size[1]), func(b *testing.B) {
				render := contentRenderer(b, content, size[0], size[1])
				aus, err := h264enc.Encode(h264enc.Config{Width: size[0], Height: size[1], FPS: fps, GOP: fps}, frames, render)
				if err != nil {
					b.Fatal(err)
				}
				var stream []byte
				for _, au := range aus {
					stream = append(stream, au...)
				}
				path := filepath.Join(b.TempDir(), content+".h264")
				if err := os.WriteFile(path, stream, 0o644); err != nil {
					b.Fatal(err)
				}
				m := gocv.NewMat()
				defer m.Close()
				b.ResetTimer()
				var cpu, wall time.Duration
				read := 0
				for range b.N {
					c0, w0 := processCPU(), time.Now()
					r, _, err := Open(SourceSpec{ID: "bench", File: path}, nil)
					if err != nil {
						b.Fatal(err)
					}
					n := 0
					for {
						if _, err := r.Read(&m); err != nil {
							break
						}
						n++
					}
					_ = r.Close()
					cpu += processCPU() - c0
					wall += time.Since(w0)
					if n != frames {
						b.Fatalf("read %d frames of %d", n, frames)
					}
					read += n
				}
				b.ReportMetric(float64(cpu.Microseconds())/1000/float64(read), "cpu-ms/frame")
				b.ReportMetric(float64(wall.Microseconds())/1000/float64(read), "wall-ms/frame")
				b.ReportMetric(float64(len(stream)*8)/1000/(frames/fps), "kbit/s")
			})
		}
	}
}

// contentRenderer draws frame i of the content at w x h into a BGR buffer:
// the generated walkway, or the shared footage read in order and scaled
// (skips when the footage is absent).
func contentRenderer(b *testing.B, content string, w, h int) func(int, []byte) {
	if content == "walkway" {
		sc, err := scene.New(scene.Config{Seed: 7, Width: w, Height: h, Duration: 30 * time.Second,
			Crossings: 4, Visitors: 1}.WithDefaults())
		if err != nil {
			b.Fatal(err)
		}
		return func(i int, bgr []byte) { sc.Render(i, bgr) }
	}
	path, _ := filepath.Abs("../../shared/footage/vtest.avi")
	if _, err := os.Stat(path); err != nil {
		b.Skipf("shared footage absent (%v)", err)
	}
	r, _, err := Open(SourceSpec{ID: "footage", File: path}, nil)
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { _ = r.Close() })
	src, dst := gocv.NewMat(), gocv.NewMat()
	b.Cleanup(func() { _ = src.Close(); _ = dst.Close() })
	return func(_ int, bgr []byte) {
		if _, err := r.Read(&src); err != nil {
			b.Fatalf("footage: %v", err)
		}
		gocv.Resize(src, &dst, image.Pt(w, h), 0, 0, gocv.InterpolationLinear)
		px, err := dst.DataPtrUint8()
		if err != nil {
			b.Fatal(err)
		}
		copy(bgr, px)
	}
}

// processCPU is the process's user plus system CPU time so far.
func processCPU() time.Duration {
	var ru syscall.Rusage
	_ = syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
