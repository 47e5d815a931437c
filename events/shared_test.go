package events

import (
	"encoding/json"
	"errors"
	"strings"
	"testing"
	"time"

	"tallyd/track"
)

// The events of a site shared by several daemons: hand-overs, site-wide
// areas, and the zone stays a new holder inherits.

var handoverMeta = Meta{Site: "ferry", Source: "quay-2", Start: time.Date(2026, 7, 4, 9, 0, 0, 0, time.UTC), Run: "r7"}

var ferryArea = AreaData{Name: "concourse", Occupancy: 5, Enter: 40, Exit: 35, Zones: []AreaZone{
	{Source: "quay-1", Rule: "hall", Occupancy: 2, Enter: 15, Exit: 13},
	{Source: "quay-2", Rule: "hall", Occupancy: 3, Enter: 25, Exit: 22},
}}

func TestHandoverEventJSON(t *testing.T) {
	ev := HandoverEvent(handoverMeta, 12, 1500*time.Millisecond,
		HandoverData{From: "box-a", To: "box-b", Cause: HandoverExpired, GapS: 11.25})
	ev.Data.Lease = 42
	b, err := json.Marshal(ev)
	if err != nil {
		t.Fatal(err)
	}
	want := `{"specversion":"1.0","id":"` + EventID("ferry", "quay-2", "", KindHandover, 0, 12, "r7/handover") + `",` +
		`"source":"/tallyd/ferry/quay-2","type":"tallyd.source.handover","subject":"","time":"2026-07-04T09:00:01.5Z",` +
		`"datacontenttype":"application/json","data":{"site":"ferry","source":"quay-2","rule":"","kind":"handover",` +
		`"source_time_s":1.5,"frame":12,"lease":42,"handover":{"from":"box-a","to":"box-b","cause":"expired","gap_s":11.25}}}`
	if string(b) != want {
		t.Errorf("JSON\n%s\nwant\n%s", b, want)
	}
	// No previous holder: "from" is left out.
	first := HandoverEvent(handoverMeta, 0, 0, HandoverData{To: "box-a", Cause: HandoverFirst})
	if b, _ := json.Marshal(first); strings.Contains(string(b), `"from"`) {
		t.Errorf("first hand-over carries from: %s", b)
	}
}

func TestAreaEventJSON(t *testing.T) {
	at := time.Date(2026, 7, 4, 9, 0, 3, 123456789, time.FixedZone("CEST", 2*3600))
	ev := AreaEvent("ferry", at, 9, "k1", ferryArea)
	b, err := json.Marshal(ev)
	if err != nil {
		t.Fatal(err)
	}
	want := `{"specversion":"1.0","id":"` + EventID("ferry", "area/concourse", "", KindOccupancy, 0, 9, "k1") + `",` +
		`"source":"/tallyd/ferry/area/concourse","type":"tallyd.area.occupancy","subject":"concourse",` +
		`"time":"2026-07-04T07:00:03.123Z","datacontenttype":"application/json","data":{"site":"ferry","source":"",` +
		`"rule":"","kind":"occupancy","source_time_s":0,"frame":0,"occupancy":5,"area":{"name":"concourse",` +
		`"occupancy":5,"enter":40,"exit":35,"zones":[{"source":"quay-1","rule":"hall","occupancy":2,"enter":15,"exit":13},` +
		`{"source":"quay-2","rule":"hall","occupancy":3,"enter":25,"exit":22}]}}}`
	if string(b) != want {
		t.Errorf("JSON\n%s\nwant\n%s", b, want)
	}
	// The event owns its copy of the zones.
	a := ferryArea
	a.Zones = append([]AreaZone(nil), ferryArea.Zones...)
	ev = AreaEvent("ferry", at, 9, "k1", a)
	a.Zones[0].Occupancy = 99
	if ev.Data.Area.Zones[0].Occupancy != 2 {
		t.Error("AreaEvent shares the caller's zones")
	}
}

