package eval

import (
	"cmp"
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"runtime"
	"slices"
	"testing"
	"time"

	"tallyd/internal/motfmt"
	"tallyd/track"
)

func TestEvaluateFramesLimit(t *testing.T) {
	_, err := Evaluate(nil, nil, Options{Frames: MaxFrames + 1})
	want := "score options: frames: want a sequence length of at most 10000000 frames (found 10000001)"
	if err == nil || err.Error() != want {
		t.Fatalf("error\n got: %v\nwant: %s", err, want)
	}
	if _, err := Evaluate(nil, nil, Options{Frames: MaxFrames}); err != nil {
		t.Errorf("Frames = MaxFrames: %v", err)
	}
}

// Memory follows the rows, not the frame numbers: two boxes two billion
// frames apart (rows built in code; files stop at motfmt.MaxFrame) and ids
// at the ends of int64 are scored with a few kilobytes.
func TestEvaluateFarFramesAndIDs(t *testing.T) {
	row := func(f int, id int64) motfmt.Row {
		return motfmt.Row{Frame: f, ID: id, X: 10, Y: 10, W: 20, H: 40, Conf: 1, Class: -1, Visibility: -1}
	}
	const far = 2_000_000_000
	gt := []motfmt.Row{row(far, -1<<63), row(1, -1<<63)}
	tracks := []motfmt.Row{row(1, 1<<63-1), row(far, 1<<63-1)}
	var before, after runtime.MemStats
	runtime.ReadMemStats(&before)
	m, err := Evaluate(gt, tracks, Options{})
	runtime.ReadMemStats(&after)
	if err != nil {
		t.Fatal(err)
	}
	if m.Frames != far || m.TP != 2 || m.IDSW != 0 || m.IDTP != 2 || m.MOTA != 1 {
		t.Errorf("frames %d TP %d IDSW %d IDTP %d MOTA %v; want %d, 2, 0, 2, 1", m.Frames, m.TP, m.IDSW, m.IDTP, m.MOTA, far)
	}
	if n := after.TotalAlloc - before.TotalAlloc; n > 1<<20 {
		t.Errorf("allocated %d bytes for 4 rows", n)
	}
}

// The overlap limit, lowered so that a test can reach it: 3 truth and 3
// tracker boxes on one spot make 9 pairs.
func TestEvaluateOverlapLimit(t *testing.T) {
	var gt, tracks []motfmt.Row
	for id := int64(1); id <= 3; id++ {
		gt = append(gt, motfmt.Row{Frame: 1, ID: id, W: 10, H: 10, Conf: 1, Class: -1, Visibility: -1})
		tracks = append(tracks, motfmt.Row{Frame: 1, ID: 10 * id, W: 10, H: 10, Conf: 1, Class: -1, Visibility: -1})
	}
	s, err := Options{}.resolve(gt, tracks)
	if err != nil {
		t.Fatal(err)
	}
	if s.maxOverlaps != MaxOverlaps {
		t.Fatalf("limit %d, want MaxOverlaps", s.maxOverlaps)
	}
	s.maxOverlaps = 9
	if _, err := prepare(context.Background(), gt, tracks, s); err != nil {
		t.Fatalf("9 pairs, limit 9: %v", err)
	}
	s.maxOverlaps = 5
	_, err = prepare(context.Background(), gt, tracks, s)
	want := "tracks: frame 1, id 30: want at most 5 pairs of overlapping truth and tracker boxes in a sequence (found 6 with this box)"
	if err == nil || err.Error() != want {
		t.Fatalf("error\n got: %v\nwant: %s", err, want)
	}
	var ie *InputError
	if !errors.As(err, &ie) {
		t.Errorf("error %T is not an *InputError", err)
	}
}

// gridSequence is a cheap long sequence: objects people a frame standing in
// a row, each tracked 3 px off, the tracker changing every id every 100
// frames.
func gridSequence(frames, objects int) (gt, tracks []motfmt.Row) {
	gt = make([]motfmt.Row, 0, frames*objects)
	tracks = make([]motfmt.Row, 0, frames*objects)
	for f := 1; f <= frames; f++ {
		for k := range objects {
			r := motfmt.Row{Frame: f, ID: int64(k), X: float64(60 * k), Y: float64(100 + f%50), W: 40, H: 100,
				Conf: 1, Class: -1, Visibility: -1}
			gt = append(gt, r)
			r.X += 3
			r.ID = int64(k + objects*(f/100))
			tracks = append(tracks, r)
		}
	}
	return gt, tracks
}

