package overlay

import (
	"math"
	"testing"

	"gocv.io/x/gocv"

	"tallyd/detect"
	"tallyd/events"
	"tallyd/track"
)

// TestInArrow: the arrow points to the right-hand side of A→B on screen (y
// down), the side a track crossing "in" arrives on (events.LineRule).
func TestInArrow(t *testing.T) {
	for _, c := range []struct {
		name   string
		a, b   events.Point
		dx, dy float64 // unit direction wanted
	}{
		{"left to right points down", events.Point{X: 0, Y: 50}, events.Point{X: 100, Y: 50}, 0, 1},
		{"right to left points up", events.Point{X: 100, Y: 50}, events.Point{X: 0, Y: 50}, 0, -1},
		{"top to bottom points left", events.Point{X: 50, Y: 0}, events.Point{X: 50, Y: 100}, -1, 0},
		{"diagonal", events.Point{X: 0, Y: 0}, events.Point{X: 100, Y: 100}, -math.Sqrt2 / 2, math.Sqrt2 / 2},
	} {
		t.Run(c.name, func(t *testing.T) {
			from, to := InArrow(events.LineRule{A: c.a, B: c.b}, 10)
			if from.X != (c.a.X+c.b.X)/2 || from.Y != (c.a.Y+c.b.Y)/2 {
				t.Errorf("arrow starts at %v, not the middle", from)
			}
			if dx, dy := (to.X-from.X)/10, (to.Y-from.Y)/10; math.Abs(dx-c.dx) > 1e-9 || math.Abs(dy-c.dy) > 1e-9 {
				t.Errorf("direction (%.3f, %.3f), want (%.3f, %.3f)", dx, dy, c.dx, c.dy)
			}
		})
	}
}

// TestDrawLeavesNoMat draws everything on a frame; the matprofile build
// counts the Mats left open.
func TestDrawLeavesNoMat(t *testing.T) {
	before := gocv.MatProfile.Count()
	img := gocv.NewMatWithSize(360, 640, gocv.MatTypeCV8UC3)
	Draw(&img, View{
		Lines:  []events.LineRule{{Name: "gate", A: events.Point{X: 96, Y: 198}, B: events.Point{X: 544, Y: 198}}},
		Zones:  []events.ZoneRule{{Name: "machines", Polygon: []events.Point{{X: 10, Y: 30}, {X: 170, Y: 30}, {X: 170, Y: 160}}}},
		Active: []track.Track{{ID: 7, Box: detect.Box{X1: 300, Y1: 100, X2: 320, Y2: 150}}},
		Totals: map[string]events.Totals{"gate": {Kind: events.RuleLine, In: 3, Out: 1}, "machines": {Kind: events.RuleZone, Enter: 2}},
	})
	if got := CountLines(View{Totals: map[string]events.Totals{"gate": {Kind: events.RuleLine, In: 3, Out: 1}}}); len(got) != 1 || got[0] != "gate in 3 out 1" {
		t.Errorf("count lines %q", got)
	}
	img.Close()
	if after := gocv.MatProfile.Count(); after != before {
		t.Errorf("%d Mats left open", after-before)
	}
}
