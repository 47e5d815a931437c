package events

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"strings"
	"time"
)

// SpecVersion is the CloudEvents specification version events are written in.
const SpecVersion = "1.0"

// ContentType is the datacontenttype of every event: data is a JSON object.
const ContentType = "application/json"

// Kind is what happened: the last NATS subject token and Data.Kind.
type Kind string

// Event kinds. A line rule emits in and out; a zone rule enter, exit and
// dwell. Totals count them under the same names.
const (
	KindIn    Kind = "in"    // line crossed from its left to its right side
	KindOut   Kind = "out"   // line crossed from its right to its left side
	KindEnter Kind = "enter" // track came inside a zone
	KindExit  Kind = "exit"  // track left a zone, or its stay was closed
	KindDwell Kind = "dwell" // track stayed inside a zone for the rule's threshold
	// KindTotals is a rule's counts over one interval (see IntervalConfig).
	KindTotals Kind = "totals"
	// KindReset says a rule starts counting from 0: it is new, or its
	// definition changed at a reload (Data.Reason says which).
	KindReset Kind = "reset"
	// KindHandover says a source got a new holder: another daemon of a
	// shared site now counts it (Data.Handover says who and why).
	KindHandover Kind = "handover"
	// KindOccupancy says a site-wide area's occupancy or totals changed
	// (Data.Area holds the sums and the zones behind them).
	KindOccupancy Kind = "occupancy"
)

// Event types (the CloudEvents "type" attribute).
const (
	TypeLineIn     = "tallyd.line.in"
	TypeLineOut    = "tallyd.line.out"
	TypeZoneEnter  = "tallyd.zone.enter"
	TypeZoneExit   = "tallyd.zone.exit"
	TypeZoneDwell  = "tallyd.zone.dwell"
	TypeLineTotals = "tallyd.line.totals"
	TypeZoneTotals = "tallyd.zone.totals"
	TypeRuleReset  = "tallyd.rule.reset"
	// TypeSourceHandover is the type of a KindHandover event.
	TypeSourceHandover = "tallyd.source.handover"
	// TypeAreaOccupancy is the type of a KindOccupancy event.
	TypeAreaOccupancy = "tallyd.area.occupancy"
)

// Reason says why a zone stay was closed by something other than the track
// leaving the zone (Data.Reason of an exit).
type Reason string

// Exit reasons.
const (
	ReasonTrackEnded Reason = "track_ended" // the tracker dropped the track while inside
	ReasonStreamEnd  Reason = "stream_end"  // the source reached its end
	ReasonSourceLost Reason = "source_lost" // the source went away
	// Reload reasons: an exit closed because its zone changed or went, and
	// a reset event's cause.
	ReasonRuleChanged Reason = "rule_changed"
	ReasonRuleNew     Reason = "rule_new"
	// ReasonHandover: a zone stay closed because the source moved to
	// another daemon of a shared site (see Engine.Inherit).
	ReasonHandover Reason = "handover"
)

// typeOfKind maps each kind of a single event to its CloudEvents type.
var typeOfKind = map[Kind]string{
	KindIn:    TypeLineIn,
	KindOut:   TypeLineOut,
	KindEnter: TypeZoneEnter,
	KindExit:  TypeZoneExit,
	KindDwell: TypeZoneDwell,
}

// kindOfType maps each CloudEvents type to the kind its data carries.
var kindOfType = map[string]Kind{
	TypeLineIn: KindIn, TypeLineOut: KindOut, TypeZoneEnter: KindEnter, TypeZoneExit: KindExit,
	TypeZoneDwell: KindDwell, TypeLineTotals: KindTotals, TypeZoneTotals: KindTotals,
	TypeRuleReset: KindReset, TypeSourceHandover: KindHandover, TypeAreaOccupancy: KindOccupancy,
}

// Event is one counting event in CloudEvents 1.0 structured-mode JSON.
type Event struct {
	SpecVersion     string    `json:"specversion"`     // always "1.0"
	ID              string    `json:"id"`              // stable for the same input
	Source          string    `json:"source"`          // "/tallyd/<site>/<source>"
	Type            string    `json:"type"`            // one of the Type constants
	Subject         string    `json:"subject"`         // rule name
	Time            time.Time `json:"time"`            // Meta.Start + source timestamp
	DataContentType string    `json:"datacontenttype"` // "application/json"
	Data            Data      `json:"data"`
}

