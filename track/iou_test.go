package track

import (
	"fmt"
	"reflect"
	"strings"
	"sync"
	"testing"
	"time"

	"tallyd/detect"
)

const frameStep = 100 * time.Millisecond // 10 frames/s in these tests

// ts is the source time of a 1-based frame number.
func ts(frame int) time.Duration { return time.Duration(frame-1) * frameStep }

func det(x, y float64, class string) detect.Detection {
	return detect.Detection{Box: detect.BoxXYWH(x, y, 50, 100), Score: 0.9, Class: class}
}

// step is one frame of a scripted sequence and what the tracker must report.
type step struct {
	dets   []detect.Detection
	active []int64 // IDs in Result.Active
	ended  []int64 // IDs in Result.Ended
}

func ids(tracks []Track) []int64 {
	var out []int64
	for _, t := range tracks {
		out = append(out, t.ID)
	}
	return out
}

func cfg(birth, misses int, perClass bool) IoUConfig {
	return IoUConfig{MinIoU: 0.3, BirthHits: birth, MaxMisses: misses, PerClass: perClass}
}

func TestIoUSequences(t *testing.T) {
	a, b := det(0, 0, "person"), det(300, 0, "person")
	car := det(0, 0, "car")
	tests := []struct {
		name  string
		cfg   IoUConfig
		steps []step
	}{
		{"birth after BirthHits frames", cfg(3, 5, false), []step{
			{dets: []detect.Detection{a}},
			{dets: []detect.Detection{a}},
			{dets: []detect.Detection{a}, active: []int64{1}},
			{dets: []detect.Detection{a}, active: []int64{1}},
		}},
		{"BirthHits 1 confirms at once", cfg(1, 5, false), []step{
			{dets: []detect.Detection{a, b}, active: []int64{1, 2}},
		}},
		{"a tentative track that misses once is dropped", cfg(3, 5, false), []step{
			{dets: []detect.Detection{a}},
			{dets: []detect.Detection{a}},
			{},
			{dets: []detect.Detection{a}},
			{dets: []detect.Detection{a}},
			{dets: []detect.Detection{a}, active: []int64{1}},
		}},
		{"ended after more than MaxMisses misses", cfg(1, 2, false), []step{
			{dets: []detect.Detection{a}, active: []int64{1}},
			{},
			{},
			{ended: []int64{1}},
			{},
			{dets: []detect.Detection{a}, active: []int64{2}}, // a new object, a new ID
		}},
		{"a miss within MaxMisses keeps the ID", cfg(1, 2, false), []step{
			{dets: []detect.Detection{a}, active: []int64{1}},
			{},
			{},
			{dets: []detect.Detection{a}, active: []int64{1}},
		}},
		{"MaxMisses 0 ends on the first miss", cfg(1, 0, false), []step{
			{dets: []detect.Detection{a, b}, active: []int64{1, 2}},
			{dets: []detect.Detection{b}, active: []int64{2}, ended: []int64{1}},
		}},
		{"IDs dense in confirmation order, not birth order", cfg(2, 5, false), []step{
			{dets: []detect.Detection{a}},
			{dets: []detect.Detection{b}}, // a dropped before confirmation: no ID used
			{dets: []detect.Detection{b, a}, active: []int64{1}},
			{dets: []detect.Detection{a, b}, active: []int64{1, 2}},
		}},
		{"same-frame confirmations numbered in birth order", cfg(2, 5, false), []step{
			{dets: []detect.Detection{b, a}},
			{dets: []detect.Detection{a, b}, active: []int64{1, 2}},
		}},
		{"class change followed without PerClass", cfg(1, 5, false), []step{
			{dets: []detect.Detection{a}, active: []int64{1}},
			{dets: []detect.Detection{car}, active: []int64{1}},
		}},
		{"PerClass keeps classes apart", cfg(1, 1, true), []step{
			{dets: []detect.Detection{a}, active: []int64{1}},
			{dets: []detect.Detection{car}, active: []int64{2}},
			{dets: []detect.Detection{car}, active: []int64{2}, ended: []int64{1}},
		}},
		{"PerClass links overlapping objects of two classes", cfg(1, 1, true), []step{
			{dets: []detect.Detection{a, car}, active: []int64{1, 2}},
			{dets: []detect.Detection{car, a}, active: []int64{1, 2}},
		}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			tr := NewIoU(tt.cfg)
			for i, s := range tt.steps {
				res := tr.Update(ts(i+1), s.dets)
				if got := ids(res.Active); !reflect.DeepEqual(got, s.active) {
					t.Errorf("frame %d: Active IDs %v, want %v", i+1, got, s.active)
				}
				if got := ids(res.Ended); !reflect.DeepEqual(got, s.ended) {
					t.Errorf("frame %d: Ended IDs %v, want %v", i+1, got, s.ended)
				}
			}
		})
	}
}

