package fleet

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"slices"

	"github.com/nats-io/nats.go/jetstream"

	"tallyd/events"
)

// ZoneRef names one zone of an area: rule Rule of source Source.
type ZoneRef struct{ Source, Rule string }

// AreaKey is the state bucket key KeepArea writes area name's state under
// ("/" never occurs in source ids, so it never collides with a rule's key).
func AreaKey(name string) string { return "area/" + name }

// KeepArea keeps area name until ctx ends: it watches the state bucket keys
// "<source>.<rule>" of the area's zones (values: JSON events.RuleState),
// sums their occupancy and enter/exit totals, writes the area's state (JSON
// events.AreaData) under AreaKey(name) in the same bucket whenever a zone's
// share changes, and calls emit when the area's occupancy, enter or exit
// total changes — including at start when they differ from the state the
// previous keeper wrote. A zone with no state yet counts zero. It returns
// nil when ctx ends, an error when the bucket cannot be read or written.
func KeepArea(ctx context.Context, state jetstream.KeyValue, name string, zones []ZoneRef, emit func(events.AreaData)) error {
	if err := checkName("area name", name); err != nil {
		return fmt.Errorf("keep area: %w", err)
	}
	if len(zones) == 0 {
		return fmt.Errorf("keep area %s: no zones", name)
	}
	keys := make([]string, len(zones))
	for i, z := range zones {
		if err := checkName(fmt.Sprintf("area %s: zones[%d].source", name, i), z.Source); err != nil {
			return fmt.Errorf("keep area: %w", err)
		}
		if err := checkName(fmt.Sprintf("area %s: zones[%d].rule", name, i), z.Rule); err != nil {
			return fmt.Errorf("keep area: %w", err)
		}
		keys[i] = z.Source + "." + z.Rule
	}
	var last *events.AreaData
	if e, err := state.Get(ctx, AreaKey(name)); err == nil {
		var a events.AreaData
		if json.Unmarshal(e.Value(), &a) == nil {
			last = &a
		}
	} else if !errors.Is(err, jetstream.ErrKeyNotFound) && !errors.Is(err, jetstream.ErrKeyDeleted) {
		if ctx.Err() != nil {
			return nil
		}
		return fmt.Errorf("keep area %s: read %s: %w", name, AreaKey(name), err)
	}
	zs := make(map[string]events.RuleState, len(zones))
	revs := make(map[string]uint64, len(zones))
	// apply records one zone's state; it says whether it was news.
	apply := func(key string, rev uint64, put bool, value []byte) bool {
		if rev <= revs[key] {
			return false
		}
		revs[key] = rev
		var st events.RuleState
		if put && json.Unmarshal(value, &st) != nil {
			return false // not a rule state: ignored, as the totals command does
		}
		zs[key] = st
		return true
	}
	// publish writes the area's state when it changed and emits when its
	// sums changed.
	publish := func() error {
		a := sumArea(name, zones, keys, zs)
		if last != nil && sameArea(*last, a) {
			return nil
		}
		if _, err := state.Put(ctx, AreaKey(name), mustJSON(a)); err != nil {
			return err
		}
		if last == nil || last.Occupancy != a.Occupancy || last.Enter != a.Enter || last.Exit != a.Exit {
			emit(a)
		}
		last = &a
		return nil
	}
	for ctx.Err() == nil {
		// Watch first, then read the current values: nothing falls between.
		w, err := state.WatchFiltered(ctx, slices.Clone(keys), jetstream.UpdatesOnly()) // it rewrites the slice it gets
		if err != nil {
			if ctx.Err() != nil {
				return nil
			}
			return fmt.Errorf("keep area %s: watch %s: %w", name, state.Bucket(), err)
		}
		for _, k := range keys {
			e, err := state.Get(ctx, k)
			switch {
			case err == nil:
				apply(k, e.Revision(), true, e.Value())
			case errors.Is(err, jetstream.ErrKeyNotFound) || errors.Is(err, jetstream.ErrKeyDeleted):
			case ctx.Err() != nil:
				_ = w.Stop()
				return nil
			default:
				_ = w.Stop()
				return fmt.Errorf("keep area %s: read %s: %w", name, k, err)
			}
		}
		if err := publish(); err != nil {
			_ = w.Stop()
			if ctx.Err() != nil {
				return nil
			}
			return fmt.Errorf("keep area %s: write %s: %w", name, AreaKey(name), err)
		}
		for open := true; open; {
			select {
			case <-ctx.Done():
				_ = w.Stop()
				return nil
			case e, ok := <-w.Updates():
				if !ok {
					open = false
					break
				}
				if e == nil || !apply(e.Key(), e.Revision(), e.Operation() == jetstream.KeyValuePut, e.Value()) {
					continue
				}
				if err := publish(); err != nil {
					_ = w.Stop()
					if ctx.Err() != nil {
						return nil
					}
					return fmt.Errorf("keep area %s: write %s: %w", name, AreaKey(name), err)
				}
			}
		}
		_ = w.Stop()
	}
	return nil
}

func sumArea(name string, zones []ZoneRef, keys []string, zs map[string]events.RuleState) events.AreaData {
	a := events.AreaData{Name: name, Zones: make([]events.AreaZone, len(zones))}
	for i, z := range zones {
		st := zs[keys[i]]
		a.Zones[i] = events.AreaZone{Source: z.Source, Rule: z.Rule, Occupancy: st.Occupancy, Enter: st.Totals.Enter, Exit: st.Totals.Exit}
		a.Occupancy += st.Occupancy
		a.Enter += st.Totals.Enter
		a.Exit += st.Totals.Exit
	}
	return a
}

func sameArea(a, b events.AreaData) bool {
	return a.Name == b.Name && a.Occupancy == b.Occupancy && a.Enter == b.Enter && a.Exit == b.Exit && slices.Equal(a.Zones, b.Zones)
}
