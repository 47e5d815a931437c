package events

import (
	"math"
	"time"

	"tallyd/track"
)

// LineRule counts tracks crossing the segment A-B. With image coordinates
// (y down), a track going from the left-hand side of A→B, as drawn on screen,
// to its right-hand side crosses "in"; the reverse is "out".
type LineRule struct {
	Name    string
	A, B    Point
	Classes []string // empty: all classes
	Anchor  Anchor
	// BandPx is the hysteresis half-width in pixels: an anchor closer than
	// BandPx to the line through A and B keeps the side it had before.
	BandPx float64
}

// lineState is the per-track side memory of one line rule.
type lineState struct {
	rule   LineRule
	filter classFilter
	length float64
	tracks map[int64]*lineTrack
	totals Totals
}

// lineTrack is what a line rule remembers of one track.
type lineTrack struct {
	side  int   // -1 left, +1 right of A→B on screen
	clear Point // last anchor position seen clear of the band on that side
}

func newLineState(r LineRule) *lineState {
	r.Classes = append([]string(nil), r.Classes...)
	return &lineState{
		rule:   r,
		filter: newClassFilter(r.Classes),
		length: math.Hypot(r.B.X-r.A.X, r.B.Y-r.A.Y),
		tracks: make(map[int64]*lineTrack),
		totals: Totals{Kind: RuleLine},
	}
}

// side is +1 or -1 when p is farther than BandPx from the line, else 0. A
// degenerate line (A == B) has no sides.
func (l *lineState) side(p Point) int {
	if l.length == 0 {
		return 0
	}
	d := Cross(l.rule.A, l.rule.B, p) / l.length
	if math.Abs(d) <= math.Max(l.rule.BandPx, 0) {
		return 0
	}
	return sign(d)
}

// step applies one frame: a confirmed side flip counts when the move from
// the last clear position to the current one meets the segment A-B, so going
// around an end of the line does not count.
func (l *lineState) step(e *Engine, frame int64, ts time.Duration, active, ended []track.Track, out []Event) []Event {
	for _, tr := range active {
		if !l.filter.match(tr.Class) {
			continue
		}
		p := l.rule.Anchor.Point(tr.Box)
		s := l.side(p)
		if s == 0 {
			continue // inside the band: keep whatever side we had
		}
		st := l.tracks[tr.ID]
		if st == nil {
			l.tracks[tr.ID] = &lineTrack{side: s, clear: p}
			continue // first clear sighting only sets the side
		}
		if s == st.side {
			st.clear = p
			continue
		}
		crossed := SegmentsIntersect(st.clear, p, l.rule.A, l.rule.B)
		st.side, st.clear = s, p
		if !crossed {
			continue
		}
		kind := KindOut
		if s > 0 {
			kind = KindIn
			l.totals.In++
		} else {
			l.totals.Out++
		}
		out = append(out, e.event(l.rule.Name, kind, tr, frame, ts))
	}
	for _, tr := range ended {
		delete(l.tracks, tr.ID)
	}
	return out
}
