package events

import (
	"cmp"
	"slices"
	"time"
)

// IntervalConfig asks an engine for one totals event per rule every Every:
// the counts of that interval, the day's so far and, for zones, the
// occupancy's range. Intervals are aligned to midnight in Zone (a 15-minute
// interval ends at :00, :15, :30, :45) on the clock of the events
// (Meta.Start + source time: the wall clock for live sources, the recording's
// own time for recorded ones). Days start at midnight in Zone.
type IntervalConfig struct {
	Every time.Duration // 0: no interval totals
	Zone  *time.Location
}

// Interval is the payload of a totals event.
type Interval struct {
	Start time.Time `json:"start"`
	End   time.Time `json:"end"`
	// Partial is set when the stream started or stopped inside the
	// interval: the counts cover only part of it.
	Partial bool `json:"partial,omitempty"`
	// Counts are the rule's counts within the interval (for zones,
	// MaxOccupancy is the interval's highest).
	Counts Totals `json:"counts"`
	// Day are the counts since midnight in the configured zone, this
	// interval included; DayOf is that day (YYYY-MM-DD).
	Day   Totals `json:"day"`
	DayOf string `json:"day_of"`
	// Occupancy is a zone's occupancy over the interval.
	Occupancy *OccupancyRange `json:"occupancy,omitempty"`
}

// OccupancyRange is a zone's lowest and highest occupancy over an interval
// and its value at the interval's end.
type OccupancyRange struct {
	Min int `json:"min"`
	Max int `json:"max"`
	Now int `json:"now"`
}

// RuleState is what an engine carries over for one rule when it is rebuilt
// or the daemon restarts: the running totals and the day's counts. It is
// also the live state a dashboard reads.
type RuleState struct {
	Totals    Totals    `json:"totals"`
	Day       *Totals   `json:"day,omitempty"` // with interval totals only
	DayOf     string    `json:"day_of,omitempty"`
	Occupancy int       `json:"occupancy"` // zones: tracks inside now
	At        time.Time `json:"at"`        // event time of the state
	// Open lists a zone's stays open at At, ordered by track id, so that
	// the daemon taking the source over can close them (see Inherit).
	Open []OpenStay `json:"open,omitempty"`
}

// OpenStay is one track inside a zone.
type OpenStay struct {
	Track int64     `json:"track"`
	Class string    `json:"class,omitempty"`
	Since time.Time `json:"since"` // event time of the enter
}

// intervals is an engine's interval bookkeeping.
type intervals struct {
	cfg        IntervalConfig
	start, end time.Time // the current interval; zero until the first frame
	partial    bool      // the current interval began after its start
	rules      map[string]*ruleInterval
	order      []string // rule names, lines then zones, in configuration order
}

// ruleInterval is one rule's counts in the current interval and day.
type ruleInterval struct {
	kind           RuleKind
	zone           *zoneState // nil for lines
	counts, day    Totals
	dayOf          string
	occMin, occMax int
}

// SetIntervals turns on interval totals; call it before the first Step.
func (e *Engine) SetIntervals(c IntervalConfig) {
	if c.Every <= 0 {
		e.intervals = nil
		return
	}
	if c.Zone == nil {
		c.Zone = time.UTC
	}
	iv := &intervals{cfg: c, rules: map[string]*ruleInterval{}}
	for _, l := range e.lines {
		iv.rules[l.rule.Name] = &ruleInterval{kind: RuleLine, counts: Totals{Kind: RuleLine}, day: Totals{Kind: RuleLine}}
		iv.order = append(iv.order, l.rule.Name)
	}
	for _, z := range e.zones {
		iv.rules[z.rule.Name] = &ruleInterval{kind: RuleZone, zone: z, counts: Totals{Kind: RuleZone}, day: Totals{Kind: RuleZone}}
		iv.order = append(iv.order, z.rule.Name)
	}
	e.intervals = iv
}

// Restore starts the rules' totals (and day counts, when the day is the
// same) from a saved state, so that a rebuilt engine or a restarted daemon
// continues counting. Occupancy is not restored: tracks do not survive.
// Call it before the first Step.
func (e *Engine) Restore(states map[string]RuleState) {
	for _, l := range e.lines {
		if s, ok := states[l.rule.Name]; ok && s.Totals.Kind == RuleLine {
			l.totals = s.Totals
		}
	}
	for _, z := range e.zones {
		if s, ok := states[z.rule.Name]; ok && s.Totals.Kind == RuleZone {
			z.totals = s.Totals
		}
	}
	if e.intervals == nil {
		return
	}
	for name, ri := range e.intervals.rules {
		if s, ok := states[name]; ok && s.Day != nil && s.Day.Kind == ri.kind && s.DayOf != "" {
			ri.day, ri.dayOf = *s.Day, s.DayOf
		}
	}
}

