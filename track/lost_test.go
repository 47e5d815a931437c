package track

import (
	"fmt"
	"testing"
	"time"

	"tallyd/detect"
)

// TestLostFramesAndTime: a lost track ends once it has waited more than
// LostTTL or more than LostFrames frames of the source, whichever comes
// first at the source's frame rate; the frame interval is learnt from the
// timestamps, so a dropped frame still counts.
func TestLostFramesAndTime(t *testing.T) {
	a := det(0, 0, "person")
	for _, tt := range []struct {
		fps      float64
		frames   int
		ttl      time.Duration
		lastLost int // the last frame after the last match in which the track is still lost
	}{
		{7, 15, time.Second, 7},            // 1 s is 7 frames: time is stricter
		{10, 15, time.Second, 10},          // 10 frames
		{14, 15, time.Second, 14},          // 14 frames
		{25, 15, time.Second, 15},          // 15 frames is 0.6 s: frames are stricter
		{30, 15, time.Second, 15},          // 0.5 s
		{30, 0, time.Second, 0},            // ends on the first miss
		{10, 100, 0, 0},                    // ends on the first miss
		{10, 3, 250 * time.Millisecond, 3}, // ends on frame 3 after, dropped, so on frame 4
	} {
		t.Run(fmt.Sprintf("%gfps_%dframes_%v", tt.fps, tt.frames, tt.ttl), func(t *testing.T) {
			cfg := DefaultByteTrackConfig()
			cfg.LostFrames, cfg.LostTTL = tt.frames, tt.ttl
			tr := NewByteTrack(cfg)
			at := func(f int) time.Duration { return time.Duration(float64(f) / tt.fps * float64(time.Second)) }
			f := 0
			for ; f < 5; f++ {
				tr.Update(at(f), []detect.Detection{a})
			}
			last := f - 1
			for ; ; f++ {
				if f == last+3 {
					continue // a dropped frame: never reaches the tracker, still counts
				}
				res := tr.Update(at(f), nil)
				if len(res.Ended) == 1 {
					if got := f - last - 1; got != tt.lastLost {
						t.Errorf("ended %d frames after the last match, want %d", got+1, tt.lastLost+1)
					}
					return
				}
				if len(res.Lost) != 1 || f > last+1000 {
					t.Fatalf("frame %d: lost %v ended %v", f, res.Lost, res.Ended)
				}
			}
		})
	}
}

// TestScoreWarmup: in warm-up mode the thresholds become quantiles of the
// scores seen (never below LowScore) and stay once the sample is full; a
// detection that only extends tracks never starts one.
func TestScoreWarmup(t *testing.T) {
	cfg := DefaultByteTrackConfig()
	cfg.Scores = ScoreCalibration{Mode: ScoresWarmup, WarmupDetections: 10, HighQuantile: 0.1, NewQuantile: 0.2}
	tr := NewByteTrack(cfg)
	if h, n := tr.Thresholds(); h != DefaultHighScore || n != DefaultNewTrackScore {
		t.Fatalf("before any detection: %v/%v, want the fixed ones", h, n)
	}
	var ds []detect.Detection
	for i := range 10 { // scores 0.91 … 1.0, far apart
		ds = append(ds, detect.Detection{Box: detect.BoxXYWH(float64(i)*100, 0, 50, 100), Score: 0.91 + 0.01*float64(i), Class: "person"})
	}
	ds = append(ds, detect.Detection{Box: detect.BoxXYWH(0, 500, 50, 100), Score: 0.05, Class: "person"}) // below LowScore: not sampled
	tr.Update(0, ds)
	// Type-7 quantiles of 0.91…1.00: 0.1 → 0.919, 0.2 → 0.928.
	h, n := tr.Thresholds()
	if d := h - 0.919; d*d > 1e-18 {
		t.Errorf("high %v, want 0.919", h)
	}
	if d := n - 0.928; d*d > 1e-18 {
		t.Errorf("new track %v, want 0.928", n)
	}
	// Frozen: later scores change nothing.
	tr.Update(100*time.Millisecond, []detect.Detection{{Box: detect.BoxXYWH(0, 800, 50, 100), Score: 0.2, Class: "person"}})
	if h2, n2 := tr.Thresholds(); h2 != h || n2 != n {
		t.Errorf("after the warm-up: %v/%v, want %v/%v", h2, n2, h, n)
	}
	// A detection of 0.92 is high (it extends tracks) but below the new-track
	// threshold: alone in view for many frames, it never starts a track.
	for f := 2; f < 20; f++ {
		res := tr.Update(time.Duration(f)*100*time.Millisecond, []detect.Detection{{Box: detect.BoxXYWH(1000, 800, 50, 100), Score: 0.92, Class: "person"}})
		for _, a := range res.Active {
			if a.Box.X1 == 1000 {
				t.Fatalf("frame %d: a detection below the new-track threshold started track %d", f, a.ID)
			}
		}
	}
	// Quantiles never put HighScore below LowScore.
	cfg.Scores.HighQuantile, cfg.Scores.NewQuantile = 0, 0
	tr = NewByteTrack(cfg)
	tr.Update(0, []detect.Detection{{Box: detect.BoxXYWH(0, 0, 50, 100), Score: DefaultLowScore, Class: "person"}})
	if h, n := tr.Thresholds(); h != DefaultLowScore || n != DefaultLowScore {
		t.Errorf("thresholds %v/%v, want LowScore", h, n)
	}
}

func TestScoreCalibrationForDetector(t *testing.T) {
	c := DefaultScoreCalibration()
	if got := c.ForDetector(true).Mode; got != ScoresFixed {
		t.Errorf("auto for a calibrated detector: %s", got)
	}
	if got := c.ForDetector(false).Mode; got != ScoresWarmup {
		t.Errorf("auto for an unknown detector: %s", got)
	}
	c.Mode = ScoresFixed
	if got := c.ForDetector(false).Mode; got != ScoresFixed {
		t.Errorf("fixed stays fixed: %s", got)
	}
}
