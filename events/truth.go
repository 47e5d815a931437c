package events

import (
	"time"

	"tallyd/detect"
)

// TruthObject is one annotated object in one frame of a ground-truth
// sequence; ID is the true identity.
type TruthObject struct {
	ID    int64
	Class string
	Box   detect.Box
}

// TruthFrame is one annotated frame.
type TruthFrame struct {
	TS      time.Duration
	Objects []TruthObject
}

// TruthTotals computes what the rules should count on a ground-truth
// sequence, from perfect identities and plain geometry with no hysteresis.
// Frames are taken in the order given (increasing TS).
//
// Lines: each object's anchor path through the frames it is visible in
// crosses when its side of the line changes (points exactly on the line keep
// the previous side) and the path between the two sightings meets the
// segment A-B; the side it ends on gives the direction.
//
// Zones: an object is inside when PointInPolygon holds for its anchor. An
// entry is an outside→inside change, the first sighting included; an exit is
// an inside→outside change or the object's last sighting while inside. A
// stay lasts from its first frame inside to its first frame outside, or to
// the object's last sighting; stays at least DwellThreshold long (when set)
// count as dwell alerts. Max occupancy is the largest count inside in one
// frame.
func TruthTotals(lines []LineRule, zones []ZoneRule, frames []TruthFrame) map[string]Totals {
	out := make(map[string]Totals, len(lines)+len(zones))
	for _, r := range lines {
		out[r.Name] = truthLine(r, frames)
	}
	for _, r := range zones {
		out[r.Name] = truthZone(r, frames)
	}
	return out
}

func truthLine(r LineRule, frames []TruthFrame) Totals {
	t := Totals{Kind: RuleLine}
	if r.A == r.B {
		return t
	}
	f := newClassFilter(r.Classes)
	type walk struct {
		path []Point // sightings since the last point clear of the line
		side int
	}
	walks := map[int64]*walk{}
	for _, fr := range frames {
		for _, o := range fr.Objects {
			if !f.match(o.Class) {
				continue
			}
			p := r.Anchor.Point(o.Box)
			w := walks[o.ID]
			if w == nil {
				w = &walk{}
				walks[o.ID] = w
			}
			w.path = append(w.path, p)
			s := sign(Cross(r.A, r.B, p))
			if s == 0 {
				continue
			}
			if w.side != 0 && s != w.side && pathMeets(w.path, r.A, r.B) {
				if s > 0 {
					t.In++
				} else {
					t.Out++
				}
			}
			w.side = s
			w.path = append(w.path[:0], p)
		}
	}
	return t
}

// pathMeets reports whether any step of the polyline meets segment a-b.
func pathMeets(path []Point, a, b Point) bool {
	for i := 1; i < len(path); i++ {
		if SegmentsIntersect(path[i-1], path[i], a, b) {
			return true
		}
	}
	return false
}

func truthZone(r ZoneRule, frames []TruthFrame) Totals {
	t := Totals{Kind: RuleZone}
	f := newClassFilter(r.Classes)
	last := map[int64]int{} // object ID → index of its last frame
	for i, fr := range frames {
		for _, o := range fr.Objects {
			if f.match(o.Class) {
				last[o.ID] = i
			}
		}
	}
	type stay struct {
		inside bool
		enter  time.Duration
	}
	stays := map[int64]*stay{}
	closeStay := func(enter, end time.Duration) {
		t.Exit++
		if r.DwellThreshold > 0 && end-enter >= r.DwellThreshold {
			t.Dwell++
		}
	}
	for i, fr := range frames {
		n := 0
		for _, o := range fr.Objects {
			if !f.match(o.Class) {
				continue
			}
			st := stays[o.ID]
			if st == nil {
				st = &stay{}
				stays[o.ID] = st
			}
			in := PointInPolygon(r.Anchor.Point(o.Box), r.Polygon)
			switch {
			case in && !st.inside:
				st.inside, st.enter = true, fr.TS
				t.Enter++
			case !in && st.inside:
				st.inside = false
				closeStay(st.enter, fr.TS)
			}
			if in {
				n++
				if last[o.ID] == i {
					st.inside = false
					closeStay(st.enter, fr.TS)
				}
			}
		}
		t.MaxOccupancy = max(t.MaxOccupancy, n)
	}
	return t
}
