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
		{Totals{Kind: RuleLine, In: 3, Out: 1}, `{"kind":"line","in":3,"out":1}`},
		{Totals{Kind: RuleLine}, `{"kind":"line","in":0,"out":0}`},
		{Totals{Kind: RuleZone, Enter: 5, Exit: 4, Dwell: 2, MaxOccupancy: 3}, `{"kind":"zone","enter":5,"exit":4,"dwell":2,"max_occupancy":3}`},
		// Fields of the other kind are not written.
		{Totals{Kind: RuleLine, In: 1, Enter: 9}, `{"kind":"line","in":1,"out":0}`},
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
	m := map[string]Totals{"yard": {Kind: RuleZone, Enter: 1, Exit: 1, MaxOccupancy: 1}, "gate": {Kind: RuleLine, In: 2}}
	b, err := json.Marshal(m)
	if err != nil {
		t.Fatal(err)
	}
	want := `{"gate":{"kind":"line","in":2,"out":0},"yard":{"kind":"zone","enter":1,"exit":1,"dwell":0,"max_occupancy":1}}`
	if string(b) != want {
		t.Errorf("map: %s, want %s", b, want)
	}
}

func TestTotalsJSONErrors(t *testing.T) {
	if _, err := json.Marshal(Totals{Kind: "crossing"}); err == nil || !errors.Is(err, ErrBadTotals) {
		t.Errorf("Marshal of unknown kind: %v", err)
	}
	tests := []struct {
		in, want string
	}{
		{`{"kind":"crossing","in":1}`, `bad totals: unknown kind "crossing"`},
		{`{"in":1}`, `bad totals: unknown kind ""`},
		{`{"kind":"line","in":1,"out":2,"enter":3}`, `bad totals: line totals: json: unknown field "enter"`},
		{`{"kind":"zone","enter":1,"in":3}`, `bad totals: zone totals: json: unknown field "in"`},
		{`{"kind":"zone","enter":-1}`, `bad totals: negative count -1`},
		{`{"kind":"line","in":"3"}`, `bad totals: line totals: json: cannot unmarshal string into Go struct field .in of type int`},
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
