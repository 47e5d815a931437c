package track

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"tallyd/detect"
)

// walker is a box moving at constant velocity (pixels per second).
type walker struct {
	x, y, vx, vy float64
}

func (w walker) at(sec float64) detect.Detection {
	return det(w.x+w.vx*sec, w.y+w.vy*sec, "person")
}

// TestByteTrackOcclusion hides a moving object for k frames: it has moved
// clear of its last box when it reappears, so only the prediction can link
// it. The baseline, without a motion model, loses it from a few frames on.
func TestByteTrackOcclusion(t *testing.T) {
	for _, tt := range []struct {
		k           int     // frames without a detection
		speed       float64 // px/s, at 10 frames/s
		baselineNew bool    // the baseline does not keep one ID
	}{
		{k: 1, speed: 100},
		{k: 3, speed: 100, baselineNew: true},
		{k: 6, speed: 100, baselineNew: true},
		{k: 9, speed: 100, baselineNew: true}, // back 1 s after the last detection: LostTTL
		{k: 5, speed: 300, baselineNew: true}, // too fast for the baseline even without a gap
		{k: 5, speed: -200, baselineNew: true},
	} {
		t.Run(fmt.Sprintf("k=%d speed=%v", tt.k, tt.speed), func(t *testing.T) {
			w := walker{x: 500, y: 300, vx: tt.speed, vy: tt.speed / 4}
			bt := NewByteTrack(DefaultByteTrackConfig())
			base := NewIoU(DefaultIoUConfig())
			seen := map[int64]int{}
			baseIDs := map[int64]bool{}
			for f := 1; f <= 40; f++ {
				var ds []detect.Detection
				if f <= 10 || f > 10+tt.k {
					ds = dets(w.at(ts(f).Seconds()))
				}
				res := bt.Update(ts(f), ds)
				for _, a := range res.Active {
					seen[a.ID]++
				}
				if len(res.Ended) > 0 {
					t.Fatalf("frame %d: ended %v", f, ids(res.Ended))
				}
				if f > 10 && f <= 10+tt.k && len(res.Active) > 0 {
					t.Fatalf("frame %d: a track without a detection is reported: %+v", f, res.Active)
				}
				for _, a := range base.Update(ts(f), ds).Active {
					baseIDs[a.ID] = true
				}
			}
			if len(seen) != 1 || seen[1] != 40-tt.k-1 {
				t.Errorf("ByteTrack IDs and frames reported %v, want only ID 1 in %d frames", seen, 40-tt.k-1)
			}
			if got := len(baseIDs) != 1; got != tt.baselineNew {
				t.Errorf("baseline IDs %v: lost the object %t, want %t", baseIDs, got, tt.baselineNew)
			}
		})
	}
}

// TestByteTrackDroppedFrames feeds frames with gaps in their timestamps, as
// when frames are dropped or the rate is uneven: the object moves clear of
// its last box between two updates, and the track follows it.
func TestByteTrackDroppedFrames(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 9))
	uneven := []time.Duration{0}
	for len(uneven) < 150 {
		uneven = append(uneven, uneven[len(uneven)-1]+time.Duration(20+rng.IntN(280))*time.Millisecond)
	}
	ms := func(v ...int) []time.Duration {
		var out []time.Duration
		for _, x := range v {
			out = append(out, time.Duration(x)*time.Millisecond)
		}
		return out
	}
	for _, tt := range []struct {
		name  string
		times []time.Duration
		w     walker
	}{
		{"jumps of 3 and 5 frames", ms(0, 100, 200, 300, 400, 700, 800, 900, 1400, 1500, 1600, 1700, 2200), walker{x: 0, y: 100, vx: 200, vy: 0}},
		{"fast and diagonal", ms(0, 40, 80, 120, 160, 200, 440, 480, 520, 760, 800), walker{x: 0, y: 0, vx: 400, vy: 300}},
		{"uneven rate, 20-300 ms", uneven, walker{x: 0, y: 500, vx: 90, vy: -20}},
	} {
		t.Run(tt.name, func(t *testing.T) {
			tr := NewByteTrack(DefaultByteTrackConfig())
			for i, at := range tt.times {
				res := tr.Update(at, dets(tt.w.at(at.Seconds())))
				if i == 0 {
					continue // tentative
				}
				if len(res.Active) != 1 || res.Active[0].ID != 1 {
					t.Fatalf("update %d at %v: Active %v, want ID 1", i, at, ids(res.Active))
				}
			}
		})
	}
}

// TestByteTrackCrossing moves two objects through each other and checks that
// each ID stays with its own object: every ID's boxes move one way only.
func TestByteTrackCrossing(t *testing.T) {
	for _, tt := range []struct {
		name     string
		dy       float64 // vertical offset of the second object's path
		occluded string  // what the detector gives for the hidden object while the boxes overlap most
	}{
		{name: "same row, both seen", dy: 0},
		{name: "offset rows, both seen", dy: 30},
		{name: "same row, hidden one missed", dy: 0, occluded: "missed"},
		{name: "offset rows, hidden one missed", dy: 30, occluded: "missed"},
		{name: "same row, hidden one with a low score", dy: 0, occluded: "low"},
	} {
		t.Run(tt.name, func(t *testing.T) {
			right := walker{x: 0, y: 200, vx: 100}           // 10 px a frame
			left := walker{x: 300, y: 200 + tt.dy, vx: -100} // meet at frame 16
			tr := NewByteTrack(DefaultByteTrackConfig())
			xs := map[int64][]float64{}
			for f := 1; f <= 32; f++ {
				sec := ts(f).Seconds()
				r, l := right.at(sec), left.at(sec)
				if r.Box.IoU(l.Box) > 0.3 { // the left-moving object is behind
					switch tt.occluded {
					case "missed":
						l.Score = 0
					case "low":
						l.Score = 0.3
					}
				}
				res := tr.Update(ts(f), dets(r, l))
				for _, a := range res.Active {
					xs[a.ID] = append(xs[a.ID], a.Box.X1)
				}
			}
			if len(xs) != 2 {
				t.Fatalf("IDs %v, want 2", xs)
			}
			for id, x := range xs {
				dir := math.Copysign(1, x[len(x)-1]-x[0])
				for i := 1; i < len(x); i++ {
					if (x[i]-x[i-1])*dir <= 0 {
						t.Errorf("ID %d switched objects: left edges %v", id, x)
						break
					}
				}
			}
		})
	}
}
