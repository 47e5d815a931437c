package events

import (
	"fmt"
	"reflect"
	"strings"
	"testing"
	"time"

	"tallyd/detect"
	"tallyd/track"
)

var testMeta = Meta{Site: "depot", Source: "gate-1", Start: time.Date(2025, 3, 1, 8, 0, 0, 0, time.UTC)}

// at is a confirmed track whose bottom-center anchor is p.
func at(id int64, class string, p Point) track.Track {
	return track.Track{ID: id, Class: class, Confirmed: true, Box: detect.Box{X1: p.X - 5, Y1: p.Y - 20, X2: p.X + 5, Y2: p.Y}}
}

// script feeds one frame per step, 100 ms apart, and keeps the events.
type script struct {
	e      *Engine
	frame  int64
	events []Event
}

func (s *script) step(active []track.Track, ended ...track.Track) []Event {
	ts := time.Duration(s.frame) * 100 * time.Millisecond
	for i := range ended {
		if ended[i].LastSeen == 0 {
			ended[i].LastSeen = ts - 100*time.Millisecond
		}
	}
	evs := s.e.Step(s.frame, ts, track.Result{Active: active, Ended: ended})
	s.frame++
	s.events = append(s.events, evs...)
	return evs
}

func (s *script) walk(id int64, class string, pts ...Point) {
	for _, p := range pts {
		s.step([]track.Track{at(id, class, p)})
	}
}

// describe is a compact form of events: "frame:rule:kind:track ...".
func describe(evs []Event) string {
	var parts []string
	for _, e := range evs {
		parts = append(parts, fmt.Sprintf("%d:%s:%s:%d", e.Data.Frame, e.Data.Rule, e.Data.Kind, e.Data.TrackID))
	}
	return strings.Join(parts, " ")
}

// ys is a vertical walk at x.
func ys(x float64, y ...float64) []Point {
	out := make([]Point, len(y))
	for i := range y {
		out[i] = Point{x, y[i]}
	}
	return out
}

// gate runs left to right on screen at y=100; "in" is downwards.
var gate = LineRule{Name: "gate", A: Point{0, 100}, B: Point{200, 100}, BandPx: 5}

func TestLineCrossings(t *testing.T) {
	tests := []struct {
		name string
		rule LineRule
		path []Point
		want string
	}{
		{"down is in", gate, ys(50, 50, 90, 110, 150), "2:gate:in:1"},
		{"up is out", gate, ys(50, 150, 110, 90, 50), "2:gate:out:1"},
		{"counted when clear of the band", gate, ys(50, 50, 97, 103, 104, 106), "4:gate:in:1"},
		{"jitter inside the band never counts", gate, ys(50, 80, 98, 102, 97, 103, 99, 101, 96, 104), ""},
		{"jitter after a crossing does not double count", gate, ys(50, 80, 120, 98, 102, 97, 103, 130), "1:gate:in:1"},
		{"real back and forth counts each way", gate, ys(50, 80, 120, 80, 120), "1:gate:in:1 2:gate:out:1 3:gate:in:1"},
		{"first sighting only sets the side", gate, ys(50, 150, 200, 250), ""},
		{"first sighting in the band sets nothing", gate, ys(50, 101, 150), ""},
		{"a touch of the line and back", gate, ys(50, 50, 100, 50), ""},
		{
			"around the end does not count, back through it does", gate,
			[]Point{{250, 50}, {250, 150}, {100, 150}, {100, 50}},
			"3:gate:out:1",
		},
		{
			"through an end point counts", gate,
			[]Point{{190, 90}, {210, 110}},
			"1:gate:in:1",
		},
		{
			"center anchor", LineRule{Name: "gate", A: gate.A, B: gate.B, Anchor: AnchorCenter},
			ys(50, 105, 115), "1:gate:in:1", // centers at 95 and 105
		},
		{
			"top-center anchor", LineRule{Name: "gate", A: gate.A, B: gate.B, Anchor: AnchorTopCenter},
			ys(50, 115, 125), "1:gate:in:1", // tops at 95 and 105
		},
		{"class filter keeps out others", LineRule{Name: "gate", A: gate.A, B: gate.B, Classes: []string{"car"}}, ys(50, 50, 150), ""},
		{"degenerate line never counts", LineRule{Name: "gate", A: Point{5, 5}, B: Point{5, 5}}, ys(5, 0, 10), ""},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			s := &script{e: NewEngine(testMeta, []LineRule{tc.rule}, nil)}
			s.walk(1, "person", tc.path...)
			if got := describe(s.events); got != tc.want {
				t.Errorf("events %q, want %q", got, tc.want)
			}
		})
	}
}

