package events

import (
	"cmp"
	"errors"
	"fmt"
	"maps"
	"math"
	"slices"
	"time"

	"tallyd/detect"
	"tallyd/track"
)

// Anchor names the point of a track's box that rules test.
type Anchor string

// Anchors. The empty Anchor means AnchorBottomCenter, where a walking person
// or a vehicle touches the ground.
const (
	AnchorBottomCenter Anchor = "bottom-center"
	AnchorCenter       Anchor = "center"
	AnchorTopCenter    Anchor = "top-center"
)

// Anchors lists the anchors, the default first.
var Anchors = []Anchor{AnchorBottomCenter, AnchorCenter, AnchorTopCenter}

// ErrUnknownAnchor is returned by Anchor.Validate for a name it does not know.
var ErrUnknownAnchor = errors.New("unknown anchor")

// Validate reports whether the anchor is one of the known names or empty.
func (a Anchor) Validate() error {
	switch a {
	case "", AnchorBottomCenter, AnchorCenter, AnchorTopCenter:
		return nil
	}
	return fmt.Errorf("%w %q (want %q, %q or %q)", ErrUnknownAnchor, string(a),
		AnchorBottomCenter, AnchorCenter, AnchorTopCenter)
}

// Point is the anchor point of box b. An unknown anchor falls back to the
// default, bottom-center; configuration validation rejects it earlier.
func (a Anchor) Point(b detect.Box) Point {
	x := (b.X1 + b.X2) / 2
	switch a {
	case AnchorCenter:
		return Point{x, (b.Y1 + b.Y2) / 2}
	case AnchorTopCenter:
		return Point{x, b.Y1}
	}
	return Point{x, b.Y2}
}

// Meta identifies where events come from and anchors source timestamps to
// wall-clock time.
type Meta struct {
	Site, Source string
	Start        time.Time // event time = Start + source timestamp
	// Run identifies this run of a live source in event ids (see EventID);
	// "" for recorded sources.
	Run string
}

// Engine applies the line and zone rules of one source to the tracker's
// output, frame after frame. It is owned by one goroutine (the source's
// worker) and is not safe for concurrent use.
type Engine struct {
	meta      Meta
	lines     []*lineState
	zones     []*zoneState
	intervals *intervals // nil: no interval totals
}

// NewEngine builds the engine for one source. Rules are copied; their order
// is the order of the events each Step returns. Rule names are expected to be
// unique (configuration validation checks it); Totals keys on them.
func NewEngine(meta Meta, lines []LineRule, zones []ZoneRule) *Engine {
	e := &Engine{meta: meta}
	for _, r := range lines {
		e.lines = append(e.lines, newLineState(r))
	}
	for _, r := range zones {
		e.zones = append(e.zones, newZoneState(r))
	}
	return e
}

// Step feeds the tracker result of one frame and returns the events it
// caused, ordered by rule (lines in configuration order, then zones), then
// by track ID. Unconfirmed tracks are ignored.
// With intervals, the totals of every interval that ended before this frame
// come first.
func (e *Engine) Step(frame int64, ts time.Duration, res track.Result) []Event {
	active := byID(res.Active, true)
	ended := byID(res.Ended, false)
	var out []Event
	if e.intervals != nil {
		out = e.intervals.roll(e, frame, ts, out)
	}
	first := len(out)
	for _, l := range e.lines {
		out = l.step(e, frame, ts, active, ended, out)
	}
	for _, z := range e.zones {
		out = z.step(e, frame, ts, active, ended, out)
	}
	if e.intervals != nil {
		e.intervals.count(e, out[first:])
	}
	return out
}

