package track

import (
	"fmt"
	"math"
	"reflect"
	"strings"
	"sync"
	"testing"
	"time"

	"tallyd/detect"
)

// Both trackers offer what the pipeline's Tracker interface asks for.
var (
	_ interface {
		Update(time.Duration, []detect.Detection) Result
		Flush() []Track
	} = (*ByteTrack)(nil)
	_ interface {
		Update(time.Duration, []detect.Detection) Result
		Flush() []Track
	} = (*IoU)(nil)
)

func scored(d detect.Detection, s float64) detect.Detection { d.Score = s; return d }

// bcfg is the default configuration with a birth threshold, a lost TTL and
// the per-class switch.
func bcfg(birth int, ttl time.Duration, perClass bool) ByteTrackConfig {
	c := DefaultByteTrackConfig()
	c.BirthHits, c.LostTTL, c.PerClass = birth, ttl, perClass
	return c
}

func dets(ds ...detect.Detection) []detect.Detection { return ds }

func TestByteTrackSequences(t *testing.T) {
	a, b := det(0, 0, "person"), det(300, 0, "person")
	car := det(0, 0, "car")
	low := scored(a, 0.3)                // in [LowScore, HighScore)
	tooLow := scored(a, 0.05)            // below LowScore
	weak := scored(a, 0.55)              // high, below NewTrackScore
	lowB := scored(b, DefaultLowScore)   // LowScore itself is low, not ignored
	highA := scored(a, DefaultHighScore) // HighScore itself is high
	second := 250 * time.Millisecond     // LostTTL of 2.5 frames
	tests := []struct {
		name  string
		cfg   ByteTrackConfig
		steps []step
	}{
		{"confirmed after BirthHits frames", bcfg(3, second, false), []step{
			{dets: dets(a)},
			{dets: dets(a)},
			{dets: dets(a), active: []int64{1}},
			{dets: dets(a), active: []int64{1}},
		}},
		{"BirthHits 1 confirms at once", bcfg(1, second, false), []step{
			{dets: dets(a, b), active: []int64{1, 2}},
		}},
		{"a tentative track that misses once is dropped", bcfg(2, second, false), []step{
			{dets: dets(a)},
			{},
			{dets: dets(a)},
			{dets: dets(a), active: []int64{1}},
		}},
		{"lost, then ended once LostTTL has passed", bcfg(1, second, false), []step{
			{dets: dets(a), active: []int64{1}},
			{},                  // 100 ms since the last detection
			{},                  // 200 ms
			{ended: []int64{1}}, // 300 ms > 250 ms
			{},
			{dets: dets(a), active: []int64{2}}, // a new object, a new ID
		}},
		{"found again within LostTTL keeps the ID", bcfg(1, 300*time.Millisecond, false), []step{
			{dets: dets(a), active: []int64{1}},
			{},
			{},
			{dets: dets(a), active: []int64{1}}, // 300 ms: not more than LostTTL
		}},
		{"LostTTL 0 ends on the first miss", bcfg(1, 0, false), []step{
			{dets: dets(a, b), active: []int64{1, 2}},
			{dets: dets(b), active: []int64{2}, ended: []int64{1}},
		}},
		{"low detections never start a track", bcfg(1, second, false), []step{
			{dets: dets(low, lowB)},
			{dets: dets(low, lowB)},
			{dets: dets(low, lowB)},
		}},
		{"low detections extend a track", bcfg(1, second, false), []step{
			{dets: dets(a), active: []int64{1}},
			{dets: dets(low), active: []int64{1}},
			{dets: dets(low), active: []int64{1}},
			{dets: dets(low), active: []int64{1}},
			{dets: dets(a), active: []int64{1}},
		}},
		{"a lost track is found again by a low detection", bcfg(1, second, false), []step{
			{dets: dets(a), active: []int64{1}},
			{},
			{dets: dets(low), active: []int64{1}},
		}},
		{"detections below LowScore are ignored", bcfg(1, second, false), []step{
			{dets: dets(a), active: []int64{1}},
			{dets: dets(tooLow)},
			{dets: dets(tooLow)},
			{dets: dets(tooLow), ended: []int64{1}},
		}},
		{"HighScore itself is high", bcfg(1, second, false), []step{
			{dets: dets(a), active: []int64{1}},
			{dets: dets(highA), active: []int64{1}},
		}},
		{"below NewTrackScore: extends, never starts", bcfg(1, second, false), []step{
			{dets: dets(weak)},
			{dets: dets(weak)},
			{dets: dets(a), active: []int64{1}},
			{dets: dets(weak), active: []int64{1}},
		}},
		{"IDs dense in confirmation order, not birth order", bcfg(2, second, false), []step{
			{dets: dets(a)},
			{dets: dets(b)}, // a dropped before confirmation: no ID used
			{dets: dets(b, a), active: []int64{1}},
			{dets: dets(a, b), active: []int64{1, 2}},
		}},
		{"same-frame confirmations numbered in birth order", bcfg(2, second, false), []step{
			{dets: dets(b, a)},
			{dets: dets(a, b), active: []int64{1, 2}},
		}},
		{"class change followed without PerClass", bcfg(1, second, false), []step{
			{dets: dets(a), active: []int64{1}},
			{dets: dets(car), active: []int64{1}},
		}},
		{"PerClass keeps classes apart", bcfg(1, 150*time.Millisecond, true), []step{
			{dets: dets(a), active: []int64{1}},
			{dets: dets(car), active: []int64{2}},
			{dets: dets(car), active: []int64{2}, ended: []int64{1}},
		}},
		{"PerClass links overlapping objects of two classes", bcfg(1, second, true), []step{
			{dets: dets(a, car), active: []int64{1, 2}},
			{dets: dets(car, a), active: []int64{1, 2}},
		}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			tr := NewByteTrack(tt.cfg)
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

func TestByteTrackTrackFields(t *testing.T) {
	tr := NewByteTrack(bcfg(2, 150*time.Millisecond, false))
	a := det(10, 20, "person")
	tr.Update(ts(1), dets(a))
	moved := scored(det(20, 20, "person"), 0.7)
	res := tr.Update(ts(2), dets(moved))
	if len(res.Active) != 1 {
		t.Fatalf("frame 2: Active = %+v, want one track", res.Active)
	}
	got := res.Active[0]
	est := got.Estimate
	got.Estimate = detect.Box{}
	want := Track{ID: 1, Box: moved.Box, Class: "person", Score: 0.7, Hits: 2, Confirmed: true, FirstSeen: ts(1), LastSeen: ts(2)}
	if got != want {
		t.Fatalf("frame 2: Active = %+v, want %+v", got, want)
	}
	// The filter's box lies between the prediction (at rest, x=10) and the
	// detection (x=20), much nearer the detection.
	if !(est.X1 > 15 && est.X1 < 20) || math.Abs(est.W()-50) > 1e-9 {
		t.Errorf("frame 2: Estimate %+v, want left edge in (15, 20), width 50", est)
	}
	if res := tr.Update(ts(3), nil); len(res.Active)+len(res.Ended) != 0 {
		t.Fatalf("frame 3: a lost track within LostTTL is reported: %+v", res)
	}
	res = tr.Update(ts(4), nil)
	if len(res.Ended) != 1 {
		t.Fatalf("frame 4: Ended = %+v, want one track", res.Ended)
	}
	got = res.Ended[0]
	want.Misses = 2 // the last box, score and time are kept
	if got.Estimate.X1 <= est.X1 {
		t.Errorf("frame 4: Estimate %+v did not move on from %+v", got.Estimate, est)
	}
	got.Estimate = detect.Box{}
	if got != want {
		t.Fatalf("frame 4: Ended = %+v, want %+v", got, want)
	}
	if got := tr.Flush(); got != nil {
		t.Errorf("Flush after the only track ended = %+v, want nil", got)
	}
}

// scene makes a deterministic busy sequence: objects crossing, missed now
// and then, a few with low scores, and some clutter.
func scene(frames int) [][]detect.Detection {
	out := make([][]detect.Detection, frames)
	for f := range out {
		for k := range 8 {
			if (f+k)%7 == 0 {
				continue // each object is missed now and then
			}
			x := float64(60*k) + float64((f*(k%3+1))%40)
			d := det(x, float64(20*(k%3)), [...]string{"person", "car"}[k%2])
			d.Score = 0.3 + 0.7*float64((f+3*k)%10)/10
			out[f] = append(out[f], d)
		}
	}
	return out
}

func TestByteTrackDeterministic(t *testing.T) {
	frames := scene(80)
	for _, perClass := range []bool{false, true} {
		run := func() string {
			tr := NewByteTrack(bcfg(2, 500*time.Millisecond, perClass))
			var b strings.Builder
			for f, ds := range frames {
				fmt.Fprintf(&b, "%d %+v\n", f, tr.Update(ts(f+1), ds))
			}
			fmt.Fprintf(&b, "%+v\n", tr.Flush())
			return b.String()
		}
		first := run()
		for range 3 {
			if again := run(); again != first {
				t.Fatalf("PerClass %t: two runs differ:\n%s\n----\n%s", perClass, first, again)
			}
		}
	}
}

func TestByteTrackFlush(t *testing.T) {
	tr := NewByteTrack(bcfg(2, time.Second, false))
	a, b, c := det(0, 0, "p"), det(300, 0, "p"), det(600, 0, "p")
	tr.Update(ts(1), dets(a, b))
	tr.Update(ts(2), dets(a, b, c)) // a, b confirmed; c tentative
	tr.Update(ts(3), dets(b, c))    // a lost; c confirmed
	got := tr.Flush()
	if want := []int64{1, 2, 3}; !reflect.DeepEqual(ids(got), want) {
		t.Fatalf("Flush IDs %v, want %v", ids(got), want)
	}
	if got[0].Misses != 1 || got[0].LastSeen != ts(2) {
		t.Errorf("lost track flushed as %+v, want Misses 1, LastSeen %v", got[0], ts(2))
	}
	if again := tr.Flush(); again != nil {
		t.Errorf("second Flush = %+v, want nil", again)
	}
	tr.Update(ts(4), dets(a))
	res := tr.Update(ts(5), dets(a))
	if want := []int64{4}; !reflect.DeepEqual(ids(res.Active), want) {
		t.Errorf("after Flush: Active IDs %v, want %v", ids(res.Active), want)
	}
}

func TestByteTrackResultOwnedByCaller(t *testing.T) {
	tr := NewByteTrack(bcfg(1, time.Second, false))
	res := tr.Update(ts(1), dets(det(0, 0, "p")))
	res.Active[0].ID = 99
	res.Active[0].Box.X1 = -500
	res = tr.Update(ts(2), dets(det(5, 0, "p")))
	if len(res.Active) != 1 || res.Active[0].ID != 1 {
		t.Errorf("changing a result changed the tracker: %+v", res.Active)
	}
}

// TestByteTrackOddInput feeds empty and broken boxes, NaN scores and
// timestamps that stand still or go back: nothing panics, and a sound object
// is tracked throughout.
func TestByteTrackOddInput(t *testing.T) {
	tr := NewByteTrack(bcfg(1, 300*time.Millisecond, false))
	empty := detect.Detection{Box: detect.Box{X1: 5, Y1: 5, X2: 5, Y2: 5}, Score: 0.9, Class: "p"}
	broken := detect.Detection{Box: detect.Box{X1: nan(), Y1: 0, X2: 10, Y2: math.Inf(1)}, Score: 0.9, Class: "p"}
	noScore := scored(det(800, 0, "p"), nan())
	times := []time.Duration{0, 100, 100, 50, 200, 300, 300}
	var id int64
	for i, at := range times {
		at *= time.Millisecond
		sound := det(400, 400, "p")
		res := tr.Update(at, dets(empty, broken, noScore, sound))
		var got int64
		for _, a := range res.Active {
			if a.Box == sound.Box {
				got = a.ID
			}
		}
		if i == 0 {
			id = got
		}
		if got == 0 || got != id {
			t.Fatalf("update %d at %v: the sound object is ID %d, want %d: %+v", i, at, got, id, res.Active)
		}
	}
}

func TestByteTrackConfigValidate(t *testing.T) {
	c := DefaultByteTrackConfig
	with := func(f func(*ByteTrackConfig)) ByteTrackConfig { cfg := c(); f(&cfg); return cfg }
	tests := []struct {
		name string
		cfg  ByteTrackConfig
		want string // "" when valid
	}{
		{"defaults", c(), ""},
		{"edges", ByteTrackConfig{HighScore: 1, LowScore: 0, NewTrackScore: 1, MatchIoU: 0, LowMatchIoU: 0.999,
			BirthHits: 1, LostTTL: 0, LostFrames: 0, Scores: ScoreCalibration{Mode: ScoresWarmup, WarmupDetections: 1, HighQuantile: 1, NewQuantile: 1},
			Motion: MotionConfig{MeasurementNoise: 1e-9}}, ""},
		{"high equals low", with(func(c *ByteTrackConfig) { c.HighScore, c.LowScore, c.NewTrackScore = 0.4, 0.4, 0.4 }), ""},
		{"zero value", ByteTrackConfig{}, "high_score: must be within (0, 1] (found 0)\n" +
			"birth_hits: must be at least 1 (found 0)\n" +
			"scores.mode: want auto, fixed, warmup (found \"\")\n" +
			"scores.warmup_detections: must be within [1, 100000] (found 0)\n" +
			"motion.measurement_noise: must be above 0 and finite (found 0)"},
		{"high below low", with(func(c *ByteTrackConfig) { c.HighScore = 0.05 }),
			"high_score: must not be below low_score 0.1 (found 0.05)"},
		{"new track below high", with(func(c *ByteTrackConfig) { c.NewTrackScore = 0.4 }),
			"new_track_score: must not be below high_score 0.5 (found 0.4)"},
		{"match_iou 1", with(func(c *ByteTrackConfig) { c.MatchIoU = 1 }), "match_iou: must be within [0, 1) (found 1)"},
		{"lost_frames", with(func(c *ByteTrackConfig) { c.LostFrames = -1 }), "lost_frames: must be within [0, 108000] (found -1)"},
		{"quantiles", with(func(c *ByteTrackConfig) { c.Scores.HighQuantile, c.Scores.NewQuantile = 0.5, 0.4 }),
			"scores.new_quantile: must not be below high_quantile 0.5 (found 0.4)"},
		{"quantiles out of range", with(func(c *ByteTrackConfig) {
			c.Scores.Mode, c.Scores.WarmupDetections, c.Scores.HighQuantile, c.Scores.NewQuantile = "median", 100001, -1, nan()
		}), "scores.mode: want auto, fixed, warmup (found \"median\")\n" +
			"scores.warmup_detections: must be within [1, 100000] (found 100001)\n" +
			"scores.high_quantile: must be within [0, 1] (found -1)\n" +
			"scores.new_quantile: must be within [0, 1] (found NaN)"},
		{"NaN everywhere", with(func(c *ByteTrackConfig) {
			c.HighScore, c.LowScore, c.NewTrackScore, c.MatchIoU, c.LowMatchIoU = nan(), nan(), nan(), nan(), nan()
		}), "low_score: must be within [0, 1] (found NaN)\n" +
			"high_score: must be within (0, 1] (found NaN)\n" +
			"new_track_score: must be within [0, 1] (found NaN)\n" +
			"match_iou: must be within [0, 1) (found NaN)\n" +
			"low_match_iou: must be within [0, 1) (found NaN)"},
		{"all wrong", ByteTrackConfig{HighScore: 1.5, LowScore: -0.1, NewTrackScore: 2, MatchIoU: -0.2, LowMatchIoU: 1.1,
			BirthHits: -2, LostTTL: -time.Second, Motion: MotionConfig{MeasurementNoise: nan(), Acceleration: nan(), SizeAcceleration: -1}},
			"low_score: must be within [0, 1] (found -0.1)\n" +
				"high_score: must be within (0, 1] (found 1.5)\n" +
				"new_track_score: must be within [0, 1] (found 2)\n" +
				"match_iou: must be within [0, 1) (found -0.2)\n" +
				"low_match_iou: must be within [0, 1) (found 1.1)\n" +
				"birth_hits: must be at least 1 (found -2)\n" +
				"lost_ttl: must not be negative (found -1s)\n" +
				"scores.mode: want auto, fixed, warmup (found \"\")\n" +
				"scores.warmup_detections: must be within [1, 100000] (found 0)\n" +
				"motion.measurement_noise: must be above 0 and finite (found NaN)\n" +
				"motion.acceleration: must be finite and not negative (found NaN)\n" +
				"motion.size_acceleration: must be finite and not negative (found -1)"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			checkConfigErrors(t, tt.cfg.Validate(), tt.want)
		})
	}
}

func TestNewByteTrackPanicsOnInvalidConfig(t *testing.T) {
	defer func() {
		want := "track: NewByteTrack: birth_hits: must be at least 1 (found 0)"
		if r := recover(); r != want {
			t.Errorf("panic %v, want %q", r, want)
		}
	}()
	c := DefaultByteTrackConfig()
	c.BirthHits = 0
	NewByteTrack(c)
}

// TestByteTrackIndependentTrackers runs trackers of several sources at once,
// as the daemon does, so that -race would catch shared state.
func TestByteTrackIndependentTrackers(t *testing.T) {
	frames := scene(200)
	var wg sync.WaitGroup
	results := make([]string, 4)
	for i := range results {
		wg.Go(func() {
			tr := NewByteTrack(DefaultByteTrackConfig())
			var b strings.Builder
			for f, ds := range frames {
				fmt.Fprint(&b, ids(tr.Update(ts(f+1), ds).Active))
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
