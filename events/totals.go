package events

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"strconv"
)

// Totals kinds.
const (
	TotalsCrossing = "crossing" // a line rule: In and Out are meaningful
	TotalsZone     = "zone"     // a zone rule: Entries, Exits, DwellAlerts, MaxOccupancy
)

// Totals sums the events of one rule since the engine started. Its JSON form
// holds only the fields of its kind.
type Totals struct {
	Kind         string // TotalsCrossing or TotalsZone
	In, Out      int
	Entries      int
	Exits        int
	DwellAlerts  int
	MaxOccupancy int // most tracks inside the zone in one frame
}

// ErrBadTotals is wrapped by every Totals decoding error.
var ErrBadTotals = errors.New("bad totals")

// MarshalJSON writes {"kind":"crossing","in":A,"out":B} for a line and
// {"kind":"zone","entries":E,"exits":X,"dwell_alerts":D,"max_occupancy":M}
// for a zone.
func (t Totals) MarshalJSON() ([]byte, error) {
	var b []byte
	switch t.Kind {
	case TotalsCrossing:
		b = append(b, `{"kind":"crossing","in":`...)
		b = strconv.AppendInt(b, int64(t.In), 10)
		b = append(b, `,"out":`...)
		b = strconv.AppendInt(b, int64(t.Out), 10)
	case TotalsZone:
		b = append(b, `{"kind":"zone","entries":`...)
		b = strconv.AppendInt(b, int64(t.Entries), 10)
		b = append(b, `,"exits":`...)
		b = strconv.AppendInt(b, int64(t.Exits), 10)
		b = append(b, `,"dwell_alerts":`...)
		b = strconv.AppendInt(b, int64(t.DwellAlerts), 10)
		b = append(b, `,"max_occupancy":`...)
		b = strconv.AppendInt(b, int64(t.MaxOccupancy), 10)
	default:
		return nil, fmt.Errorf("%w: unknown kind %q", ErrBadTotals, t.Kind)
	}
	return append(b, '}'), nil
}

// UnmarshalJSON reads what MarshalJSON writes. It rejects an unknown kind,
// fields of the other kind, unknown fields and negative counts.
func (t *Totals) UnmarshalJSON(b []byte) error {
	var head struct {
		Kind string `json:"kind"`
	}
	if err := json.Unmarshal(b, &head); err != nil {
		return fmt.Errorf("%w: %w", ErrBadTotals, err)
	}
	dec := func(v any) error {
		d := json.NewDecoder(bytes.NewReader(b))
		d.DisallowUnknownFields()
		if err := d.Decode(v); err != nil {
			return fmt.Errorf("%w: %s totals: %w", ErrBadTotals, head.Kind, err)
		}
		return nil
	}
	var out Totals
	switch head.Kind {
	case TotalsCrossing:
		var v struct {
			Kind string `json:"kind"`
			In   int    `json:"in"`
			Out  int    `json:"out"`
		}
		if err := dec(&v); err != nil {
			return err
		}
		out = Totals{Kind: v.Kind, In: v.In, Out: v.Out}
	case TotalsZone:
		var v struct {
			Kind         string `json:"kind"`
			Entries      int    `json:"entries"`
			Exits        int    `json:"exits"`
			DwellAlerts  int    `json:"dwell_alerts"`
			MaxOccupancy int    `json:"max_occupancy"`
		}
		if err := dec(&v); err != nil {
			return err
		}
		out = Totals{Kind: v.Kind, Entries: v.Entries, Exits: v.Exits, DwellAlerts: v.DwellAlerts, MaxOccupancy: v.MaxOccupancy}
	default:
		return fmt.Errorf("%w: unknown kind %q", ErrBadTotals, head.Kind)
	}
	for _, c := range []int{out.In, out.Out, out.Entries, out.Exits, out.DwellAlerts, out.MaxOccupancy} {
		if c < 0 {
			return fmt.Errorf("%w: negative count %d", ErrBadTotals, c)
		}
	}
	*t = out
	return nil
}
