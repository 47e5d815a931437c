package events

import (
	"encoding/json"
	"fmt"
	"testing"
	"time"
)

// TestReplaceKeepsUnchangedRules: a track half-way across an unchanged line
// and inside an unchanged zone goes on as if nothing happened; a changed
// zone closes its stay (rule_changed) and restarts at 0; a new line starts
// at 0; both say so in reset events.
func TestReplaceKeepsUnchangedRules(t *testing.T) {
	gate := LineRule{Name: "gate", A: Point{0, 200}, B: Point{400, 200}, BandPx: 5}
	bench := ZoneRule{Name: "bench", Polygon: yard.Polygon, BandPx: 5}
	s := &script{e: NewEngine(testMeta, []LineRule{gate}, []ZoneRule{yard, bench})}
	s.e.SetIntervals(IntervalConfig{Every: time.Hour})
	s.walk(1, "person", Point{150, 150}, Point{150, 160}) // inside both zones, above the gate
	if got := zdescribe(s.events); got != "0:enter:1,occ=1 0:enter:1,occ=1" {
		t.Fatalf("before: %s", got)
	}
	moved := bench
	moved.Polygon = []Point{{100, 100}, {320, 100}, {320, 300}, {100, 300}}
	berth := LineRule{Name: "berth", A: Point{0, 250}, B: Point{400, 250}, BandPx: 5}
	evs, ch := s.e.Replace(s.frame-1, time.Duration(s.frame-1)*100*time.Millisecond, []LineRule{gate, berth}, []ZoneRule{yard, moved})
	if got := fmt.Sprint(ch.Kept, ch.Changed, ch.Added, ch.Removed); got != "[gate yard] [bench] [berth] []" {
		t.Errorf("change %s", got)
	}
	var kinds []string
	for _, e := range evs {
		kinds = append(kinds, fmt.Sprintf("%s:%s:%s", e.Data.Rule, e.Data.Kind, e.Data.Reason))
		if _, err := Parse(mustJSON(t, e)); err != nil {
			t.Errorf("event %s does not parse: %v", e.Data.Kind, err)
		}
	}
	if got := fmt.Sprint(kinds); got != "[bench:exit:rule_changed berth:reset:rule_new bench:reset:rule_changed]" {
		t.Errorf("reload events %s", got)
	}
	s.events = nil
	s.walk(1, "person", Point{150, 210}, Point{150, 260}, Point{150, 320}) // crosses gate, then berth, leaves the zones
	tot := s.e.Totals()
	if tot["gate"].In != 1 || tot["yard"].Enter != 1 || tot["yard"].Exit != 1 {
		t.Errorf("unchanged rules lost their state: gate %+v yard %+v", tot["gate"], tot["yard"])
	}
	// The changed zone starts afresh: a track inside it is a first sighting
	// inside, which enters (so its occupancy is right from the start).
	if tot["berth"].In != 1 || tot["bench"].Enter != 1 || tot["bench"].Exit != 1 {
		t.Errorf("new and changed rules: berth %+v bench %+v", tot["berth"], tot["bench"])
	}
	if st := s.e.State(0); st["gate"].Day == nil || st["gate"].Day.In != 1 || st["bench"].Day == nil {
		t.Errorf("interval state after the reload: %+v", st)
	}
}

func mustJSON(t *testing.T, e Event) []byte {
	t.Helper()
	b, err := json.Marshal(e)
	if err != nil {
		t.Fatal(err)
	}
	return b
}
