package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"sort"
	"time"

	"tallyd/events"
	"tallyd/internal/pipeline"
)

func cmdTotals(ctx context.Context, args []string, stdout, _ io.Writer) error {
	fs := newFlags("totals", "totals -c FILE [--json]", stdout)
	cfgPath := fs.String("c", "", "site file (YAML)")
	asJSON := fs.Bool("json", false, "print the state as one JSON object: source -> rule -> state")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	cfg, err := loadConfig(*cfgPath)
	if err != nil {
		return err
	}
	ctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	state, from, err := pipeline.LiveState(ctx, cfg)
	if err != nil {
		return err
	}
	if *asJSON {
		b, err := json.Marshal(state)
		if err != nil {
			return err
		}
		fmt.Fprintln(stdout, string(b))
		return nil
	}
	if from == "" {
		fmt.Fprintf(stdout, "site %s: no live state yet (no bucket reachable, no %s)\n", cfg.Site, cfg.StatePath("state.json"))
		return nil
	}
	fmt.Fprintf(stdout, "site %s, live state from %s\n\n", cfg.Site, from)
	fmt.Fprintf(stdout, "%-14s %-18s %-14s %8s %8s  %-10s %s\n", "source", "rule", "count", "total", "today", "day", "at")
	sources := make([]string, 0, len(state))
	for s := range state {
		sources = append(sources, s)
	}
	sort.Strings(sources)
	for _, src := range sources {
		for _, rule := range pipeline.RuleNames(totalsOf(state[src])) {
			st := state[src][rule]
			var day []metric
			if st.Day != nil {
				day = metrics(*st.Day)
			}
			for i, m := range metrics(st.Totals) {
				today := "-"
				if i < len(day) && st.DayOf != "" {
					today = fmt.Sprint(day[i].value)
				}
				fmt.Fprintf(stdout, "%-14s %-18s %-14s %8d %8s  %-10s %s\n", src, rule, m.name, m.value, today, st.DayOf, st.At.Format(time.RFC3339))
			}
			if st.Totals.Kind == events.RuleZone {
				fmt.Fprintf(stdout, "%-14s %-18s %-14s %8d\n", src, rule, "occupancy now", st.Occupancy)
			}
		}
	}
	return nil
}

func totalsOf(m map[string]events.RuleState) map[string]events.Totals {
	out := make(map[string]events.Totals, len(m))
	for k, v := range m {
		out[k] = v.Totals
	}
	return out
}
