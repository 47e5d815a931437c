package track

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"tallyd/detect"
)

// benchFrames makes a periodic scene of n objects on a grid of a 1920x1080
// frame, each circling its cell (radius 12 px, 100 frames a turn) with a
// little box jitter, and about 5% of detections missing. The last frame
// leads back into the first, so the sequence can be replayed forever.
func benchFrames(n, frames int) [][]detect.Detection {
	rng := rand.New(rand.NewPCG(7, uint64(n)))
	cols := int(math.Ceil(math.Sqrt(float64(n) * 16 / 9)))
	rows := (n + cols - 1) / cols
	cw, ch := 1920/float64(cols), 1080/float64(rows)
	w, h := cw*0.4, ch*0.6
	out := make([][]detect.Detection, frames)
	for f := range out {
		for k := range n {
			if rng.Float64() < 0.05 {
				continue
			}
			phase := 2*math.Pi*float64(f)/float64(frames) + float64(k)
			cx := (float64(k%cols)+0.5)*cw + 12*math.Cos(phase)
			cy := (float64(k/cols)+0.5)*ch + 12*math.Sin(phase)
			jw, jh := w*(1+0.05*rng.NormFloat64()), h*(1+0.05*rng.NormFloat64())
			out[f] = append(out[f], detect.Detection{
				Box:   detect.BoxXYWH(cx-jw/2, cy-jh/2, jw, jh),
				Score: 0.5 + rng.Float64()/2,
				Class: "person",
			})
		}
	}
	return out
}

// BenchmarkIoUUpdate measures one Update with 10, 50 and 200 objects in view.
func BenchmarkIoUUpdate(b *testing.B) {
	for _, n := range []int{10, 50, 200} {
		frames := benchFrames(n, 100)
		b.Run(fmt.Sprintf("objects=%d", n), func(b *testing.B) {
			tr := NewIoU(DefaultIoUConfig())
			for _, dets := range frames { // reach the steady state first
				tr.Update(0, dets)
			}
			b.ReportAllocs()
			updates := 0
			for b.Loop() {
				tr.Update(0, frames[updates%len(frames)])
				updates++
			}
			b.ReportMetric(float64(updates)/b.Elapsed().Seconds(), "updates/s")
		})
	}
}

// TestBenchSceneIsTrackable guards the benchmark against measuring a tracker
// that keeps losing its tracks.
func TestBenchSceneIsTrackable(t *testing.T) {
	frames := benchFrames(200, 100)
	tr := NewIoU(DefaultIoUConfig())
	var res Result
	for range 3 {
		for _, dets := range frames {
			res = tr.Update(0, dets)
		}
	}
	last := int64(0)
	for _, a := range res.Active {
		last = max(last, a.ID)
	}
	if len(res.Active) < 180 || last > 210 {
		t.Errorf("after 300 frames: %d active tracks, highest ID %d; want ≥180 active and IDs ≤210", len(res.Active), last)
	}
}
