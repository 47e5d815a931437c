package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"strings"
	"time"

	"tallyd/events/bus"
	"tallyd/internal/fleet"
)

const fleetSynopsis = "fleet --site NAME --nats URL[,URL...] [--json] [--timeout D]"

// cmdFleet prints which daemon holds which source and area of a shared
// site, the members with their capacity and lease ages, and the last
// hand-over of each source and area.
func cmdFleet(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("fleet", fleetSynopsis, stdout)
	site := fs.String("site", "", "the shared site's name (as given to site push)")
	asJSON := fs.Bool("json", false, "print the status as one JSON object")
	timeout := fs.Duration("timeout", 10*time.Second, "give up after this long")
	bf := addBrokerFlags(fs, "fleet")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	switch {
	case *site == "":
		return usageErr("--site NAME is required (see tallyd fleet --help)")
	case *bf.url == "":
		return usageErr("--nats URL is required: a shared site lives on an external NATS server (see tallyd fleet --help)")
	case *timeout <= 0:
		return usageErr("--timeout %v: must be above 0", *timeout)
	}
	if err := bus.ValidToken(*site); err != nil {
		return usageErr("--site: %v", err)
	}
	ctx, cancel := context.WithTimeout(ctx, *timeout)
	defer cancel()
	nc, js, err := bf.connect("tallyd-fleet", stderr, nil)
	if err != nil {
		return err
	}
	defer nc.Close()
	st, err := fleet.ReadStatus(ctx, js, *site)
	if errors.Is(err, fleet.ErrNoFleet) {
		return usageErr("site %s: %v", *site, fleet.ErrNoFleet)
	}
	if err != nil {
		return err
	}
	if *asJSON {
		b, err := json.Marshal(st)
		if err != nil {
			return err
		}
		fmt.Fprintln(stdout, string(b))
		return nil
	}
	printFleet(stdout, st)
	return nil
}

// printFleet prints the status as three tables.
func printFleet(w io.Writer, st fleet.Status) {
	fmt.Fprintf(w, "site %s at %s: %d members, %d leases\n", st.Site, st.At.UTC().Format(time.RFC3339), len(st.Members), len(st.Leases))
	fmt.Fprintf(w, "\n%-24s %8s %8s %12s  %s\n", "member", "capacity", "holding", "renewed ago", "since")
	for _, m := range st.Members {
		fmt.Fprintf(w, "%-24s %8d %8d %11.1fs  %s\n", m.Name, m.Capacity, m.Holding, m.RenewedAgoS, m.Since.UTC().Format(time.RFC3339))
	}
	fmt.Fprintf(w, "\n%-7s %-18s %-24s %8s %10s %12s\n", "kind", "name", "holder", "token", "held", "renewed ago")
	for _, l := range st.Leases {
		fmt.Fprintf(w, "%-7s %-18s %-24s %8d %9.1fs %11.1fs\n", l.Kind, l.Name, l.Holder, l.Token, l.HeldS, l.RenewedAgoS)
	}
	if len(st.Handovers) == 0 {
		return
	}
	fmt.Fprintf(w, "\n%-7s %-18s %-20s %-10s %8s  %s\n", "kind", "name", "from -> to", "cause", "gap", "at")
	for _, h := range st.Handovers {
		from := h.From
		if from == "" {
			from = "-"
		}
		gap := "-"
		if h.GapS != nil {
			gap = fmt.Sprintf("%.1fs", *h.GapS)
		}
		fmt.Fprintf(w, "%-7s %-18s %-20s %-10s %8s  %s\n", h.Kind, h.Name, strings.Join([]string{from, h.To}, " -> "), h.Cause, gap, h.At.UTC().Format(time.RFC3339))
	}
}
