package events

import (
	"math"
	"time"

	"tallyd/track"
)

// ZoneRule watches tracks inside a polygon: entries, exits, occupancy and,
// with a DwellThreshold, one alert per stay that lasts that long.
type ZoneRule struct {
	Name    string
	Polygon []Point // simple polygon, vertices in order, closing edge implied
	Classes []string
	Anchor  Anchor
	// BandPx is the hysteresis half-width in pixels: an anchor closer than
	// BandPx to the polygon boundary keeps its previous inside/outside state.
	BandPx         float64
	DwellThreshold time.Duration // 0: no dwell alerts
}

// zoneState is the per-track inside/outside memory of one zone rule.
type zoneState struct {
	rule      ZoneRule
	filter    classFilter
	tracks    map[int64]*zoneTrack
	occupancy int
	totals    Totals
}

// zoneTrack is what a zone rule remembers of one track.
type zoneTrack struct {
	inside    bool
	enterTS   time.Duration
	dwellSent bool
	lastTS    time.Duration // source time the track was last seen
	last      track.Track   // the track as last seen, for closing events
}

func newZoneState(r ZoneRule) *zoneState {
	r.Classes = append([]string(nil), r.Classes...)
	r.Polygon = append([]Point(nil), r.Polygon...)
	return &zoneState{
		rule:   r,
		filter: newClassFilter(r.Classes),
		tracks: make(map[int64]*zoneTrack),
		totals: Totals{Kind: RuleZone},
	}
}

// classify is +1 inside, -1 outside, 0 within BandPx of the boundary.
func (z *zoneState) classify(p Point) int {
	if DistancePolygonBoundary(p, z.rule.Polygon) <= math.Max(z.rule.BandPx, 0) {
		return 0
	}
	if PointInPolygon(p, z.rule.Polygon) {
		return 1
	}
	return -1
}

// step applies one frame. Active and ended tracks are visited together in ID
// order; every enter and exit event of the frame carries the occupancy once
// the whole frame is applied, so that no event reports a count that never
// existed between two frames.
func (z *zoneState) step(e *Engine, frame int64, ts time.Duration, active, ended []track.Track, out []Event) []Event {
	first := len(out)
	i, j := 0, 0
	for i < len(active) || j < len(ended) {
		if j == len(ended) || (i < len(active) && active[i].ID < ended[j].ID) {
			out = z.observe(e, frame, ts, active[i], out)
			i++
			continue
		}
		tr := ended[j]
		j++
		st := z.tracks[tr.ID]
		delete(z.tracks, tr.ID)
		if st != nil && st.inside {
			out = z.exit(e, frame, ts, tr, st, tr.LastSeen, ReasonTrackEnded, out)
		}
	}
	z.totals.MaxOccupancy = max(z.totals.MaxOccupancy, z.occupancy)
	z.stampOccupancy(out[first:])
	return out
}

// observe updates one matched track.
func (z *zoneState) observe(e *Engine, frame int64, ts time.Duration, tr track.Track, out []Event) []Event {
	if !z.filter.match(tr.Class) {
		return out
	}
	c := z.classify(z.rule.Anchor.Point(tr.Box))
	st := z.tracks[tr.ID]
	if st == nil {
		if c == 0 {
			return out // not known until first seen clear of the band
		}
		st = &zoneTrack{}
		z.tracks[tr.ID] = st
	}
	st.last, st.lastTS = tr, ts
	switch {
	case c > 0 && !st.inside:
		st.inside, st.enterTS, st.dwellSent = true, ts, false
		z.occupancy++
		z.totals.Enter++
		out = append(out, e.event(z.rule.Name, KindEnter, tr, frame, ts))
	case c < 0 && st.inside:
		return z.exit(e, frame, ts, tr, st, ts, "", out)
	}
	if st.inside && z.rule.DwellThreshold > 0 && !st.dwellSent && ts-st.enterTS >= z.rule.DwellThreshold {
		out = z.dwell(e, frame, ts, tr, st, ts-st.enterTS, out)
	}
	return out
}

// exit closes a stay that lasted until `until`. A stay that reached the
// threshold between two frames gets its dwell alert first, so that every
// stay as long as the threshold yields exactly one alert.
func (z *zoneState) exit(e *Engine, frame int64, ts time.Duration, tr track.Track, st *zoneTrack, until time.Duration, reason Reason, out []Event) []Event {
	d := max(until-st.enterTS, 0)
	if z.rule.DwellThreshold > 0 && !st.dwellSent && d >= z.rule.DwellThreshold {
		out = z.dwell(e, frame, ts, tr, st, d, out)
	}
	st.inside = false
	z.occupancy--
	z.totals.Exit++
	ev := e.event(z.rule.Name, KindExit, tr, frame, ts)
	ev.Data.DwellS = seconds(d)
	ev.Data.Reason = reason
	return append(out, ev)
}

// dwell emits the stay's one dwell alert.
func (z *zoneState) dwell(e *Engine, frame int64, ts time.Duration, tr track.Track, st *zoneTrack, d time.Duration, out []Event) []Event {
	st.dwellSent = true
	z.totals.Dwell++
	ev := e.event(z.rule.Name, KindDwell, tr, frame, ts)
	ev.Data.DwellS = seconds(d)
	ev.Data.ThresholdS = seconds(z.rule.DwellThreshold)
	return append(out, ev)
}

// closeAll exits every track inside, in ID order, and forgets all tracks.
func (z *zoneState) closeAll(e *Engine, frame int64, ts time.Duration, reason Reason, out []Event) []Event {
	first := len(out)
	for _, id := range sortedKeys(z.tracks) {
		st := z.tracks[id]
		if st.inside {
			out = z.exit(e, frame, ts, st.last, st, st.lastTS, reason, out)
		}
	}
	clear(z.tracks)
	z.occupancy = 0
	z.stampOccupancy(out[first:])
	return out
}

// stampOccupancy sets the current occupancy on the enter and exit events.
func (z *zoneState) stampOccupancy(evs []Event) {
	for i := range evs {
		if k := evs[i].Data.Kind; k == KindEnter || k == KindExit {
			n := z.occupancy
			evs[i].Data.Occupancy = &n
		}
	}
}