func TestIoUTrackFields(t *testing.T) {
	tr := NewIoU(cfg(2, 1, false))
	a := det(10, 20, "person")
	tr.Update(ts(1), []detect.Detection{a})
	moved := det(20, 20, "person")
	moved.Score = 0.5
	res := tr.Update(ts(2), []detect.Detection{moved})
	want := Track{ID: 1, Box: moved.Box, Class: "person", Score: 0.5, Hits: 2, Confirmed: true, FirstSeen: ts(1), LastSeen: ts(2)}
	if len(res.Active) != 1 || res.Active[0] != want {
		t.Fatalf("frame 2: Active = %+v, want [%+v]", res.Active, want)
	}
	if res := tr.Update(ts(3), nil); len(res.Active)+len(res.Ended) != 0 {
		t.Fatalf("frame 3: a missed track within MaxMisses is reported: %+v", res)
	}
	res = tr.Update(ts(4), nil)
	want.Misses = 2 // the last box, score and time are kept
	if len(res.Ended) != 1 || res.Ended[0] != want {
		t.Fatalf("frame 4: Ended = %+v, want [%+v]", res.Ended, want)
	}
	if got := tr.Flush(); got != nil {
		t.Errorf("Flush after the only track ended = %+v, want nil", got)
	}
}

func TestIoUClassMajority(t *testing.T) {
	tr := NewIoU(cfg(1, 5, false))
	var got []string
	for _, c := range []string{"car", "truck", "truck", "car", "truck", "truck"} {
		res := tr.Update(0, []detect.Detection{det(0, 0, c)})
		got = append(got, res.Active[0].Class)
	}
	// Votes car:truck 1:0, 1:1 (tie keeps car), 1:2, 2:2 (tie keeps truck), 2:3, 2:4.
	want := []string{"car", "car", "truck", "truck", "truck", "truck"}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("classes %v, want %v", got, want)
	}
}

// TestIoUCrossing moves two objects past each other, one lower in the image
// (boxes overlap by 40 of 100 px vertically), and checks that each ID stays
// with its own object through the crossing.
func TestIoUCrossing(t *testing.T) {
	tr := NewIoU(cfg(2, 3, false))
	byID := map[int64][]float64{} // ID → top edges seen
	for f := 1; f <= 30; f++ {
		x1 := float64(10 * f)     // rightwards along y=100
		x2 := float64(310 - 10*f) // leftwards along y=160, crosses at f=15
		res := tr.Update(ts(f), []detect.Detection{det(x1, 100, "person"), det(x2, 160, "person")})
		if f >= 2 && len(res.Active) != 2 {
			t.Fatalf("frame %d: %d active tracks, want 2", f, len(res.Active))
		}
		for _, a := range res.Active {
			byID[a.ID] = append(byID[a.ID], a.Box.Y1)
		}
	}
	if len(byID) != 2 {
		t.Fatalf("got %d IDs, want 2", len(byID))
	}
	for id, ys := range byID {
		for _, y := range ys {
			if y != ys[0] {
				t.Errorf("ID %d switched objects: top edges %v", id, ys)
				break
			}
		}
	}
}

// TestIoUTies checks the documented tie-break: with equal IoUs the track
// first in order (confirmed by ID, then tentative) and then the detection
// with the lower index win.
func TestIoUTies(t *testing.T) {
	// One track at x=0; detections at x=-10 and x=+10 overlap it equally.
	tr := NewIoU(cfg(1, 5, false))
	tr.Update(ts(1), []detect.Detection{det(0, 0, "p")})
	res := tr.Update(ts(2), []detect.Detection{det(10, 0, "p"), det(-10, 0, "p")})
	if len(res.Active) != 2 || res.Active[0].ID != 1 || res.Active[0].Box.X1 != 10 {
		t.Fatalf("track 1 should take detection 0 (x=10): %+v", res.Active)
	}

	// Two tracks at x=-10 and x=+10, one detection at x=0 between them: the
	// lower ID wins even though it was listed second at birth.
	tr = NewIoU(cfg(1, 5, false))
	tr.Update(ts(1), []detect.Detection{det(-10, 0, "p"), det(10, 0, "p")})
	res = tr.Update(ts(2), []detect.Detection{det(0, 0, "p")})
	if len(res.Active) != 1 || res.Active[0].ID != 1 {
		t.Fatalf("track 1 should take the detection: %+v", res.Active)
	}
}

func TestIoUDeterministic(t *testing.T) {
	run := func() string {
		tr := NewIoU(DefaultIoUConfig())
		var b strings.Builder
		for f := 1; f <= 60; f++ {
			var dets []detect.Detection
			for k := range 8 {
				if (f+k)%7 == 0 {
					continue // each object is missed now and then
				}
				dets = append(dets, det(float64(60*k+f%5), float64(20*(k%3)), "p"))
			}
			fmt.Fprintf(&b, "%d %+v\n", f, tr.Update(ts(f), dets))
		}
		fmt.Fprintf(&b, "%+v\n", tr.Flush())
		return b.String()
	}
	first := run()
	for range 3 {
		if again := run(); again != first {
			t.Fatalf("two runs differ:\n%s\n----\n%s", first, again)
		}
	}
}

