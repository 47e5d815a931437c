package events

import (
	"encoding/json"
	"errors"
	"strings"
	"testing"
	"time"

	"tallyd/detect"
	"tallyd/track"
)

// validJSON is a well-formed exit event as the engine writes it.
const validJSON = `{"specversion":"1.0","id":"0123abcd","source":"/tallyd/depot/gate-1",` +
	`"type":"tallyd.zone.exit","subject":"yard","time":"2025-03-01T08:00:01.5Z",` +
	`"datacontenttype":"application/json","data":{"site":"depot","source":"gate-1",` +
	`"rule":"yard","kind":"exit","track_id":7,"class":"person","source_time_s":1.5,` +
	`"frame":15,"box":[1,2,3,4],"dwell_s":1.2,"occupancy":0,"reason":"track_ended"}}`

func TestEventJSONShape(t *testing.T) {
	occ, dwell := 0, 1.2
	ev := Event{
		SpecVersion: "1.0", ID: "0123abcd", Source: "/tallyd/depot/gate-1", Type: TypeZoneExit,
		Subject: "yard", Time: time.Date(2025, 3, 1, 8, 0, 1, 5e8, time.UTC), DataContentType: ContentType,
		Data: Data{
			Site: "depot", Source: "gate-1", Rule: "yard", Kind: KindExit, TrackID: 7, Class: "person",
			SourceTime: 1.5, Frame: 15, Box: &[4]float64{1, 2, 3, 4}, DwellS: &dwell, Occupancy: &occ, Reason: ReasonTrackEnded,
		},
	}
	b, err := json.Marshal(ev)
	if err != nil {
		t.Fatal(err)
	}
	// CloudEvents 1.0, JSON event format (github.com/cloudevents/spec,
	// cloudevents/formats/json-format.md): attributes are top-level members
	// with lower-case names; data holds the JSON payload as a JSON value.
	if string(b) != validJSON {
		t.Errorf("JSON\n%s\nwant\n%s", b, validJSON)
	}
	back, err := Parse(b)
	if err != nil {
		t.Fatal(err)
	}
	if *back.Data.DwellS != 1.2 || *back.Data.Occupancy != 0 || !back.Time.Equal(ev.Time) || *back.Data.Box != *ev.Data.Box {
		t.Errorf("round trip: %+v", back)
	}
}

func TestEventOptionalFieldsOmitted(t *testing.T) {
	b, err := json.Marshal(Event{SpecVersion: "1.0", Data: Data{Kind: KindIn}})
	if err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"dwell_s", "occupancy", "reason", "threshold_s"} {
		if strings.Contains(string(b), k) {
			t.Errorf("%s present in %s", k, b)
		}
	}
}

func TestEventIDRun(t *testing.T) {
	// A recorded source's ids do not depend on the run; a live source's do,
	// so that ids never repeat across restarts of the daemon.
	rec := EventID("depot", "gate-1", "yard", "exit", 7, 15, "")
	if rec != EventID("depot", "gate-1", "yard", "exit", 7, 15, "") {
		t.Fatal("recorded ids differ between runs")
	}
	a, b := EventID("depot", "gate-1", "yard", "exit", 7, 15, "run-a"), EventID("depot", "gate-1", "yard", "exit", 7, 15, "run-b")
	if a == b || a == rec {
		t.Errorf("live ids of two runs: %s %s (recorded %s)", a, b, rec)
	}
}

func TestEventID(t *testing.T) {
	a := EventID("depot", "gate-1", "yard", "exit", 7, 15, "")
	if len(a) != 32 || strings.Trim(a, "0123456789abcdef") != "" {
		t.Errorf("id %q is not 32 hex digits", a)
	}
	if a != EventID("depot", "gate-1", "yard", "exit", 7, 15, "") {
		t.Error("same input, different id")
	}
	// Length-prefixed fields: moving a character between fields changes it.
	others := []string{
		EventID("depot", "gate-1", "yard", "exit", 7, 16, ""),
		EventID("depot", "gate-1", "yard", "exit", 8, 15, ""),
		EventID("depot", "gate-1", "yard", "enter", 7, 15, ""),
		EventID("depot", "gate-1", "yar", "dexit", 7, 15, ""),
		EventID("depot", "gate-", "1yard", "exit", 7, 15, ""),
	}
	for i, o := range others {
		if o == a {
			t.Errorf("variant %d collides", i)
		}
	}
}

