package events

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"strconv"
)

// RuleKind says whether a rule is a counting line or a zone; the site file
// and the totals use the same words.
type RuleKind string

// Rule kinds.
const (
	RuleLine RuleKind = "line" // a counting line: In and Out are meaningful
	RuleZone RuleKind = "zone" // a zone: Enter, Exit, Dwell, MaxOccupancy
)

// Totals sums the events of one rule since the engine started, one field per
// event kind. Its JSON form holds only the fields of its rule kind, named
// like the event kinds: {"kind":"line","in":A,"out":B} or
// {"kind":"zone","enter":E,"exit":X,"dwell":D,"max_occupancy":M}.
type Totals struct {
	Kind         RuleKind
	In, Out      int // line: crossings each way
	Enter, Exit  int // zone: stays begun and ended
	Dwell        int // zone: dwell alerts
	MaxOccupancy int // zone: most tracks inside in one frame
}

// ErrBadTotals is wrapped by every Totals decoding error.
var ErrBadTotals = errors.New("bad totals")

// MarshalJSON writes the form described at Totals.
func (t Totals) MarshalJSON() ([]byte, error) {
	var b []byte
	switch t.Kind {
	case RuleLine:
		b = append(b, `{"kind":"line","in":`...)
		b = strconv.AppendInt(b, int64(t.In), 10)
		b = append(b, `,"out":`...)
		b = strconv.AppendInt(b, int64(t.Out), 10)
	case RuleZone:
		b = append(b, `{"kind":"zone","enter":`...)
		b = strconv.AppendInt(b, int64(t.Enter), 10)
		b = append(b, `,"exit":`...)
		b = strconv.AppendInt(b, int64(t.Exit), 10)
		b = append(b, `,"dwell":`...)
		b = strconv.AppendInt(b, int64(t.Dwell), 10)
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
		Kind RuleKind `json:"kind"`
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
	case RuleLine:
		var v struct {
			Kind RuleKind `json:"kind"`
			In   int      `json:"in"`
			Out  int      `json:"out"`
		}
		if err := dec(&v); err != nil {
			return err
		}
		out = Totals{Kind: v.Kind, In: v.In, Out: v.Out}
	case RuleZone:
		var v struct {
			Kind         RuleKind `json:"kind"`
			Enter        int      `json:"enter"`
			Exit         int      `json:"exit"`
			Dwell        int      `json:"dwell"`
			MaxOccupancy int      `json:"max_occupancy"`
		}
		if err := dec(&v); err != nil {
			return err
		}
		out = Totals{Kind: v.Kind, Enter: v.Enter, Exit: v.Exit, Dwell: v.Dwell, MaxOccupancy: v.MaxOccupancy}
	default:
		return fmt.Errorf("%w: unknown kind %q", ErrBadTotals, head.Kind)
	}
	for _, c := range []int{out.In, out.Out, out.Enter, out.Exit, out.Dwell, out.MaxOccupancy} {
		if c < 0 {
			return fmt.Errorf("%w: negative count %d", ErrBadTotals, c)
		}
	}
	*t = out
	return nil
}
