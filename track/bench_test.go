package track

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

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

// BenchmarkUpdate measures one Update of each tracker with 10, 20, 50 and
// 200 objects in view, at 10 frames/s. ByteTrack's target is 50,000
// updates/s with 20 objects on one core (go test -cpu 1); a tracker uses
// one goroutine.
func BenchmarkUpdate(b *testing.B) {
	for _, kind := range Kinds {
		for _, n := range []int{10, 20, 50, 200} {
			frames := benchFrames(n, 100)
			b.Run(fmt.Sprintf("%s/objects=%d", kind, n), func(b *testing.B) {
				tr := newTracker(b, kind)
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
}

// newTracker builds a tracker of kind with the default settings.
func newTracker(tb testing.TB, kind Kind) Tracker {
	s := DefaultSettings()
	s.Kind = kind
	tr, err := s.New()
	if err != nil {
		tb.Fatal(err)
	}
	return tr
}

// TestBenchSceneIsTrackable guards the benchmark against measuring a
// tracker that keeps losing its tracks: after 300 frames of 200 objects
// most are tracked and few IDs were used up.
func TestBenchSceneIsTrackable(t *testing.T) {
	frames := benchFrames(200, 100)
	for _, c := range []struct {
		kind   Kind
		lastID int64
	}{{KindBaseline, 210}, {KindByteTrack, 200}} {
		tr := newTracker(t, c.kind)
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
		if len(res.Active) < 180 || last > c.lastID {
			t.Errorf("%s after 300 frames: %d active tracks, highest ID %d; want ≥180 active and IDs ≤%d",
				c.kind, len(res.Active), last, c.lastID)
		}
	}
}

// BenchmarkAssign solves dense random square problems (one component: the
// worst case), banded ones like a tracker's gated cost matrix (each track
// overlapping its neighbours' detections), and a crowded evaluation frame
// (40 boxes, each overlapping its 3 neighbours).
func BenchmarkAssign(b *testing.B) {
	run := func(name string, n int, pairs []Pair) {
		rowTo := make([]int32, n)
		var as Assigner
		b.Run(name, func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				as.Assign(n, n, pairs, rowTo)
			}
		})
	}
	for _, n := range []int{20, 200} {
		rng := rand.New(rand.NewPCG(1, uint64(n)))
		var dense, banded []Pair
		for i := range n {
			for j := range n {
				dense = append(dense, Pair{Row: int32(i), Col: int32(j), Weight: rng.Float64()})
				if d := i - j; d >= -1 && d <= 1 {
					banded = append(banded, Pair{Row: int32(i), Col: int32(j), Weight: 0.3 + 0.7*rng.Float64()})
				}
			}
		}
		run(fmt.Sprintf("dense/%dx%d", n, n), n, dense)
		run(fmt.Sprintf("banded/%dx%d", n, n), n, banded)
	}
	rng := rand.New(rand.NewPCG(3, 4))
	var crowd []Pair
	for i := range 40 {
		for d := -1; d <= 1; d++ {
			if j := i + d; j >= 0 && j < 40 {
				crowd = append(crowd, Pair{Row: int32(i), Col: int32(j), Weight: rng.Float64()})
			}
		}
	}
	run("crowd/40x40", 40, crowd)
}