func TestNewEventsParseRoundTrip(t *testing.T) {
	tests := []struct {
		name string
		ev   Event
	}{
		{"handover", HandoverEvent(handoverMeta, 12, 1500*time.Millisecond, HandoverData{From: "box-a", To: "box-b", Cause: HandoverReleased, GapS: 0.4})},
		{"first handover", HandoverEvent(Meta{Site: "ferry", Source: "quay-1"}, 0, 0, HandoverData{To: "box-a", Cause: HandoverFirst})},
		{"area", AreaEvent("ferry", handoverMeta.Start, 3, "k1", ferryArea)},
		{"empty area", AreaEvent("ferry", handoverMeta.Start, 0, "k1", AreaData{Name: "gangway"})},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			tc.ev.Data.Lease = 7
			b, err := json.Marshal(tc.ev)
			if err != nil {
				t.Fatal(err)
			}
			back, err := Parse(b)
			if err != nil {
				t.Fatalf("Parse(%s): %v", b, err)
			}
			again, err := json.Marshal(back)
			if err != nil {
				t.Fatal(err)
			}
			if string(again) != string(b) {
				t.Errorf("round trip\n%s\nwant\n%s", again, b)
			}
			if back.Data.Lease != 7 || back.Data.Kind != tc.ev.Data.Kind || back.ID != tc.ev.ID || !back.Time.Equal(tc.ev.Time) {
				t.Errorf("round trip lost fields: %+v", back)
			}
		})
	}
}

func TestNewEventsParseErrors(t *testing.T) {
	h, _ := json.Marshal(HandoverEvent(handoverMeta, 1, 0, HandoverData{To: "box-b", Cause: HandoverFirst}))
	a, _ := json.Marshal(AreaEvent("ferry", handoverMeta.Start, 1, "k1", ferryArea))
	tests := []struct {
		name, in, want string
	}{
		{"handover kind mismatch", strings.Replace(string(h), `"kind":"handover"`, `"kind":"occupancy"`, 1),
			`malformed event: attribute "data.kind": want "handover" for type "tallyd.source.handover", found "occupancy"`},
		{"occupancy kind mismatch", strings.Replace(string(a), `"kind":"occupancy"`, `"kind":"enter"`, 1),
			`malformed event: attribute "data.kind": want "occupancy" for type "tallyd.area.occupancy", found "enter"`},
		{"handover without payload", strings.Replace(string(h), `"handover":{`, `"other":{`, 1),
			`malformed event: attribute "data.handover": missing in a handover event`},
		{"area without payload", strings.Replace(string(a), `"area":{`, `"other":{`, 1),
			`malformed event: attribute "data.area": missing in an occupancy event`},
		{"bad gap", strings.Replace(string(h), `"gap_s":0`, `"gap_s":"0"`, 1),
			`malformed event: attribute "data": json: cannot unmarshal string into Go struct field HandoverData.handover.gap_s of type float64`},
		{"negative lease", strings.Replace(string(h), `"frame":1,`, `"frame":1,"lease":-1,`, 1),
			`malformed event: attribute "data": json: cannot unmarshal number -1 into Go struct field Data.lease of type uint64`},
	}
	for _, tc := range tests {
		_, err := Parse([]byte(tc.in))
		if err == nil || err.Error() != tc.want {
			t.Errorf("%s:\n got %v\nwant %s", tc.name, err, tc.want)
		}
		if err != nil && !errors.Is(err, ErrMalformed) {
			t.Errorf("%s: error does not wrap ErrMalformed", tc.name)
		}
	}
}

func TestNATSSubjectKinds(t *testing.T) {
	exit := Event{Data: Data{Site: "ferry", Source: "quay-2", Rule: "hall", Kind: KindExit}}
	tests := []struct {
		name string
		ev   Event
		want string
	}{
		{"rule event unchanged", exit, "tallyd.events.ferry.quay-2.hall.exit"},
		{"handover", HandoverEvent(handoverMeta, 1, 0, HandoverData{To: "box-b"}), "tallyd.events.ferry.quay-2.handover"},
		{"area", AreaEvent("ferry", handoverMeta.Start, 1, "k1", ferryArea), "tallyd.events.ferry.area.concourse.occupancy"},
		// An area named like a source: the fourth token still differs
		// from every rule event's last token (in|out|enter|exit|dwell|totals|reset).
		{"area named like a rule", AreaEvent("ferry", handoverMeta.Start, 1, "k1", AreaData{Name: "hall"}), "tallyd.events.ferry.area.hall.occupancy"},
	}
	for _, tc := range tests {
		if got := tc.ev.NATSSubject("tallyd.events"); got != tc.want {
			t.Errorf("%s: %q, want %q", tc.name, got, tc.want)
		}
	}
}