// Inherit is Restore for a daemon that takes a source over from another
// one (a shared site): it restores the totals and day counts of states, and
// closes every stay the previous holder left open (RuleState.Open) with an
// exit event of reason handover at frame and source time ts: its track id and
// class, DwellS from the stay's Since to the event time (never negative), and
// the zone's occupancy counting down to 0 as the stays close. Each exit is
// counted in its rule's Exit total (and the interval and day counts). The
// events come zone by zone in configuration order, then by track id; their
// ids use the run part Meta.Run+"/inherited", so they never collide with
// the ids the engine makes itself. Call it before the first Step.
func (e *Engine) Inherit(states map[string]RuleState, frame int64, ts time.Duration) []Event {
	e.Restore(states)
	at := e.meta.Start.Add(ts).UTC().Round(time.Millisecond)
	var out []Event
	for _, z := range e.zones {
		s, ok := states[z.rule.Name]
		if !ok || len(s.Open) == 0 {
			continue
		}
		open := slices.SortedStableFunc(slices.Values(s.Open), func(a, b OpenStay) int { return cmp.Compare(a.Track, b.Track) })
		left := len(open)
		for _, o := range open {
			left--
			z.totals.Exit++
			n := left
			ev := Event{
				SpecVersion:     SpecVersion,
				ID:              EventID(e.meta.Site, e.meta.Source, z.rule.Name, KindExit, o.Track, frame, e.meta.Run+"/inherited"),
				Source:          EventSource(e.meta.Site, e.meta.Source),
				Type:            TypeZoneExit,
				Subject:         z.rule.Name,
				Time:            at,
				DataContentType: ContentType,
				Data: Data{
					Site: e.meta.Site, Source: e.meta.Source, Rule: z.rule.Name, Kind: KindExit,
					TrackID: o.Track, Class: o.Class, SourceTime: *seconds(ts), Frame: frame,
					DwellS: seconds(max(at.Sub(o.Since), 0)), Occupancy: &n, Reason: ReasonHandover,
				},
			}
			out = append(out, ev)
		}
	}
	if e.intervals != nil {
		// Count the exits in the day of their time, as the first Step will.
		e.intervals.newDay(e.meta.Start.Add(ts))
		e.intervals.count(e, out)
	}
	return out
}

// State is every rule's running state at event time ts, for Restore and for
// dashboards.
func (e *Engine) State(ts time.Duration) map[string]RuleState {
	at := e.meta.Start.Add(ts).UTC().Round(time.Millisecond)
	m := make(map[string]RuleState, len(e.lines)+len(e.zones))
	for _, l := range e.lines {
		m[l.rule.Name] = RuleState{Totals: l.totals, At: at}
	}
	for _, z := range e.zones {
		s := RuleState{Totals: z.totals, Occupancy: z.occupancy, At: at}
		for _, id := range sortedKeys(z.tracks) {
			if st := z.tracks[id]; st.inside {
				s.Open = append(s.Open, OpenStay{Track: id, Class: st.last.Class,
					Since: e.meta.Start.Add(st.enterTS).UTC().Round(time.Millisecond)})
			}
		}
		m[z.rule.Name] = s
	}
	if e.intervals != nil {
		for name, ri := range e.intervals.rules {
			s := m[name]
			day := ri.day
			s.Day, s.DayOf = &day, ri.dayOf
			m[name] = s
		}
	}
	return m
}

// FinishIntervals emits the totals of the interval under way, marked partial
// (at the end of a stream or when the daemon stops).
func (e *Engine) FinishIntervals(frame int64, ts time.Duration) []Event {
	iv := e.intervals
	if iv == nil || iv.start.IsZero() {
		return nil
	}
	now := e.meta.Start.Add(ts)
	out := iv.emit(e, frame, ts, now, true, nil)
	iv.start, iv.end = time.Time{}, time.Time{}
	return out
}

