package track

import (
	"testing"
	"time"

	"tallyd/detect"
	"tallyd/internal/motfmt"
)

// outputRun feeds frames of detections (nil: none) to a ByteTrack with
// BirthHits 1 at 10 frames/s and returns every row o wrote.
func outputRun(t *testing.T, o *Output, frames [][]detect.Detection) []motfmt.Row {
	t.Helper()
	cfg := DefaultByteTrackConfig()
	cfg.BirthHits = 1
	tr := NewByteTrack(cfg)
	var rows []motfmt.Row
	for i, ds := range frames {
		rows = append(rows, o.Rows(i+1, tr.Update(time.Duration(i)*100*time.Millisecond, ds))...)
	}
	return rows
}

func at(x float64) []detect.Detection {
	return []detect.Detection{{Box: detect.BoxXYWH(x, 100, 40, 100), Score: 0.9, Class: "person"}}
}

// TestOutputInterpolation: a gap is filled linearly once the track is
// matched again, and never for a track that does not come back.
func TestOutputInterpolation(t *testing.T) {
	o := NewOutput(OutputConfig{Box: BoxDetection, Interpolate: true})
	// Frames 1-3 at x 0, 10, 20; lost in 4-5; found at x 50 in frame 6.
	rows := outputRun(t, o, [][]detect.Detection{at(0), at(10), at(20), nil, nil, at(50)})
	want := []struct {
		frame int
		x     float64
	}{{1, 0}, {2, 10}, {3, 20}, {4, 30}, {5, 40}, {6, 50}}
	if len(rows) != len(want) {
		t.Fatalf("rows %+v, want %d", rows, len(want))
	}
	for i, w := range want {
		if r := rows[i]; r.Frame != w.frame || r.ID != 1 || !near(r.X, w.x) || r.W != 40 || r.H != 100 {
			t.Errorf("row %d = %+v, want frame %d x %v", i, r, w.frame, w.x)
		}
	}

	// Lost for good: ends after LostTTL with nothing written for its gap.
	o = NewOutput(OutputConfig{Box: BoxDetection, Interpolate: true})
	frames := [][]detect.Detection{at(0), at(10)}
	for range 30 {
		frames = append(frames, nil)
	}
	frames = append(frames, at(10)) // a new object at the same place after the end: a new track
	rows = outputRun(t, o, frames)
	for _, r := range rows {
		if r.Frame > 2 && r.Frame < len(frames) {
			t.Errorf("row %+v written in the gap of a track that never came back", r)
		}
	}
	if last := rows[len(rows)-1]; last.ID != 2 || last.Frame != len(frames) {
		t.Errorf("last row %+v, want track 2 in frame %d", last, len(frames))
	}

	// Without Interpolate lost tracks write nothing.
	o = NewOutput(OutputConfig{Box: BoxDetection})
	rows = outputRun(t, o, [][]detect.Detection{at(0), nil, at(20)})
	if len(rows) != 2 || rows[0].Frame != 1 || rows[1].Frame != 3 {
		t.Errorf("rows %+v, want frames 1 and 3 only", rows)
	}
}

// TestOutputBoxes: matched tracks are written at the filtered box by
// default and at the detection on request, clipped inside the frame.
func TestOutputBoxes(t *testing.T) {
	// An object leaving at the right edge of a 200x300 frame, detections
	// reaching past it.
	var frames [][]detect.Detection
	for i := range 8 {
		frames = append(frames, []detect.Detection{{Box: detect.BoxXYWH(120+float64(i)*15, -10, 60, 120), Score: 0.9, Class: "person"}})
	}
	filtered := outputRun(t, NewOutput(OutputConfig{Box: BoxFiltered, Width: 200, Height: 300}), frames)
	detection := outputRun(t, NewOutput(OutputConfig{Box: BoxDetection, Width: 200, Height: 300}), frames)
	unclipped := outputRun(t, NewOutput(OutputConfig{Box: BoxDetection}), frames)
	if len(filtered) != 8 || len(detection) != 8 || len(unclipped) != 8 {
		t.Fatalf("rows %d %d %d, want 8 each", len(filtered), len(detection), len(unclipped))
	}
	differ := false
	for i := range filtered {
		for _, r := range []motfmt.Row{filtered[i], detection[i]} {
			if r.X < 0 || r.Y < 0 || r.X+r.W > 200+1e-9 || r.Y+r.H > 300+1e-9 {
				t.Errorf("row %+v outside the 200x300 frame", r)
			}
		}
		// Without a frame size only the left and top edges clip.
		if u := unclipped[i]; u.X != 120+float64(i)*15 || u.Y != 0 || u.W != 60 || u.H != 110 {
			t.Errorf("row without a frame size %+v, want x %v y 0 60x110", u, 120+float64(i)*15)
		}
		differ = differ || !near(filtered[i].X, detection[i].X) || !near(filtered[i].W, detection[i].W)
	}
	if !differ {
		t.Error("the filtered boxes equal the detections")
	}
}

func near(a, b float64) bool { d := a - b; return d*d < 1e-18 }

// TestOutputBirths: with Births a track confirmed on its second match also
// gets its first frame, written when it is confirmed; a detection that
// never grows into a track writes nothing.
func TestOutputBirths(t *testing.T) {
	cfg := DefaultByteTrackConfig() // BirthHits 2
	tr := NewByteTrack(cfg)
	o := NewOutput(OutputConfig{Box: BoxDetection, Births: true})
	lone := []detect.Detection{{Box: detect.BoxXYWH(500, 100, 40, 100), Score: 0.9, Class: "person"}}
	frames := [][]detect.Detection{lone, nil, at(0), at(10), at(20)}
	var rows []motfmt.Row
	for i, ds := range frames {
		got := o.Rows(i+1, tr.Update(time.Duration(i)*100*time.Millisecond, ds))
		if i == 3 && (len(got) != 2 || got[0].Frame != 3 || got[1].Frame != 4) {
			t.Errorf("frame 4 (confirmation) rows %+v, want frames 3 and 4", got)
		}
		rows = append(rows, got...)
	}
	want := []struct {
		frame int
		x     float64
	}{{3, 0}, {4, 10}, {5, 20}}
	if len(rows) != len(want) {
		t.Fatalf("rows %+v, want %d (the lone detection of frame 1 never confirmed)", rows, len(want))
	}
	for i, w := range want {
		if r := rows[i]; r.Frame != w.frame || r.ID != 1 || r.X != w.x {
			t.Errorf("row %d = %+v, want frame %d x %v", i, r, w.frame, w.x)
		}
	}
}
