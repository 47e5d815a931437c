package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"syscall"
	"time"

	"tallyd/capture"
	"tallyd/events"
	"tallyd/internal/pipeline"
)

func cmdRun(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("run", "run -c FILE [--status-every 10s]", stdout)
	cfgPath := fs.String("c", "", "site file (YAML)")
	every := fs.Duration("status-every", 10*time.Second, "log a status line per source at this interval (0: never)")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	cfg, err := loadConfig(*cfgPath)
	if err != nil {
		return err
	}
	log := newLogger(cfg, stderr)
	p, err := pipeline.Build(cfg, pipeline.Options{Pace: capture.PaceRealtime, Log: log, StatusEvery: *every})
	if err != nil {
		return err
	}
	defer p.Close()
	log.Info("running", "site", cfg.Site, "sources", len(cfg.Sources), "nats", p.NATSURL())
	runErr := p.Run(ctx)
	s := p.Summary()
	log.Info("stopped", "frames_read", s.FramesRead, "frames_processed", s.FramesProcessed,
		"frames_dropped", s.FramesDropped, "events_published", s.EventsPublished)
	return runErr
}

func cmdReplay(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("replay", "replay -c FILE [--pace max|realtime] [--summary table|json] [--tracks OUT.txt]", stdout)
	cfgPath := fs.String("c", "", "site file (YAML)")
	paceName := fs.String("pace", "max", "max: every frame as fast as the CPU allows; realtime: source clock, drop when behind")
	format := fs.String("summary", "table", "table: counts beside the truth when known; json: one JSON line last")
	tracksOut := fs.String("tracks", "", "also write tracks in the MOTChallenge text format to this file (-<source> added with several sources)")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	pace, err := capture.ParsePace(*paceName)
	if err != nil {
		return usageErr("--pace: %v", err)
	}
	if *format != "table" && *format != "json" {
		return usageErr("--summary: want table or json (found %q)", *format)
	}
	cfg, err := loadConfig(*cfgPath)
	if err != nil {
		return err
	}
	log := newLogger(cfg, stderr)
	p, err := pipeline.Build(cfg, pipeline.Options{Pace: pace, Log: log, TracksOut: *tracksOut})
	if err != nil {
		return err
	}
	defer p.Close()
	start := time.Now()
	runErr := p.Run(ctx)
	elapsed := time.Since(start)
	s := p.Summary()
	if *format == "json" {
		b, err := json.Marshal(s)
		if err != nil {
			return err
		}
		fmt.Fprintln(stdout, string(b))
	} else {
		printTable(stdout, s, p.Truth(), elapsed)
	}
	return runErr
}

// printTable writes the counts, beside the truth for generated sources.
func printTable(w io.Writer, s pipeline.Summary, truth map[string]events.Totals, elapsed time.Duration) {
	fps := 0.0
	if elapsed > 0 {
		fps = float64(s.FramesProcessed) / elapsed.Seconds()
	}
	fmt.Fprintf(w, "frames read %d, processed %d, dropped %d; events published %d\n",
		s.FramesRead, s.FramesProcessed, s.FramesDropped, s.EventsPublished)
	fmt.Fprintf(w, "%.1f s, %.1f frames/s, peak RSS %.0f MiB\n\n", elapsed.Seconds(), fps, peakRSSMiB())
	if truth != nil {
		fmt.Fprintf(w, "%-18s %-14s %8s %8s %8s\n", "rule", "count", "counted", "truth", "error")
	} else {
		fmt.Fprintf(w, "%-18s %-14s %8s\n", "rule", "count", "counted")
	}
	for _, name := range pipeline.RuleNames(s.Rules) {
		got := s.Rules[name]
		want, hasTruth := truth[name]
		wantM := metrics(want)
		for i, m := range metrics(got) {
			if !hasTruth {
				fmt.Fprintf(w, "%-18s %-14s %8d\n", name, m.name, m.value)
				continue
			}
			tv := wantM[i].value
			fmt.Fprintf(w, "%-18s %-14s %8d %8d %8s\n", name, m.name, m.value, tv, relErr(m.value, tv))
		}
	}
}

func relErr(got, want int) string {
	if want == 0 {
		if got == 0 {
			return "0.0%"
		}
		return "n/a"
	}
	return fmt.Sprintf("%.1f%%", 100*math.Abs(float64(got-want))/float64(want))
}

type metric struct {
	name  string
	value int
}

// metrics lists a rule's counts in the order the summary JSON uses.
func metrics(t events.Totals) []metric {
	if t.Kind == "zone" {
		return []metric{{"entries", t.Entries}, {"exits", t.Exits}, {"dwell_alerts", t.DwellAlerts}, {"max_occupancy", t.MaxOccupancy}}
	}
	return []metric{{"in", t.In}, {"out", t.Out}}
}

// peakRSSMiB is this process's peak resident set size.
func peakRSSMiB() float64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return float64(ru.Maxrss) / 1024 // Linux reports KiB
}