func TestIoUFlush(t *testing.T) {
	tr := NewIoU(cfg(2, 5, false))
	a, b, c := det(0, 0, "p"), det(300, 0, "p"), det(600, 0, "p")
	tr.Update(ts(1), []detect.Detection{a, b})
	tr.Update(ts(2), []detect.Detection{a, b, c}) // a, b confirmed; c tentative
	tr.Update(ts(3), []detect.Detection{b, c})    // a missed; c confirmed
	got := tr.Flush()
	if want := []int64{1, 2, 3}; !reflect.DeepEqual(ids(got), want) {
		t.Fatalf("Flush IDs %v, want %v", ids(got), want)
	}
	if got[0].Misses != 1 || got[0].LastSeen != ts(2) {
		t.Errorf("missed track flushed as %+v, want Misses 1, LastSeen %v", got[0], ts(2))
	}
	if again := tr.Flush(); again != nil {
		t.Errorf("second Flush = %+v, want nil", again)
	}
	// The tracker is empty, IDs keep counting.
	tr.Update(ts(4), []detect.Detection{a})
	res := tr.Update(ts(5), []detect.Detection{a})
	if want := []int64{4}; !reflect.DeepEqual(ids(res.Active), want) {
		t.Errorf("after Flush: Active IDs %v, want %v", ids(res.Active), want)
	}
}

func TestIoUResultOwnedByCaller(t *testing.T) {
	tr := NewIoU(cfg(1, 5, false))
	res := tr.Update(ts(1), []detect.Detection{det(0, 0, "p")})
	res.Active[0].ID = 99
	res.Active[0].Box.X1 = -500
	res = tr.Update(ts(2), []detect.Detection{det(5, 0, "p")})
	if len(res.Active) != 1 || res.Active[0].ID != 1 {
		t.Errorf("changing a result changed the tracker: %+v", res.Active)
	}
}

func TestIoUDegenerateDetections(t *testing.T) {
	tr := NewIoU(cfg(1, 0, false))
	empty := detect.Detection{Box: detect.Box{X1: 5, Y1: 5, X2: 5, Y2: 5}, Class: "p"}
	for f := 1; f <= 3; f++ {
		res := tr.Update(ts(f), []detect.Detection{empty})
		// An empty box overlaps nothing: every frame confirms a new track (BirthHits 1)
		// that ends on the next frame (MaxMisses 0).
		if len(res.Active) != 1 || res.Active[0].ID != int64(f) {
			t.Fatalf("frame %d: Active %+v, want ID %d", f, res.Active, f)
		}
	}
}

func TestIoUConfigValidate(t *testing.T) {
	tests := []struct {
		name string
		cfg  IoUConfig
		want string // "" when valid
	}{
		{"defaults", DefaultIoUConfig(), ""},
		{"edges", IoUConfig{MinIoU: 1, BirthHits: 1, MaxMisses: 0}, ""},
		{"zero value", IoUConfig{},
			"min_iou: must be within (0, 1] (found 0)\nbirth_hits: must be at least 1 (found 0)"},
		{"min_iou above 1", IoUConfig{MinIoU: 1.5, BirthHits: 3}, "min_iou: must be within (0, 1] (found 1.5)"},
		{"min_iou NaN", IoUConfig{MinIoU: nan(), BirthHits: 3}, "min_iou: must be within (0, 1] (found NaN)"},
		{"all wrong", IoUConfig{MinIoU: -0.1, BirthHits: -2, MaxMisses: -1},
			"min_iou: must be within (0, 1] (found -0.1)\nbirth_hits: must be at least 1 (found -2)\nmax_misses: must not be negative (found -1)"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			checkConfigErrors(t, tt.cfg.Validate(), tt.want)
		})
	}
}

func nan() float64 { var z float64; return z / z }

func TestNewIoUPanicsOnInvalidConfig(t *testing.T) {
	defer func() {
		r := recover()
		want := "track: NewIoU: birth_hits: must be at least 1 (found 0)"
		if r != want {
			t.Errorf("panic %v, want %q", r, want)
		}
	}()
	NewIoU(IoUConfig{MinIoU: 0.5})
}

// TestIoUIndependentTrackers runs trackers of several sources at once, as the
// daemon does, so that -race would catch shared state.
func TestIoUIndependentTrackers(t *testing.T) {
	var wg sync.WaitGroup
	results := make([]string, 4)
	for i := range results {
		wg.Go(func() {
			tr := NewIoU(DefaultIoUConfig())
			var b strings.Builder
			for f := 1; f <= 200; f++ {
				res := tr.Update(ts(f), []detect.Detection{det(float64(f), 0, "p"), det(500-float64(f), 200, "p")})
				fmt.Fprint(&b, ids(res.Active))
			}
			results[i] = b.String()
		})
	}
	wg.Wait()
	for i := range results {
		if results[i] != results[0] {
			t.Fatalf("tracker %d differs from tracker 0", i)
		}
	}
}