// Data is the payload of an Event.
type Data struct {
	Site       string      `json:"site"`
	Source     string      `json:"source"`
	Rule       string      `json:"rule"`
	Kind       Kind        `json:"kind"`                  // in|out|enter|exit|dwell
	TrackID    int64       `json:"track_id,omitempty"`    // not in totals
	Class      string      `json:"class,omitempty"`       // not in totals
	SourceTime float64     `json:"source_time_s"`         // seconds since stream start
	Frame      int64       `json:"frame"`                 // the frame that caused it (totals: the first frame past the interval)
	Box        *[4]float64 `json:"box,omitempty"`         // x1,y1,x2,y2 in source pixels; not in totals
	DwellS     *float64    `json:"dwell_s,omitempty"`     // exit and dwell: time inside so far
	Occupancy  *int        `json:"occupancy,omitempty"`   // enter and exit: tracks inside after the frame; occupancy: the area's
	Reason     Reason      `json:"reason,omitempty"`      // exit: why the stay was closed, if not by leaving
	ThresholdS *float64    `json:"threshold_s,omitempty"` // dwell: the rule's threshold
	// FrameAgeMS is how old the frame behind the event was when the event was
	// published (capture to publish), in milliseconds. Not part of the id.
	FrameAgeMS *float64 `json:"frame_age_ms,omitempty"`
	// Interval is set on totals events only.
	Interval *Interval `json:"interval,omitempty"`
	// Lease is the fencing token of the hold that produced the event on a
	// site shared by several daemons; 0 when the site is not shared. Not
	// part of the id.
	Lease uint64 `json:"lease,omitempty"`
	// Handover is set on handover events only.
	Handover *HandoverData `json:"handover,omitempty"`
	// Area is set on area occupancy events only.
	Area *AreaData `json:"area,omitempty"`
}

// Hand-over causes (HandoverData.Cause).
const (
	HandoverFirst    = "first"    // no holder was known before
	HandoverReleased = "released" // the previous holder let the source go cleanly
	HandoverExpired  = "expired"  // the previous holder stopped renewing its lease
)

// HandoverData is the payload of a handover event: a source of a shared site
// got a new holder.
type HandoverData struct {
	From  string  `json:"from,omitempty"` // daemon that held the source before; "" when none is known
	To    string  `json:"to"`             // daemon that holds it now
	Cause string  `json:"cause"`          // HandoverFirst, HandoverReleased or HandoverExpired
	GapS  float64 `json:"gap_s"`          // seconds without a holder: from the previous holder's last sign of life to this holder's first frame
}

// AreaData is the payload of an area occupancy event: the sums over the
// zones, on any sources, that name the area.
type AreaData struct {
	Name      string     `json:"name"`
	Occupancy int        `json:"occupancy"` // sum of its zones' occupancies
	Enter     int        `json:"enter"`     // sum of its zones' enter totals
	Exit      int        `json:"exit"`      // sum of its zones' exit totals
	Zones     []AreaZone `json:"zones"`
}

// AreaZone is one zone's share of an area.
type AreaZone struct {
	Source    string `json:"source"`
	Rule      string `json:"rule"`
	Occupancy int    `json:"occupancy"`
	Enter     int    `json:"enter"`
	Exit      int    `json:"exit"`
}

// HandoverEvent is the event saying that source m.Source got a new holder,
// at source time ts of frame (the new holder's first frame). Its id depends
// on m.Run, so every hold of a live source gives its own id.
func HandoverEvent(m Meta, frame int64, ts time.Duration, h HandoverData) Event {
	return Event{
		SpecVersion:     SpecVersion,
		ID:              EventID(m.Site, m.Source, "", KindHandover, 0, frame, m.Run+"/handover"),
		Source:          EventSource(m.Site, m.Source),
		Type:            TypeSourceHandover,
		Time:            m.Start.Add(ts).UTC().Round(time.Millisecond),
		DataContentType: ContentType,
		Data: Data{
			Site: m.Site, Source: m.Source, Kind: KindHandover,
			SourceTime: *seconds(ts), Frame: frame, Handover: &h,
		},
	}
}

