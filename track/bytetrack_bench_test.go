package track

import (
	"fmt"
	"testing"
	"time"
)

// BenchmarkByteTrackUpdate measures one Update with 10, 20, 50 and 200
// objects in view (the scene of BenchmarkIoUUpdate at 10 frames/s). The
// target is 50,000 updates/s with 20 objects on one core (go test
// -cpu 1); the tracker uses one goroutine.
func BenchmarkByteTrackUpdate(b *testing.B) {
	for _, n := range []int{10, 20, 50, 200} {
		frames := benchFrames(n, 100)
		b.Run(fmt.Sprintf("objects=%d", n), func(b *testing.B) {
			tr := NewByteTrack(DefaultByteTrackConfig())
			at := time.Duration(0)
			for _, dets := range frames { // reach the steady state first
				tr.Update(at, dets)
				at += frameStep
			}
			b.ReportAllocs()
			updates := 0
			for b.Loop() {
				tr.Update(at, frames[updates%len(frames)])
				at += frameStep
				updates++
			}
			b.ReportMetric(float64(updates)/b.Elapsed().Seconds(), "updates/s")
		})
	}
}

// TestByteTrackBenchSceneIsTrackable guards the benchmark against measuring
// a tracker that keeps losing its tracks.
func TestByteTrackBenchSceneIsTrackable(t *testing.T) {
	frames := benchFrames(200, 100)
	tr := NewByteTrack(DefaultByteTrackConfig())
	var res Result
	at := time.Duration(0)
	for range 3 {
		for _, dets := range frames {
			res = tr.Update(at, dets)
			at += frameStep
		}
	}
	last := int64(0)
	for _, a := range res.Active {
		last = max(last, a.ID)
	}
	if len(res.Active) < 180 || last > 200 {
		t.Errorf("after 300 frames: %d active tracks, highest ID %d; want ≥180 active and IDs ≤200", len(res.Active), last)
	}
}
