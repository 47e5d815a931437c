package events

import (
	"reflect"
	"time"
)

// RulesChange says what Replace did to each rule, by name.
type RulesChange struct {
	Kept    []string // unchanged: counting went on without a gap
	Changed []string // same name, new definition: restarted at 0
	Added   []string // new: started at 0
	Removed []string
}

// Replace swaps the engine's rules for new ones at a reload. A rule whose
// definition is unchanged keeps its state (totals, open zone stays, each
// track's side of a line), so it counts on without a gap. A changed or new
// rule starts at 0 and says so in a reset event; stays open in a changed or
// removed zone are closed with reason rule_changed first. The events are
// returned in the order: closing exits, then resets (lines, then zones).
func (e *Engine) Replace(frame int64, ts time.Duration, lines []LineRule, zones []ZoneRule) ([]Event, RulesChange) {
	var ch RulesChange
	var out []Event
	oldLines := map[string]*lineState{}
	for _, l := range e.lines {
		oldLines[l.rule.Name] = l
	}
	oldZones := map[string]*zoneState{}
	for _, z := range e.zones {
		oldZones[z.rule.Name] = z
	}
	var resets []string
	reasons := map[string]Reason{}
	newLines := make([]*lineState, 0, len(lines))
	for _, r := range lines {
		old, had := oldLines[r.Name]
		delete(oldLines, r.Name)
		if had && reflect.DeepEqual(old.rule, normLine(r)) {
			newLines = append(newLines, old)
			ch.Kept = append(ch.Kept, r.Name)
			continue
		}
		newLines = append(newLines, newLineState(r))
		resets, reasons = note(&ch, resets, reasons, r.Name, had || oldZones[r.Name] != nil)
	}
	newZones := make([]*zoneState, 0, len(zones))
	for _, r := range zones {
		old, had := oldZones[r.Name]
		delete(oldZones, r.Name)
		if had && reflect.DeepEqual(old.rule, normZone(r)) {
			newZones = append(newZones, old)
			ch.Kept = append(ch.Kept, r.Name)
			continue
		}
		if had {
			out = old.closeAll(e, frame, ts, ReasonRuleChanged, out)
		}
		newZones = append(newZones, newZoneState(r))
		_, wasLine := oldLines[r.Name]
		delete(oldLines, r.Name)
		resets, reasons = note(&ch, resets, reasons, r.Name, had || wasLine)
	}
	for name := range oldLines {
		ch.Removed = append(ch.Removed, name)
	}
	for name, z := range oldZones {
		out = z.closeAll(e, frame, ts, ReasonRuleChanged, out)
		ch.Removed = append(ch.Removed, name)
	}
	if e.intervals != nil {
		e.intervals.count(e, out) // the closing exits belong to the old rules' intervals
	}
	e.lines, e.zones = newLines, newZones
	if iv := e.intervals; iv != nil {
		old := iv.rules
		e.SetIntervals(iv.cfg)
		for name, ri := range e.intervals.rules {
			if o, ok := old[name]; ok && reasons[name] == "" {
				o.zone = ri.zone
				e.intervals.rules[name] = o
			}
		}
		e.intervals.start, e.intervals.end, e.intervals.partial = iv.start, iv.end, iv.partial
	}
	for _, name := range resets {
		out = append(out, e.resetEvent(name, reasons[name], frame, ts))
	}
	return out, ch
}

func note(ch *RulesChange, resets []string, reasons map[string]Reason, name string, had bool) ([]string, map[string]Reason) {
	if had {
		ch.Changed = append(ch.Changed, name)
		reasons[name] = ReasonRuleChanged
	} else {
		ch.Added = append(ch.Added, name)
		reasons[name] = ReasonRuleNew
	}
	return append(resets, name), reasons
}

// normLine and normZone copy a rule as newLineState and newZoneState keep it,
// for comparing.
func normLine(r LineRule) LineRule {
	r.Classes = append([]string(nil), r.Classes...)
	return r
}

func normZone(r ZoneRule) ZoneRule {
	r.Classes = append([]string(nil), r.Classes...)
	r.Polygon = append([]Point(nil), r.Polygon...)
	return r
}

// resetEvent says a rule starts at 0.
func (e *Engine) resetEvent(rule string, reason Reason, frame int64, ts time.Duration) Event {
	return Event{
		SpecVersion:     SpecVersion,
		ID:              EventID(e.meta.Site, e.meta.Source, rule, KindReset, 0, frame, e.meta.Run),
		Source:          EventSource(e.meta.Site, e.meta.Source),
		Type:            TypeRuleReset,
		Subject:         rule,
		Time:            e.meta.Start.Add(ts).UTC().Round(time.Millisecond),
		DataContentType: ContentType,
		Data: Data{Site: e.meta.Site, Source: e.meta.Source, Rule: rule, Kind: KindReset,
			SourceTime: *seconds(ts), Frame: frame, Reason: reason},
	}
}