// AreaEvent is the event carrying area a's occupancy and totals at time at.
// seq tells the events of one keeper apart (it counts them) and run the
// keepers (a new keeper of the area uses a new run), so ids never repeat.
// The CloudEvents source is "/tallyd/<site>/area/<name>", the subject the
// area's name; Data.Source and Data.Rule are empty.
func AreaEvent(site string, at time.Time, seq int64, run string, a AreaData) Event {
	a.Zones = append([]AreaZone(nil), a.Zones...)
	occ := a.Occupancy
	return Event{
		SpecVersion:     SpecVersion,
		ID:              EventID(site, "area/"+a.Name, "", KindOccupancy, 0, seq, run),
		Source:          EventSource(site, "area/"+a.Name),
		Type:            TypeAreaOccupancy,
		Subject:         a.Name,
		Time:            at.UTC().Round(time.Millisecond),
		DataContentType: ContentType,
		Data:            Data{Site: site, Kind: KindOccupancy, Occupancy: &occ, Area: &a},
	}
}

// EventSource is the CloudEvents source attribute for a site and a source.
func EventSource(site, source string) string { return "/tallyd/" + site + "/" + source }

// EventID is the stable id of an event: the hex of a SHA-256 over its
// identifying fields, cut to 128 bits. The same input always gives the same
// id, so a replayed stream can be de-duplicated downstream. run tells runs
// of a live source apart (their frame numbers start again at 0); it is ""
// for recorded sources, whose re-runs are the same events.
func EventID(site, source, rule string, kind Kind, trackID, frame int64, run string) string {
	h := sha256.New()
	parts := []string{site, source, rule, string(kind)}
	if run != "" {
		parts = append(parts, run)
	}
	for _, s := range parts {
		var n [8]byte
		binary.BigEndian.PutUint64(n[:], uint64(len(s)))
		h.Write(n[:])
		h.Write([]byte(s))
	}
	var n [16]byte
	binary.BigEndian.PutUint64(n[:8], uint64(trackID))
	binary.BigEndian.PutUint64(n[8:], uint64(frame))
	h.Write(n[:])
	return hex.EncodeToString(h.Sum(nil)[:16])
}

// NATSSubject is the subject the event is published on:
// "<prefix>.<site>.<source>.<rule>.<kind>"; a handover event's is
// "<prefix>.<site>.<source>.handover" and an area's
// "<prefix>.<site>.area.<name>.occupancy" (no rule event ends in
// "occupancy", so the two never collide). Tokens are not checked here; the
// bus package refuses to publish on an invalid subject.
func (e Event) NATSSubject(prefix string) string {
	switch e.Data.Kind {
	case KindHandover:
		return strings.Join([]string{prefix, e.Data.Site, e.Data.Source, string(KindHandover)}, ".")
	case KindOccupancy:
		name := e.Subject
		if e.Data.Area != nil {
			name = e.Data.Area.Name
		}
		return strings.Join([]string{prefix, e.Data.Site, "area", name, string(KindOccupancy)}, ".")
	}
	return strings.Join([]string{prefix, e.Data.Site, e.Data.Source, e.Data.Rule, string(e.Data.Kind)}, ".")
}

// ErrMalformed is wrapped by every error Parse returns.
var ErrMalformed = errors.New("malformed event")

// AttrError is a Parse error about one attribute; Attr is the CloudEvents
// attribute name, or "data.<field>" for a payload field.
type AttrError struct {
	Attr    string
	Problem string
}

// Error names the attribute and the problem.
func (e *AttrError) Error() string {
	return fmt.Sprintf("%s: attribute %q: %s", ErrMalformed, e.Attr, e.Problem)
}

// Unwrap makes errors.Is(err, ErrMalformed) hold.
func (e *AttrError) Unwrap() error { return ErrMalformed }