func TestLineClassFilterAndTotals(t *testing.T) {
	rule := gate
	rule.Classes = []string{"car", "truck"}
	s := &script{e: NewEngine(testMeta, []LineRule{rule}, nil)}
	s.step([]track.Track{at(1, "person", Point{50, 50}), at(2, "car", Point{60, 50}), at(3, "truck", Point{70, 150})})
	s.step([]track.Track{at(1, "person", Point{50, 150}), at(2, "car", Point{60, 150}), at(3, "truck", Point{70, 50})})
	if got, want := describe(s.events), "1:gate:in:2 1:gate:out:3"; got != want {
		t.Errorf("events %q, want %q", got, want)
	}
	if got, want := s.e.Totals()["gate"], (Totals{Kind: RuleLine, In: 1, Out: 1}); got != want {
		t.Errorf("totals %+v, want %+v", got, want)
	}
}

func TestLineEndedTracksAreForgotten(t *testing.T) {
	s := &script{e: NewEngine(testMeta, []LineRule{gate}, nil)}
	s.walk(1, "person", Point{50, 50})
	s.step(nil, at(1, "person", Point{50, 50}))
	// The same ID coming back below the line is a new track: no crossing.
	s.walk(1, "person", Point{50, 150}, Point{50, 200})
	if got := describe(s.events); got != "" {
		t.Errorf("events %q, want none", got)
	}
}

func TestLineIgnoresUnconfirmed(t *testing.T) {
	s := &script{e: NewEngine(testMeta, []LineRule{gate}, nil)}
	tr := at(1, "person", Point{50, 50})
	tr.Confirmed = false
	s.step([]track.Track{tr})
	tr.Box = at(1, "person", Point{50, 150}).Box
	s.step([]track.Track{tr})
	if got := describe(s.events); got != "" {
		t.Errorf("events %q, want none", got)
	}
}

func TestEventOrderRuleThenTrack(t *testing.T) {
	second := gate
	second.Name = "gate-2"
	s := &script{e: NewEngine(testMeta, []LineRule{gate, second}, nil)}
	// Tracks given out of ID order on purpose.
	s.step([]track.Track{at(7, "person", Point{20, 50}), at(3, "person", Point{10, 50})})
	got := describe(s.step([]track.Track{at(7, "person", Point{20, 150}), at(3, "person", Point{10, 150})}))
	if want := "1:gate:in:3 1:gate:in:7 1:gate-2:in:3 1:gate-2:in:7"; got != want {
		t.Errorf("order %q, want %q", got, want)
	}
}

func TestLineEventFields(t *testing.T) {
	s := &script{e: NewEngine(testMeta, []LineRule{gate}, nil)}
	s.walk(4, "person", Point{50, 50}, Point{50, 150})
	if len(s.events) != 1 {
		t.Fatalf("got %d events, want 1", len(s.events))
	}
	ev := s.events[0]
	want := Event{
		SpecVersion:     "1.0",
		ID:              EventID("depot", "gate-1", "gate", "in", 4, 1, ""),
		Source:          "/tallyd/depot/gate-1",
		Type:            "tallyd.line.in",
		Subject:         "gate",
		Time:            testMeta.Start.Add(100 * time.Millisecond),
		DataContentType: "application/json",
		Data: Data{
			Site: "depot", Source: "gate-1", Rule: "gate", Kind: "in", TrackID: 4, Class: "person",
			SourceTime: 0.1, Frame: 1, Box: &[4]float64{45, 130, 55, 150},
		},
	}
	if !reflect.DeepEqual(ev, want) {
		t.Errorf("event\n%+v\nwant\n%+v", ev, want)
	}
	if got := ev.NATSSubject("tallyd.events"); got != "tallyd.events.depot.gate-1.gate.in" {
		t.Errorf("subject %q", got)
	}
}

func TestAnchorValidate(t *testing.T) {
	tests := []struct {
		a    Anchor
		want string
	}{
		{"", ""},
		{"bottom-center", ""},
		{"center", ""},
		{"top-center", ""},
		{"feet", `unknown anchor "feet" (want "bottom-center", "center" or "top-center")`},
	}
	for _, tc := range tests {
		got := ""
		if err := tc.a.Validate(); err != nil {
			got = err.Error()
		}
		if got != tc.want {
			t.Errorf("Validate(%q) = %q, want %q", tc.a, got, tc.want)
		}
	}
	b := detect.Box{X1: 10, Y1: 20, X2: 30, Y2: 60}
	for a, want := range map[Anchor]Point{"": {20, 60}, AnchorBottomCenter: {20, 60}, AnchorCenter: {20, 40}, AnchorTopCenter: {20, 20}, "feet": {20, 60}} {
		if got := a.Point(b); got != want {
			t.Errorf("%q.Point = %v, want %v", a, got, want)
		}
	}
}