func TestNewEventIDs(t *testing.T) {
	h := func(m Meta, frame int64) string {
		return HandoverEvent(m, frame, 0, HandoverData{To: "b"}).ID
	}
	other := handoverMeta
	other.Run = "r8"
	ids := map[string]string{
		"handover":              h(handoverMeta, 5),
		"handover later frame":  h(handoverMeta, 6),
		"handover other run":    h(other, 5),
		"area":                  AreaEvent("ferry", handoverMeta.Start, 5, "r7", ferryArea).ID,
		"area next seq":         AreaEvent("ferry", handoverMeta.Start, 6, "r7", ferryArea).ID,
		"rule event same frame": EventID("ferry", "quay-2", "", KindEnter, 0, 5, "r7"),
	}
	seen := map[string]string{}
	for name, id := range ids {
		if prev, dup := seen[id]; dup {
			t.Errorf("%s and %s share id %s", name, prev, id)
		}
		seen[id] = name
	}
	if h(handoverMeta, 5) != ids["handover"] {
		t.Error("same hand-over, different id")
	}
	// The payload is not part of the id: a re-sent hand-over keeps it.
	if HandoverEvent(handoverMeta, 5, 0, HandoverData{To: "c", GapS: 3}).ID != ids["handover"] {
		t.Error("hand-over id depends on the payload")
	}
}

// TestStateOpenStays: State lists the stays open in each zone, by track id,
// with the event time of their enter.
func TestStateOpenStays(t *testing.T) {
	s := &script{e: NewEngine(testMeta, []LineRule{gate}, []ZoneRule{yard})}
	in, out := Point{200, 200}, Point{200, 50}
	s.step([]track.Track{at(9, "person", out), at(4, "bicycle", out)}) // frame 0
	s.step([]track.Track{at(9, "person", in), at(4, "bicycle", out)})  // 1: 9 enters
	s.step([]track.Track{at(9, "person", in), at(4, "bicycle", in)})   // 2: 4 enters
	st := s.e.State(300 * time.Millisecond)
	want := []OpenStay{
		{Track: 4, Class: "bicycle", Since: testMeta.Start.Add(200 * time.Millisecond)},
		{Track: 9, Class: "person", Since: testMeta.Start.Add(100 * time.Millisecond)},
	}
	if got := st["yard"].Open; !equalStays(got, want) {
		t.Errorf("open stays %+v, want %+v", got, want)
	}
	if st["gate"].Open != nil {
		t.Errorf("a line has open stays: %+v", st["gate"].Open)
	}
	s.step([]track.Track{at(9, "person", out), at(4, "bicycle", in)}) // 3: 9 leaves
	if got := s.e.State(400 * time.Millisecond)["yard"].Open; !equalStays(got, want[:1]) {
		t.Errorf("after an exit: open stays %+v, want %+v", got, want[:1])
	}
	// The JSON form, as kept in the state bucket, reads back the same.
	b, err := json.Marshal(s.e.State(400 * time.Millisecond))
	if err != nil {
		t.Fatal(err)
	}
	var back map[string]RuleState
	if err := json.Unmarshal(b, &back); err != nil {
		t.Fatal(err)
	}
	if !equalStays(back["yard"].Open, want[:1]) || !strings.Contains(string(b), `"open":[{"track":4,"class":"bicycle","since":"2025-03-01T08:00:00.2Z"}]`) {
		t.Errorf("state JSON %s", b)
	}
	if strings.Count(string(b), `"open"`) != 1 {
		t.Errorf("open written for a rule without stays: %s", b)
	}
}

func equalStays(a, b []OpenStay) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i].Track != b[i].Track || a[i].Class != b[i].Class || !a[i].Since.Equal(b[i].Since) {
			return false
		}
	}
	return true
}

