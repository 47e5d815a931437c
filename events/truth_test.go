package events

import (
	"testing"
	"time"

	"tallyd/detect"
)

// obj is a truth object whose bottom-center anchor is p.
func obj(id int64, class string, p Point) TruthObject {
	return TruthObject{ID: id, Class: class, Box: detect.Box{X1: p.X - 5, Y1: p.Y - 20, X2: p.X + 5, Y2: p.Y}}
}

// frames builds one frame per row, 100 ms apart.
func frames(rows ...[]TruthObject) []TruthFrame {
	out := make([]TruthFrame, len(rows))
	for i, r := range rows {
		out[i] = TruthFrame{TS: time.Duration(i) * 100 * time.Millisecond, Objects: r}
	}
	return out
}

// path is one object walking through pts, one frame each.
func path(id int64, class string, pts ...Point) []TruthFrame {
	rows := make([][]TruthObject, len(pts))
	for i, p := range pts {
		rows[i] = []TruthObject{obj(id, class, p)}
	}
	return frames(rows...)
}

func TestTruthLines(t *testing.T) {
	line := LineRule{Name: "gate", A: Point{0, 100}, B: Point{200, 100}}
	tests := []struct {
		name    string
		frames  []TruthFrame
		in, out int
	}{
		{"straight down", path(1, "person", ys(50, 50, 150)...), 1, 0},
		{"down and back up", path(1, "person", ys(50, 50, 150, 60)...), 1, 1},
		{"touches the line and returns", path(1, "person", ys(50, 50, 100, 50)...), 0, 0},
		{"stops on the line then goes on", path(1, "person", ys(50, 50, 100, 100, 150)...), 1, 0},
		{"around the end", path(1, "person", Point{250, 50}, Point{250, 150}), 0, 0},
		{"around the end and back through", path(1, "person", Point{250, 50}, Point{250, 150}, Point{100, 150}, Point{100, 50}), 0, 1},
		{"stops on the line beyond the end", path(1, "person", Point{250, 50}, Point{250, 100}, Point{150, 150}), 0, 0},
		{"stops on the segment, leaves beyond it", path(1, "person", Point{190, 50}, Point{190, 100}, Point{250, 150}), 1, 0},
		{"two objects", frames(
			[]TruthObject{obj(1, "person", Point{10, 50}), obj(2, "person", Point{20, 150})},
			[]TruthObject{obj(1, "person", Point{10, 150}), obj(2, "person", Point{20, 50})},
		), 1, 1},
		{"object seen with a gap", frames(
			[]TruthObject{obj(1, "person", Point{10, 50})},
			nil,
			[]TruthObject{obj(1, "person", Point{10, 150})},
		), 1, 0},
		{"class filter", path(1, "dog", ys(50, 50, 150)...), 0, 0},
	}
	for _, tc := range tests {
		rule := line
		if tc.name == "class filter" {
			rule.Classes = []string{"person"}
		}
		got := TruthTotals([]LineRule{rule}, nil, tc.frames)["gate"]
		if want := (Totals{Kind: RuleLine, In: tc.in, Out: tc.out}); got != want {
			t.Errorf("%s: %+v, want %+v", tc.name, got, want)
		}
	}
}

func TestTruthZones(t *testing.T) {
	zone := ZoneRule{Name: "yard", Polygon: yard.Polygon, DwellThreshold: 300 * time.Millisecond}
	in, out := Point{200, 200}, Point{200, 50}
	tests := []struct {
		name   string
		frames []TruthFrame
		want   Totals
	}{
		{"enter and leave", path(1, "person", out, in, in, out), Totals{Enter: 1, Exit: 1, MaxOccupancy: 1}},
		// Stay from 0.1 s to the first frame outside at 0.4 s: 0.3 s.
		{"long enough stay", path(1, "person", out, in, in, in, out), Totals{Enter: 1, Exit: 1, Dwell: 1, MaxOccupancy: 1}},
		// Seen inside from the first frame and never leaving: the stay closes
		// at its last sighting, 0.3 s after the first.
		{"disappears inside", path(1, "person", in, in, in, in), Totals{Enter: 1, Exit: 1, Dwell: 1, MaxOccupancy: 1}},
		{"disappears inside early", path(1, "person", in, in, in), Totals{Enter: 1, Exit: 1, MaxOccupancy: 1}},
		{"two stays", path(1, "person", in, out, in, out), Totals{Enter: 2, Exit: 2, MaxOccupancy: 1}},
		{"never inside", path(1, "person", out, out), Totals{}},
		{"two inside together", frames(
			[]TruthObject{obj(1, "person", in)},
			[]TruthObject{obj(1, "person", in), obj(2, "person", in)},
			[]TruthObject{obj(2, "person", out)},
		), Totals{Enter: 2, Exit: 2, MaxOccupancy: 2}},
		{"hand-over in one frame", frames(
			[]TruthObject{obj(1, "person", out), obj(2, "person", in)},
			[]TruthObject{obj(1, "person", in), obj(2, "person", out)},
		), Totals{Enter: 2, Exit: 2, MaxOccupancy: 1}},
	}
	for _, tc := range tests {
		tc.want.Kind = RuleZone
		if got := TruthTotals(nil, []ZoneRule{zone}, tc.frames)["yard"]; got != tc.want {
			t.Errorf("%s: %+v, want %+v", tc.name, got, tc.want)
		}
	}
}