// CloseAll closes every open zone stay with an exit carrying reason (for
// example ReasonStreamEnd or ReasonSourceLost) and forgets all tracks, so
// that a restarted tracker can reuse IDs. Each stay's dwell runs to the last
// frame its track was seen.
func (e *Engine) CloseAll(frame int64, ts time.Duration, reason Reason) []Event {
	var out []Event
	for _, l := range e.lines {
		clear(l.tracks)
	}
	for _, z := range e.zones {
		out = z.closeAll(e, frame, ts, reason, out)
	}
	if e.intervals != nil {
		e.intervals.count(e, out)
	}
	return out
}

// Totals returns a copy of the per-rule totals, keyed by rule name.
func (e *Engine) Totals() map[string]Totals {
	m := make(map[string]Totals, len(e.lines)+len(e.zones))
	for _, l := range e.lines {
		m[l.rule.Name] = l.totals
	}
	for _, z := range e.zones {
		m[z.rule.Name] = z.totals
	}
	return m
}

// Occupancy returns each zone's tracks inside now, keyed by rule name.
func (e *Engine) Occupancy() map[string]int {
	m := make(map[string]int, len(e.zones))
	for _, z := range e.zones {
		m[z.rule.Name] = z.occupancy
	}
	return m
}

// event builds one event of the engine's source.
func (e *Engine) event(rule string, kind Kind, tr track.Track, frame int64, ts time.Duration) Event {
	b := tr.Box
	return Event{
		SpecVersion:     SpecVersion,
		ID:              EventID(e.meta.Site, e.meta.Source, rule, kind, tr.ID, frame, e.meta.Run),
		Source:          EventSource(e.meta.Site, e.meta.Source),
		Type:            typeOfKind[kind],
		Subject:         rule,
		Time:            e.meta.Start.Add(ts).UTC().Round(time.Millisecond),
		DataContentType: ContentType,
		Data: Data{
			Site:       e.meta.Site,
			Source:     e.meta.Source,
			Rule:       rule,
			Kind:       kind,
			TrackID:    tr.ID,
			Class:      tr.Class,
			SourceTime: *seconds(ts),
			Frame:      frame,
			Box:        &[4]float64{round1(b.X1), round1(b.Y1), round1(b.X2), round1(b.Y2)},
		},
	}
}

// byID returns the tracks ordered by ID, keeping only confirmed ones when
// confirmedOnly is set. The tracker already sorts them; the copy is made
// only when needed.
func byID(ts []track.Track, confirmedOnly bool) []track.Track {
	ok := slices.IsSortedFunc(ts, func(a, b track.Track) int { return cmp.Compare(a.ID, b.ID) })
	if ok && confirmedOnly {
		for i := range ts {
			if !ts[i].Confirmed {
				ok = false
				break
			}
		}
	}
	if ok {
		return ts
	}
	out := make([]track.Track, 0, len(ts))
	for _, t := range ts {
		if t.Confirmed || !confirmedOnly {
			out = append(out, t)
		}
	}
	slices.SortStableFunc(out, func(a, b track.Track) int { return cmp.Compare(a.ID, b.ID) })
	return out
}

// classFilter matches track classes against a rule's list; empty matches all.
type classFilter map[string]bool

func newClassFilter(classes []string) classFilter {
	if len(classes) == 0 {
		return nil
	}
	f := make(classFilter, len(classes))
	for _, c := range classes {
		f[c] = true
	}
	return f
}

func (f classFilter) match(class string) bool { return f == nil || f[class] }

// sortedKeys is the track IDs of a state map in increasing order.
func sortedKeys[V any](m map[int64]V) []int64 {
	return slices.Sorted(maps.Keys(m))
}

// seconds converts a duration to a freshly allocated float64 of seconds,
// rounded to the millisecond: events carry times a reader can take in, not
// binary fractions such as 42.773999999.
func seconds(d time.Duration) *float64 {
	s := d.Round(time.Millisecond).Seconds()
	return &s
}

// round1 rounds a pixel coordinate to a tenth of a pixel, finer than any
// detector's box and short to read.
func round1(v float64) float64 { return math.Round(v*10) / 10 }
