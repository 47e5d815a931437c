package events

import (
	"testing"
	"time"

	"tallyd/track"
)

// TestIntervalTotals: with 1-second intervals (10 frames at 10 fps from
// 08:00:00.5, so the first interval is partial), each totals event holds
// exactly the single events of its interval, the day's counts add up, zone
// occupancy ranges are right, and the end of the stream gives a partial
// last interval.
func TestIntervalTotals(t *testing.T) {
	meta := testMeta
	meta.Start = meta.Start.Add(500 * time.Millisecond) // 08:00:00.5
	e := NewEngine(meta, []LineRule{gate}, []ZoneRule{yard})
	e.SetIntervals(IntervalConfig{Every: time.Second, Zone: time.UTC})
	s := &script{e: e}
	// Frame f is at 08:00:00.5 + f/10 s. Track 1 crosses the gate downwards
	// (in) and enters the yard at frame 2, and leaves the yard at frame 16;
	// track 2 crosses the gate at frame 12 (outside the yard).
	walks := map[int64][]Point{
		1: {{150, 80}, {150, 90}, {150, 120}, {150, 130}, {150, 160}, {150, 200}, {150, 200}, {150, 200}, {150, 200}, {150, 200},
			{150, 200}, {150, 200}, {150, 200}, {150, 200}, {150, 200}, {150, 250}, {150, 350}, {150, 350}},
		2: {nil4, nil4, nil4, nil4, nil4, nil4, nil4, nil4, nil4, nil4, {50, 80}, {50, 90}, {50, 120}, {50, 130}, {50, 130}, {50, 130}, {50, 130}, {50, 130}},
	}
	for f := range 18 {
		var active []track.Track
		for id := int64(1); id <= 2; id++ {
			if p := walks[id][f]; p != nil4 {
				active = append(active, at(id, "person", p))
			}
		}
		s.step(active)
	}
	s.events = append(s.events, e.FinishIntervals(s.frame-1, time.Duration(s.frame-1)*100*time.Millisecond)...)
	var totals []Event
	single := map[time.Time]Totals{} // single events summed per interval start
	for _, ev := range s.events {
		if ev.Data.Kind == KindTotals {
			totals = append(totals, ev)
			continue
		}
		start := ev.Time.Truncate(time.Second)
		tt := single[start]
		switch ev.Data.Kind {
		case KindIn:
			tt.In++
		case KindEnter:
			tt.Enter++
		case KindExit:
			tt.Exit++
		}
		single[start] = tt
	}
	// 08:00:00.5..08:00:02.2: intervals [0,1) partial, [1,2), [2,3) partial.
	want := []struct {
		rule            string
		start           string
		partial         bool
		in, enter, exit int
		occ             *OccupancyRange
		dayIn           int
	}{
		{"gate", "08:00:00", true, 1, 0, 0, nil, 1},
		{"yard", "08:00:00", true, 0, 1, 0, &OccupancyRange{Min: 0, Max: 1, Now: 1}, 0},
		{"gate", "08:00:01", false, 1, 0, 0, nil, 2},
		{"yard", "08:00:01", false, 0, 0, 0, &OccupancyRange{Min: 1, Max: 1, Now: 1}, 0},
		{"gate", "08:00:02", true, 0, 0, 0, nil, 2},
		{"yard", "08:00:02", true, 0, 0, 1, &OccupancyRange{Min: 0, Max: 1, Now: 0}, 0},
	}
	if len(totals) != len(want) {
		t.Fatalf("%d totals events, want %d: %s", len(totals), len(want), describe(totals))
	}
	for i, w := range want {
		iv := totals[i].Data.Interval
		got := iv.Start.Format("15:04:05")
		if totals[i].Data.Rule != w.rule || got != w.start || iv.Partial != w.partial ||
			iv.Counts.In != w.in || iv.Counts.Enter != w.enter || iv.Counts.Exit != w.exit || iv.Day.In != w.dayIn {
			t.Errorf("totals %d: %s %s partial=%v counts %+v day %+v; want %+v", i, totals[i].Data.Rule, got, iv.Partial, iv.Counts, iv.Day, w)
		}
		if (w.occ == nil) != (iv.Occupancy == nil) || (w.occ != nil && *w.occ != *iv.Occupancy) {
			t.Errorf("totals %d occupancy %+v, want %+v", i, iv.Occupancy, w.occ)
		}
		if w.rule == "gate" && single[iv.Start].In != iv.Counts.In {
			t.Errorf("interval %s: %d single in events, totals say %d", got, single[iv.Start].In, iv.Counts.In)
		}
		if totals[i].Type != map[string]string{"gate": TypeLineTotals, "yard": TypeZoneTotals}[w.rule] {
			t.Errorf("type %s", totals[i].Type)
		}
	}
	// Ids: one per rule and interval, the same on a second run.
	ids := map[string]bool{}
	for _, ev := range totals {
		if ids[ev.ID] {
			t.Errorf("duplicate totals id %s", ev.ID)
		}
		ids[ev.ID] = true
	}
}

// nil4 marks "not in this frame" in a walk.
var nil4 = Point{-1, -1}

// TestRestore: an engine rebuilt from a saved state continues its totals
// and the day's counts; a state from another day keeps the totals but not
// the day.
func TestRestore(t *testing.T) {
	saved := map[string]RuleState{
		"gate": {Totals: Totals{Kind: RuleLine, In: 40, Out: 38}, Day: &Totals{Kind: RuleLine, In: 4, Out: 3}, DayOf: "2025-03-01"},
		"yard": {Totals: Totals{Kind: RuleZone, Enter: 9, Exit: 9, Dwell: 2, MaxOccupancy: 3}, Day: &Totals{Kind: RuleZone, Enter: 1, Exit: 1}, DayOf: "2025-02-28"},
	}
	e := NewEngine(testMeta, []LineRule{gate}, []ZoneRule{yard})
	e.SetIntervals(IntervalConfig{Every: time.Minute})
	e.Restore(saved)
	s := &script{e: e}
	s.walk(1, "person", ys(150, 80, 90, 120, 130)...)
	st := e.State(time.Second)
	if g := st["gate"]; g.Totals.In != 41 || g.Totals.Out != 38 || g.Day.In != 5 || g.DayOf != "2025-03-01" {
		t.Errorf("gate state %+v: want totals 41/38, day 5 in on 2025-03-01", g)
	}
	// The walk also enters the yard: 9 + 1 in all, 1 today.
	if y := st["yard"]; y.Totals.Enter != 10 || y.Totals.MaxOccupancy != 3 || y.Day.Enter != 1 || y.DayOf != "2025-03-01" || y.Occupancy != 1 {
		t.Errorf("yard state %+v: want totals continued, the day started afresh", y)
	}
}