// Parse decodes one structured-mode event strictly: the JSON must be an
// object whose attribute names match exactly (CloudEvents names are lower
// case); specversion must be "1.0"; id, source and type must be non-empty
// strings; type must be a tallyd type; datacontenttype, when present, must be
// JSON; time, when present, RFC 3339; data must be an object whose kind
// matches type; a handover event must carry data.handover and an occupancy
// event data.area. Unknown attributes (CloudEvents extensions) are accepted and
// dropped.
func Parse(b []byte) (Event, error) {
	if !bytes.HasPrefix(bytes.TrimLeft(b, " \t\r\n"), []byte("{")) {
		return Event{}, fmt.Errorf("%w: not a JSON object", ErrMalformed)
	}
	var attrs map[string]json.RawMessage
	if err := json.Unmarshal(b, &attrs); err != nil {
		return Event{}, fmt.Errorf("%w: %w", ErrMalformed, err)
	}
	var ev Event
	var err error
	if ev.SpecVersion, err = stringAttr(attrs, "specversion", true); err != nil {
		return Event{}, err
	}
	if ev.SpecVersion != SpecVersion {
		return Event{}, &AttrError{"specversion", fmt.Sprintf("want %q, found %q", SpecVersion, ev.SpecVersion)}
	}
	if ev.ID, err = stringAttr(attrs, "id", true); err != nil {
		return Event{}, err
	}
	if ev.Source, err = stringAttr(attrs, "source", true); err != nil {
		return Event{}, err
	}
	if ev.Type, err = stringAttr(attrs, "type", true); err != nil {
		return Event{}, err
	}
	if ev.Subject, err = stringAttr(attrs, "subject", false); err != nil {
		return Event{}, err
	}
	if ev.DataContentType, err = stringAttr(attrs, "datacontenttype", false); err != nil {
		return Event{}, err
	}
	if ct := ev.DataContentType; ct != "" && ct != ContentType && !strings.HasPrefix(ct, ContentType+";") {
		return Event{}, &AttrError{"datacontenttype", fmt.Sprintf("want %q, found %q", ContentType, ct)}
	}
	ts, err := stringAttr(attrs, "time", false)
	if err != nil {
		return Event{}, err
	}
	if ts != "" {
		if ev.Time, err = time.Parse(time.RFC3339Nano, ts); err != nil {
			return Event{}, &AttrError{"time", fmt.Sprintf("not RFC 3339: %q", ts)}
		}
	}
	wantKind := kindOfType[ev.Type]
	if wantKind == "" {
		return Event{}, &AttrError{"type", fmt.Sprintf("unknown type %q", ev.Type)}
	}
	raw, ok := attrs["data"]
	if !ok || !bytes.HasPrefix(bytes.TrimLeft(raw, " \t\r\n"), []byte("{")) {
		return Event{}, &AttrError{"data", "missing or not a JSON object"}
	}
	if err := json.Unmarshal(raw, &ev.Data); err != nil {
		return Event{}, &AttrError{"data", err.Error()}
	}
	if ev.Data.Kind != wantKind {
		return Event{}, &AttrError{"data.kind", fmt.Sprintf("want %q for type %q, found %q", wantKind, ev.Type, ev.Data.Kind)}
	}
	switch {
	case wantKind == KindHandover && ev.Data.Handover == nil:
		return Event{}, &AttrError{"data.handover", "missing in a handover event"}
	case wantKind == KindOccupancy && ev.Data.Area == nil:
		return Event{}, &AttrError{"data.area", "missing in an occupancy event"}
	}
	return ev, nil
}

// stringAttr reads one string attribute; required ones must be present and
// non-empty.
func stringAttr(attrs map[string]json.RawMessage, name string, required bool) (string, error) {
	raw, ok := attrs[name]
	if !ok || string(raw) == "null" {
		if required {
			return "", &AttrError{name, "missing"}
		}
		return "", nil
	}
	var s string
	if err := json.Unmarshal(raw, &s); err != nil {
		return "", &AttrError{name, "not a string"}
	}
	if required && s == "" {
		return "", &AttrError{name, "empty"}
	}
	return s, nil
}