// roll emits the totals of every interval that ended at or before this
// frame's time, oldest first, and starts the next.
func (iv *intervals) roll(e *Engine, frame int64, ts time.Duration, out []Event) []Event {
	now := e.meta.Start.Add(ts)
	if iv.start.IsZero() {
		iv.start = iv.floor(now)
		iv.end = iv.start.Add(iv.cfg.Every)
		iv.partial = now.After(iv.start)
		iv.newDay(iv.start)
		iv.resetOccupancy()
		return out
	}
	for !now.Before(iv.end) {
		out = iv.emit(e, frame, ts, iv.end, iv.partial, out)
		iv.start, iv.end, iv.partial = iv.end, iv.end.Add(iv.cfg.Every), false
		iv.newDay(iv.start)
	}
	return out
}

// emit appends one totals event per rule for the current interval, ending
// at end, and resets the interval's counts.
func (iv *intervals) emit(e *Engine, frame int64, ts time.Duration, end time.Time, partial bool, out []Event) []Event {
	for _, name := range iv.order {
		ri := iv.rules[name]
		data := &Interval{Start: iv.start.UTC(), End: end.UTC(), Partial: partial, Counts: ri.counts, Day: ri.day, DayOf: ri.dayOf}
		typ := TypeLineTotals
		if ri.zone != nil {
			typ = TypeZoneTotals
			data.Occupancy = &OccupancyRange{Min: ri.occMin, Max: ri.occMax, Now: ri.zone.occupancy}
			data.Counts.MaxOccupancy = ri.occMax
		}
		out = append(out, Event{
			SpecVersion: SpecVersion,
			// One id per rule and interval start: a replay of a recording
			// gives the same ids; a part of an interval (partial) its own.
			ID:              EventID(e.meta.Site, e.meta.Source, name, KindTotals, boolInt(partial), iv.start.Unix(), e.meta.Run),
			Source:          EventSource(e.meta.Site, e.meta.Source),
			Type:            typ,
			Subject:         name,
			Time:            end.UTC().Round(time.Millisecond),
			DataContentType: ContentType,
			Data: Data{Site: e.meta.Site, Source: e.meta.Source, Rule: name, Kind: KindTotals,
				SourceTime: *seconds(ts), Frame: frame, Interval: data},
		})
		ri.counts = Totals{Kind: ri.kind}
	}
	iv.resetOccupancy()
	return out
}

// count adds a frame's events to the interval and day counts, and follows
// each zone's occupancy.
func (iv *intervals) count(e *Engine, evs []Event) {
	for _, ev := range evs {
		ri := iv.rules[ev.Data.Rule]
		if ri == nil {
			continue
		}
		for _, t := range []*Totals{&ri.counts, &ri.day} {
			switch ev.Data.Kind {
			case KindIn:
				t.In++
			case KindOut:
				t.Out++
			case KindEnter:
				t.Enter++
			case KindExit:
				t.Exit++
			case KindDwell:
				t.Dwell++
			}
		}
	}
	for _, ri := range iv.rules {
		if ri.zone != nil {
			n := ri.zone.occupancy
			ri.occMin, ri.occMax = min(ri.occMin, n), max(ri.occMax, n)
			ri.day.MaxOccupancy = max(ri.day.MaxOccupancy, n)
		}
	}
}

// floor is the start of the interval holding t: midnight in the zone plus a
// whole number of intervals.
func (iv *intervals) floor(t time.Time) time.Time {
	lt := t.In(iv.cfg.Zone)
	midnight := time.Date(lt.Year(), lt.Month(), lt.Day(), 0, 0, 0, 0, iv.cfg.Zone)
	return midnight.Add(lt.Sub(midnight) / iv.cfg.Every * iv.cfg.Every)
}

// newDay starts the day's counts over when t is on another day than they
// were counted for.
func (iv *intervals) newDay(t time.Time) {
	day := t.In(iv.cfg.Zone).Format(time.DateOnly)
	for _, ri := range iv.rules {
		if ri.dayOf != day {
			ri.day, ri.dayOf = Totals{Kind: ri.kind}, day
		}
	}
}

// resetOccupancy starts each zone's range at its occupancy now.
func (iv *intervals) resetOccupancy() {
	for _, ri := range iv.rules {
		if ri.zone != nil {
			ri.occMin, ri.occMax = ri.zone.occupancy, ri.zone.occupancy
		}
	}
}

func boolInt(b bool) int64 {
	if b {
		return 1
	}
	return 0
}
