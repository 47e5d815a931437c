package events

import (
	"encoding/json"
	"fmt"
	"strings"
	"testing"
	"time"

	"tallyd/track"
)

// yard is the square 100..300 on both axes.
var yard = ZoneRule{Name: "yard", Polygon: []Point{{100, 100}, {300, 100}, {300, 300}, {100, 300}}, BandPx: 5}

// zdescribe is describe plus the zone fields:
// "frame:kind:track[ occ=N][ dwell=S][ thr=S][ reason=R]".
func zdescribe(evs []Event) string {
	var parts []string
	for _, e := range evs {
		s := fmt.Sprintf("%d:%s:%d", e.Data.Frame, e.Data.Kind, e.Data.TrackID)
		if e.Data.Occupancy != nil {
			s += fmt.Sprintf(",occ=%d", *e.Data.Occupancy)
		}
		if e.Data.DwellS != nil {
			s += fmt.Sprintf(",dwell=%g", *e.Data.DwellS)
		}
		if e.Data.ThresholdS != nil {
			s += fmt.Sprintf(",thr=%g", *e.Data.ThresholdS)
		}
		if e.Data.Reason != "" {
			s += ",reason=" + string(e.Data.Reason)
		}
		parts = append(parts, s)
	}
	return strings.Join(parts, " ")
}

func withDwell(z ZoneRule, d time.Duration) ZoneRule {
	z.DwellThreshold = d
	return z
}

// repeat is n copies of p.
func repeat(p Point, n int) []Point {
	out := make([]Point, n)
	for i := range out {
		out[i] = p
	}
	return out
}

func TestZoneStays(t *testing.T) {
	in, out := Point{200, 200}, Point{200, 50}
	tests := []struct {
		name string
		rule ZoneRule
		path []Point
		want string
	}{
		{"enter then exit", yard, ys(200, 50, 150, 200, 350), "1:enter:1,occ=1 3:exit:1,occ=0,dwell=0.2"},
		{"first sighting inside enters", yard, ys(200, 200), "0:enter:1,occ=1"},
		{"first sighting outside is silent", yard, ys(200, 50, 40), ""},
		{"jitter on the boundary keeps the state", yard, ys(200, 150, 98, 102, 96, 104, 99, 90), "0:enter:1,occ=1 6:exit:1,occ=0,dwell=0.6"},
		{"first sighting in the band waits", yard, ys(200, 103, 150), "1:enter:1,occ=1"},
		{
			"one dwell alert per stay", withDwell(yard, time.Second),
			append(repeat(in, 16), out),
			"0:enter:1,occ=1 10:dwell:1,dwell=1,thr=1 16:exit:1,occ=0,dwell=1.6",
		},
		{
			"a second stay gets its own alert", withDwell(yard, 300*time.Millisecond),
			[]Point{in, in, in, in, out, in, in, in, in},
			"0:enter:1,occ=1 3:dwell:1,dwell=0.3,thr=0.3 4:exit:1,occ=0,dwell=0.4 " +
				"5:enter:1,occ=1 8:dwell:1,dwell=0.3,thr=0.3",
		},
		{"a short stay raises no alert", withDwell(yard, time.Second), []Point{in, in, out}, "0:enter:1,occ=1 2:exit:1,occ=0,dwell=0.2"},
		{"class filter", ZoneRule{Name: "yard", Polygon: yard.Polygon, Classes: []string{"forklift"}}, []Point{out, in, out}, ""},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			s := &script{e: NewEngine(testMeta, nil, []ZoneRule{tc.rule})}
			s.walk(1, "person", tc.path...)
			if got := zdescribe(s.events); got != tc.want {
				t.Errorf("events\n%q\nwant\n%q", got, tc.want)
			}
		})
	}
}

func TestZoneDwellCaughtUpAtExit(t *testing.T) {
	// The track is inside at frame 0, unseen for a while, then seen outside:
	// its stay reached the threshold between frames, so the alert comes
	// right before the exit.
	s := &script{e: NewEngine(testMeta, nil, []ZoneRule{withDwell(yard, time.Second)})}
	s.walk(1, "person", Point{200, 200})
	for range 11 {
		s.step(nil)
	}
	s.walk(1, "person", Point{200, 50})
	want := "0:enter:1,occ=1 12:dwell:1,dwell=1.2,thr=1 12:exit:1,occ=0,dwell=1.2"
	if got := zdescribe(s.events); got != want {
		t.Errorf("events\n%q\nwant\n%q", got, want)
	}
}

func TestZoneEndedTrack(t *testing.T) {
	s := &script{e: NewEngine(testMeta, nil, []ZoneRule{yard})}
	s.step([]track.Track{at(1, "person", Point{200, 200}), at(2, "person", Point{200, 50})})
	s.step([]track.Track{at(1, "person", Point{210, 200}), at(2, "person", Point{210, 50})})
	s.step(nil) // both coasting
	e1 := at(1, "person", Point{210, 200})
	e1.LastSeen = 100 * time.Millisecond
	e2 := at(2, "person", Point{210, 50})
	e2.LastSeen = 100 * time.Millisecond
	s.step(nil, e1, e2)
	want := "0:enter:1,occ=1 3:exit:1,occ=0,dwell=0.1,reason=track_ended"
	if got := zdescribe(s.events); got != want {
		t.Errorf("events\n%q\nwant\n%q", got, want)
	}
	// The ID is free again: the next sighting inside is a new entry.
	s.walk(1, "person", Point{200, 200})
	if got := zdescribe(s.events[2:]); got != "4:enter:1,occ=1" {
		t.Errorf("re-used ID: %q", got)
	}
}