// Every long loop stops on a context that is done: the preparation, then
// each metric on its own.
func TestEvaluateContextCancelled(t *testing.T) {
	gt, tracks := gridSequence(2000, 40) // enough work for every loop to look at ctx
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	_, err := EvaluateContext(ctx, gt, tracks, Options{})
	if !errors.Is(err, context.Canceled) || err.Error() != "evaluation interrupted: context canceled" {
		t.Errorf("EvaluateContext error = %v, want evaluation interrupted: context canceled", err)
	}

	s, err := Options{}.resolve(gt, tracks)
	if err != nil {
		t.Fatal(err)
	}
	seq, err := prepare(context.Background(), gt, tracks, s)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := prepare(ctx, gt, tracks, s); !errors.Is(err, context.Canceled) {
		t.Errorf("prepare: %v", err)
	}
	var m track.Assigner
	if _, err := clearMOT(ctx, seq, s.iou, &m); !errors.Is(err, context.Canceled) {
		t.Errorf("clearMOT: %v", err)
	}
	if _, err := identity(ctx, seq, s.iou, &m); !errors.Is(err, context.Canceled) {
		t.Errorf("identity: %v", err)
	}
	if _, err := hota(ctx, seq, &m); !errors.Is(err, context.Canceled) {
		t.Errorf("hota: %v", err)
	}
}

// EvaluateContext returns soon after its context is cancelled midway.
func TestEvaluateContextStopsSoon(t *testing.T) {
	gt, tracks := gridSequence(2000, 40) // about 50 ms to score, 0.5 s with -race
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() {
		_, err := EvaluateContext(ctx, gt, tracks, Options{})
		done <- err
	}()
	time.Sleep(5 * time.Millisecond)
	cancel()
	cancelled := time.Now()
	err := <-done
	took := time.Since(cancelled)
	if !errors.Is(err, context.Canceled) {
		t.Skipf("finished before the cancel was seen (error %v)", err)
	}
	if took > 500*time.Millisecond { // the promise is a second; -race is slower
		t.Errorf("returned %v after the cancel, want within 500ms", took)
	}
}

// byFrame groups rows as a stable sort by frame does, by counting (frame
// numbers up to about the number of rows) or by radix (sparse frames, up
// to the largest int).
func TestByFrame(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for trial := range 200 {
		n := rng.IntN(200)
		top := []int{1, 10, 1000, 1 << 20, 1 << 40, math.MaxInt}[trial%6]
		rows := make([]motfmt.Row, n)
		for i := range rows {
			rows[i] = motfmt.Row{Frame: 1 + rng.IntN(top), ID: int64(i)}
			if i > 0 && rng.IntN(3) == 0 {
				rows[i].Frame = rows[rng.IntN(i)].Frame // several rows a frame
			}
		}
		want := make([]int32, n)
		for i := range want {
			want[i] = int32(i)
		}
		slices.SortStableFunc(want, func(a, b int32) int { return cmp.Compare(rows[a].Frame, rows[b].Frame) })
		fi, err := byFrame(context.Background(), rows)
		if err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(fi.order, want) {
			t.Fatalf("trial %d (frames up to %d): order %v, want %v", trial, top, fi.order, want)
		}
		var got []int32
		for k, f := range fi.frames {
			if k > 0 && f <= fi.frames[k-1] {
				t.Fatalf("trial %d: frames not ascending: %v", trial, fi.frames)
			}
			for _, r := range fi.rows(k) {
				if rows[r].Frame != f {
					t.Fatalf("trial %d: row %d of frame %d listed under %d", trial, r, rows[r].Frame, f)
				}
				got = append(got, r)
			}
		}
		if !slices.Equal(got, want) {
			t.Fatalf("trial %d: grouped rows %v, want %v", trial, got, want)
		}
	}
}
