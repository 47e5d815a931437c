package eval

import (
	"math"
	"math/rand/v2"
	"path/filepath"
	"testing"

	"tallyd/internal/motfmt"
)

// benchSequence generates a ground truth of about objects people per frame
// walking across a 1920×1080 view (each lives 150–400 frames, replaced when
// gone) and a tracker output for it with ±5 % box jitter, 10 % misses, 5 %
// false positives and an occasional identity change.
func benchSequence(frames, objects int) (gt, tracks []motfmt.Row) {
	rng := rand.New(rand.NewPCG(11, uint64(objects)))
	type person struct {
		id, track    int64
		x, y, vx, vy float64
		w, h         float64
		left         int
	}
	var nextID, nextTrack int64
	spawn := func() person {
		nextID++
		nextTrack++
		w := 30 + 40*rng.Float64()
		return person{id: nextID, track: nextTrack, x: 1800 * rng.Float64(), y: 900 * rng.Float64(),
			vx: 4 * (rng.Float64() - 0.5), vy: 2 * (rng.Float64() - 0.5), w: w, h: 2.4 * w, left: 150 + rng.IntN(250)}
	}
	people := make([]person, objects)
	for i := range people {
		people[i] = spawn()
	}
	jit := func(v float64) float64 { return v * (1 + 0.05*(2*rng.Float64()-1)) }
	for f := 1; f <= frames; f++ {
		for i := range people {
			p := &people[i]
			if p.left--; p.left < 0 {
				*p = spawn()
			}
			p.x, p.y = p.x+p.vx, p.y+p.vy
			gt = append(gt, motfmt.Row{Frame: f, ID: p.id, X: p.x, Y: p.y, W: p.w, H: p.h, Conf: 1, Class: 1, Visibility: 1})
			if rng.Float64() < 0.002 { // the tracker swaps to a new id
				nextTrack++
				p.track = nextTrack
			}
			if rng.Float64() < 0.10 {
				continue
			}
			tracks = append(tracks, motfmt.Row{Frame: f, ID: p.track, X: jit(p.x), Y: jit(p.y), W: jit(p.w), H: jit(p.h),
				Conf: 1, Class: -1, Visibility: -1})
		}
		for range objects / 20 {
			nextTrack++
			tracks = append(tracks, motfmt.Row{Frame: f, ID: nextTrack, X: 1800 * rng.Float64(), Y: 900 * rng.Float64(),
				W: 40, H: 100, Conf: 1, Class: -1, Visibility: -1})
		}
	}
	return gt, tracks
}

// BenchmarkEvaluate scores a generated 1,000-frame sequence with about 20
// people a frame (the `tallyd score` case of the benchmarks).
func BenchmarkEvaluate(b *testing.B) {
	gt, tracks := benchSequence(1000, 20)
	benchEvaluate(b, gt, tracks, Options{Frames: 1000})
}

// BenchmarkEvaluateMOT17_04 scores the largest reference sequence
// (MOT17-04-SDP: 1,050 frames, 47,557 GT boxes, 37,504 tracker boxes, about
// 100 ground-truth rows a frame before the class rules).
func BenchmarkEvaluateMOT17_04(b *testing.B) {
	dir := refPath(b, "MOT17-train-Lif_T", "MOT17-04")
	gt := readRows(b, filepath.Join(dir, "gt.txt.gz"))
	tracks := readRows(b, filepath.Join(dir, "Lif_T-MOT17-04-SDP.txt.gz"))
	benchEvaluate(b, gt, tracks, Options{Rules: RulesMOT17, Frames: 1050})
}

func benchEvaluate(b *testing.B, gt, tracks []motfmt.Row, opt Options) {
	b.ReportAllocs()
	var m Metrics
	for b.Loop() {
		var err error
		if m, err = Evaluate(gt, tracks, opt); err != nil {
			b.Fatal(err)
		}
	}
	if math.IsNaN(m.HOTA) {
		b.Fatal("NaN")
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "sequences/s")
	b.ReportMetric(float64(len(gt)+len(tracks))*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
}