// TestInherit: the daemon taking a source over continues its totals and
// closes the stays the previous holder left open, with reason handover.
func TestInherit(t *testing.T) {
	// The previous holder: tracks 9 and 4 enter the yard and stay.
	prev := &script{e: NewEngine(testMeta, []LineRule{gate}, []ZoneRule{yard})}
	in, out := Point{200, 200}, Point{200, 50}
	prev.step([]track.Track{at(9, "person", out), at(4, "bicycle", out)})
	prev.step([]track.Track{at(9, "person", in), at(4, "bicycle", out)}) // 9 enters at 0.1 s
	prev.step([]track.Track{at(9, "person", in), at(4, "bicycle", in)})  // 4 enters at 0.2 s
	saved := prev.e.State(300 * time.Millisecond)
	b, err := json.Marshal(saved) // through the state bucket
	if err != nil {
		t.Fatal(err)
	}
	var states map[string]RuleState
	if err := json.Unmarshal(b, &states); err != nil {
		t.Fatal(err)
	}

	tests := []struct {
		name      string
		states    map[string]RuleState
		intervals bool
		want      string // zdescribe form
		exit      int    // yard's Exit total after
		dayExit   int    // with intervals: the day's exits after
	}{
		{"two open stays", states, false, "0:exit:4,occ=1,dwell=11.8,reason=handover 0:exit:9,occ=0,dwell=11.9,reason=handover", 2, 0},
		{"with day counts", states, true, "0:exit:4,occ=1,dwell=11.8,reason=handover 0:exit:9,occ=0,dwell=11.9,reason=handover", 2, 2},
		{"no stays", map[string]RuleState{"yard": {Totals: Totals{Kind: RuleZone, Enter: 3, Exit: 3}}}, false, "", 3, 0},
		{"no state", nil, false, "", 0, 0},
		{"stay from the future", map[string]RuleState{"yard": {Totals: Totals{Kind: RuleZone, Enter: 1},
			Open: []OpenStay{{Track: 2, Since: testMeta.Start.Add(time.Hour)}}}}, false, "0:exit:2,occ=0,dwell=0,reason=handover", 1, 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			// The new holder starts its own run 12 s later.
			meta := testMeta
			meta.Run = "run-b"
			meta.Start = testMeta.Start.Add(12 * time.Second)
			e := NewEngine(meta, []LineRule{gate}, []ZoneRule{yard})
			if tc.intervals {
				e.SetIntervals(IntervalConfig{Every: time.Minute})
			}
			evs := e.Inherit(tc.states, 0, 0)
			if got := zdescribe(evs); got != tc.want {
				t.Errorf("events %q, want %q", got, tc.want)
			}
			for _, ev := range evs {
				if (ev.Data.Class == "") != (ev.Data.TrackID == 2) || ev.Data.Box != nil || !ev.Time.Equal(meta.Start) || ev.Type != TypeZoneExit {
					t.Errorf("exit %+v: want the stay's class, no box, time %v", ev.Data, meta.Start)
				}
				if _, err := Parse(mustJSON(t, ev)); err != nil {
					t.Errorf("exit does not parse: %v", err)
				}
				// The engine's own ids for this run never use "/inherited".
				if ev.ID == EventID(meta.Site, meta.Source, "yard", KindExit, ev.Data.TrackID, 0, meta.Run) {
					t.Errorf("inherited exit id %s collides with the engine's own", ev.ID)
				}
			}
			st := e.State(0)
			if y := st["yard"]; y.Totals.Exit != tc.exit || y.Occupancy != 0 || y.Open != nil {
				t.Errorf("yard state %+v: want exit total %d, nothing inside", y, tc.exit)
			}
			if want, ok := tc.states["gate"]; ok && st["gate"].Totals != want.Totals {
				t.Errorf("gate totals %+v, want restored %+v", st["gate"].Totals, want.Totals)
			}
			if tc.intervals {
				if d := st["yard"].Day; d == nil || d.Exit != tc.dayExit || st["yard"].DayOf != "2025-03-01" {
					t.Errorf("yard day %+v of %s: want %d exits on 2025-03-01", d, st["yard"].DayOf, tc.dayExit)
				}
			}
			// Counting goes on: a new track enters with the usual id.
			s := &script{e: e, frame: 1}
			s.walk(4, "person", out, in)
			if y := e.State(time.Second)["yard"]; y.Totals.Enter != tc.states["yard"].Totals.Enter+1 || y.Occupancy != 1 {
				t.Errorf("after inheriting, a new enter: yard %+v", y)
			}
		})
	}
}