func TestZoneOccupancyIsPerFrame(t *testing.T) {
	s := &script{e: NewEngine(testMeta, nil, []ZoneRule{yard})}
	in, out := Point{200, 200}, Point{200, 50}
	s.step([]track.Track{at(1, "person", out), at(2, "person", in)})
	// Track 1 enters while track 2 leaves: at no time were two inside.
	s.step([]track.Track{at(1, "person", in), at(2, "person", out)})
	if got := s.e.Totals()["yard"].MaxOccupancy; got != 1 {
		t.Errorf("max occupancy %d, want 1", got)
	}
	s.step([]track.Track{at(1, "person", in), at(2, "person", out), at(3, "person", in)})
	want := "0:enter:2,occ=1 1:enter:1,occ=1 1:exit:2,occ=1,dwell=0.1 2:enter:3,occ=2"
	if got := zdescribe(s.events); got != want {
		t.Errorf("events\n%q\nwant\n%q", got, want)
	}
	if got, want := s.e.Totals()["yard"], (Totals{Kind: RuleZone, Enter: 3, Exit: 1, MaxOccupancy: 2}); got != want {
		t.Errorf("totals %+v, want %+v", got, want)
	}
}

func TestCloseAll(t *testing.T) {
	second := withDwell(yard, 150*time.Millisecond)
	second.Name = "yard-2"
	s := &script{e: NewEngine(testMeta, []LineRule{gate}, []ZoneRule{yard, second})}
	in := Point{200, 200}
	s.step([]track.Track{at(5, "person", in), at(2, "person", in)})
	s.step([]track.Track{at(5, "person", in)})
	s.step([]track.Track{at(5, "person", in)})
	evs := s.e.CloseAll(3, 300*time.Millisecond, ReasonStreamEnd)
	// Dwell runs to each track's last sighting: 0.2 s for 5, 0 s for 2;
	// track 5 reached yard-2's 150 ms threshold at frame 2 already.
	want := "3:exit:2,occ=0,dwell=0,reason=stream_end 3:exit:5,occ=0,dwell=0.2,reason=stream_end " +
		"3:exit:2,occ=0,dwell=0,reason=stream_end 3:exit:5,occ=0,dwell=0.2,reason=stream_end"
	if got := zdescribe(evs); got != want {
		t.Errorf("close events\n%q\nwant\n%q", got, want)
	}
	if evs[0].Data.Rule != "yard" || evs[2].Data.Rule != "yard-2" {
		t.Errorf("rule order %q, %q", evs[0].Data.Rule, evs[2].Data.Rule)
	}
	if got := s.e.CloseAll(3, 300*time.Millisecond, ReasonStreamEnd); len(got) != 0 {
		t.Errorf("second CloseAll: %q", zdescribe(got))
	}
	// Everything is forgotten: a track seen again enters again, and a line
	// track starts from scratch.
	s.frame = 4
	got := zdescribe(s.step([]track.Track{at(5, "person", in)}))
	if want := "4:enter:5,occ=1 4:enter:5,occ=1"; got != want {
		t.Errorf("after CloseAll %q, want %q", got, want)
	}
	tot := s.e.Totals()
	if want := (Totals{Kind: RuleZone, Enter: 3, Exit: 2, MaxOccupancy: 2}); tot["yard"] != want {
		t.Errorf("yard totals %+v, want %+v", tot["yard"], want)
	}
	if want := (Totals{Kind: RuleZone, Enter: 3, Exit: 2, Dwell: 1, MaxOccupancy: 2}); tot["yard-2"] != want {
		t.Errorf("yard-2 totals %+v, want %+v", tot["yard-2"], want)
	}
	if want := (Totals{Kind: RuleLine}); tot["gate"] != want {
		t.Errorf("gate totals %+v, want %+v", tot["gate"], want)
	}
}

func TestEngineIsDeterministic(t *testing.T) {
	run := func() string {
		s := &script{e: NewEngine(testMeta, []LineRule{gate}, []ZoneRule{withDwell(yard, 200*time.Millisecond)})}
		for i := range 20 {
			y := 40 + float64(i)*15
			s.step([]track.Track{at(1, "person", Point{150, y}), at(2, "car", Point{250, 340 - y})})
		}
		b, err := json.Marshal(s.events)
		if err != nil {
			t.Fatal(err)
		}
		return string(b)
	}
	a, b := run(), run()
	if a != b || a == "" {
		t.Errorf("two runs differ or are empty:\n%s\n---\n%s", a, b)
	}
}