func TestParseErrors(t *testing.T) {
	// set replaces one top-level attribute of validJSON (nil deletes it).
	set := func(attr string, v any) string {
		var m map[string]any
		if err := json.Unmarshal([]byte(validJSON), &m); err != nil {
			t.Fatal(err)
		}
		if v == nil {
			delete(m, attr)
		} else {
			m[attr] = v
		}
		b, err := json.Marshal(m)
		if err != nil {
			t.Fatal(err)
		}
		return string(b)
	}
	tests := []struct {
		name, in, want string
	}{
		{"not JSON", `hello`, `malformed event: not a JSON object`},
		{"array", `[1]`, `malformed event: not a JSON object`},
		{"null", `null`, `malformed event: not a JSON object`},
		{"truncated", `{"specversion":`, `malformed event: unexpected end of JSON input`},
		{"no specversion", set("specversion", nil), `malformed event: attribute "specversion": missing`},
		{"old specversion", set("specversion", "0.3"), `malformed event: attribute "specversion": want "1.0", found "0.3"`},
		{"numeric specversion", set("specversion", 1.0), `malformed event: attribute "specversion": not a string`},
		{"upper-case name", strings.Replace(validJSON, `"specversion"`, `"SpecVersion"`, 1), `malformed event: attribute "specversion": missing`},
		{"no id", set("id", nil), `malformed event: attribute "id": missing`},
		{"empty id", set("id", ""), `malformed event: attribute "id": empty`},
		{"null id", strings.Replace(validJSON, `"0123abcd"`, `null`, 1), `malformed event: attribute "id": missing`},
		{"no source", set("source", nil), `malformed event: attribute "source": missing`},
		{"no type", set("type", nil), `malformed event: attribute "type": missing`},
		{"foreign type", set("type", "com.example.thing"), `malformed event: attribute "type": unknown type "com.example.thing"`},
		{"subject not a string", set("subject", 3), `malformed event: attribute "subject": not a string`},
		{"xml content", set("datacontenttype", "application/xml"), `malformed event: attribute "datacontenttype": want "application/json", found "application/xml"`},
		{"bad time", set("time", "yesterday"), `malformed event: attribute "time": not RFC 3339: "yesterday"`},
		{"no data", set("data", nil), `malformed event: attribute "data": missing or not a JSON object`},
		{"string data", set("data", "x"), `malformed event: attribute "data": missing or not a JSON object`},
		{"bad data field", strings.Replace(validJSON, `"frame":15`, `"frame":"15"`, 1), `malformed event: attribute "data": json: cannot unmarshal string into Go struct field Data.frame of type int64`},
		{"kind mismatch", strings.Replace(validJSON, `"kind":"exit"`, `"kind":"enter"`, 1), `malformed event: attribute "data.kind": want "exit" for type "tallyd.zone.exit", found "enter"`},
	}
	for _, tc := range tests {
		_, err := Parse([]byte(tc.in))
		if err == nil {
			t.Errorf("%s: no error, want %q", tc.name, tc.want)
			continue
		}
		if err.Error() != tc.want {
			t.Errorf("%s:\n got %q\nwant %q", tc.name, err.Error(), tc.want)
		}
		if !errors.Is(err, ErrMalformed) {
			t.Errorf("%s: error does not wrap ErrMalformed", tc.name)
		}
	}
	var ae *AttrError
	if _, err := Parse([]byte(set("id", ""))); !errors.As(err, &ae) || ae.Attr != "id" {
		t.Errorf("AttrError not found in %v", err)
	}
}

func TestParseAccepts(t *testing.T) {
	tests := []string{
		validJSON,
		// A CloudEvents extension attribute is allowed.
		strings.Replace(validJSON, `"subject"`, `"traceparent":"00-abc","subject"`, 1),
		// time and subject are optional in CloudEvents 1.0.
		strings.Replace(validJSON, `"time":"2025-03-01T08:00:01.5Z",`, ``, 1),
		strings.Replace(validJSON, `"application/json"`, `"application/json; charset=utf-8"`, 1),
		strings.Replace(validJSON, `.5Z"`, `.5+01:00"`, 1),
	}
	for i, in := range tests {
		if _, err := Parse([]byte(in)); err != nil {
			t.Errorf("case %d: %v", i, err)
		}
	}
}

func FuzzParse(f *testing.F) {
	f.Add([]byte(validJSON))
	f.Add([]byte(`{}`))
	f.Add([]byte(`{"specversion":"1.0","id":"x","source":"/s","type":"tallyd.line.in","data":{"kind":"in"}}`))
	f.Add([]byte(strings.Replace(validJSON, `.5Z"`, `.5-07:00"`, 1)))
	f.Fuzz(func(t *testing.T, b []byte) {
		ev, err := Parse(b)
		if err != nil {
			if !errors.Is(err, ErrMalformed) {
				t.Fatalf("error %v does not wrap ErrMalformed", err)
			}
			return
		}
		// Whatever Parse accepts, it writes back in a form it accepts, and
		// that form is a fixed point.
		once, err := json.Marshal(ev)
		if err != nil {
			t.Fatalf("marshal accepted event: %v", err)
		}
		ev2, err := Parse(once)
		if err != nil {
			t.Fatalf("re-parse %s: %v", once, err)
		}
		twice, err := json.Marshal(ev2)
		if err != nil {
			t.Fatal(err)
		}
		if string(once) != string(twice) {
			t.Fatalf("not a fixed point:\n%s\n%s", once, twice)
		}
	})
}

// TestEventNumbersReadable: times are written to the millisecond and boxes
// to a tenth of a pixel, not as binary fractions such as 42.773999999 or
// 301.40000000000003.
func TestEventNumbersReadable(t *testing.T) {
	e := NewEngine(Meta{Site: "s", Source: "c", Start: time.Date(2026, 6, 1, 8, 0, 0, 0, time.UTC)}, nil, nil)
	ts := 42785571142 * time.Nanosecond // frame 427 at 9.98 fps
	tr := track.Track{ID: 3, Class: "person", Box: detect.Box{X1: 301.40000000000003, Y1: 170.04999, X2: 325.123456, Y2: 221.99999}}
	b, err := json.Marshal(e.event("gate", KindIn, tr, 427, ts))
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{`"time":"2026-06-01T08:00:42.786Z"`, `"source_time_s":42.786`, `"box":[301.4,170,325.1,222]`} {
		if !strings.Contains(string(b), want) {
			t.Errorf("event %s lacks %s", b, want)
		}
	}
}
