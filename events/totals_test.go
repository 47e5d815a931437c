package events

import (
	"encoding/json"
	"errors"
	"testing"
)

func TestTotalsJSON(t *testing.T) {
	tests := []struct {
		in   Totals
		want string
	}{
		{Totals{Kind: TotalsCrossing, In: 3, Out: 1}, `{"kind":"crossing","in":3,"out":1}`},
		{Totals{Kind: TotalsCrossing}, `{"kind":"crossing","in":0,"out":0}`},
		{Totals{Kind: TotalsZone, Entries: 5, Exits: 4, DwellAlerts: 2, MaxOccupancy: 3}, `{"kind":"zone","entries":5,"exits":4,"dwell_alerts":2,"max_occupancy":3}`},
		// Fields of the other kind are not written.
		{Totals{Kind: TotalsCrossing, In: 1, Entries: 9}, `{"kind":"crossing","in":1,"out":0}`},
	}
	for _, tc := range tests {
		b, err := json.Marshal(tc.in)
		if err != nil {
			t.Fatal(err)
		}
		if string(b) != tc.want {
			t.Errorf("Marshal(%+v) = %s, want %s", tc.in, b, tc.want)
		}
		var back Totals
		if err := json.Unmarshal(b, &back); err != nil {
			t.Fatalf("Unmarshal(%s): %v", b, err)
		}
		if b2, _ := json.Marshal(back); string(b2) != tc.want {
			t.Errorf("round trip of %s gave %s", tc.want, b2)
		}
	}
	m := map[string]Totals{"yard": {Kind: TotalsZone, Entries: 1, Exits: 1, MaxOccupancy: 1}, "gate": {Kind: TotalsCrossing, In: 2}}
	b, err := json.Marshal(m)
	if err != nil {
		t.Fatal(err)
	}
	want := `{"gate":{"kind":"crossing","in":2,"out":0},"yard":{"kind":"zone","entries":1,"exits":1,"dwell_alerts":0,"max_occupancy":1}}`
	if string(b) != want {
		t.Errorf("map: %s, want %s", b, want)
	}
}

func TestTotalsJSONErrors(t *testing.T) {
	if _, err := json.Marshal(Totals{Kind: "line"}); err == nil || !errors.Is(err, ErrBadTotals) {
		t.Errorf("Marshal of unknown kind: %v", err)
	}
	tests := []struct {
		in, want string
	}{
		{`{"kind":"line","in":1}`, `bad totals: unknown kind "line"`},
		{`{"in":1}`, `bad totals: unknown kind ""`},
		{`{"kind":"crossing","in":1,"out":2,"entries":3}`, `bad totals: crossing totals: json: unknown field "entries"`},
		{`{"kind":"zone","entries":1,"in":3}`, `bad totals: zone totals: json: unknown field "in"`},
		{`{"kind":"zone","entries":-1}`, `bad totals: negative count -1`},
		{`{"kind":"crossing","in":"3"}`, `bad totals: crossing totals: json: cannot unmarshal string into Go struct field .in of type int`},
	}
	for _, tc := range tests {
		var got Totals
		err := json.Unmarshal([]byte(tc.in), &got)
		if err == nil {
			t.Errorf("%s: no error, want %q", tc.in, tc.want)
			continue
		}
		if err.Error() != tc.want {
			t.Errorf("%s:\n got %q\nwant %q", tc.in, err.Error(), tc.want)
		}
		if !errors.Is(err, ErrBadTotals) {
			t.Errorf("%s: does not wrap ErrBadTotals", tc.in)
		}
	}
}
