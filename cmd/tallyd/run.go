package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"strings"
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
	start := time.Now()
	runErr := p.Run(ctx)
	s := p.Summary()
	log.Info("stopped", "frames_read", s.FramesRead, "frames_processed", s.FramesProcessed,
		"frames_dropped", s.FramesDropped, "events_published", s.EventsPublished, "events_failed", s.EventsFailed)
	printTable(stdout, s, time.Since(start))
	// A daemon stopped by a signal is a normal stop, not an incomplete run.
	return outcome(runErr, s, false)
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
		printTable(stdout, s, elapsed)
	}
	return outcome(runErr, s, true)
}

// outcome is the error a run ends with: a processing error, then events not
// delivered (exit 1), then, for replays, input not read to its end (exit 3).
func outcome(runErr error, s pipeline.Summary, replay bool) error {
	switch {
	case runErr != nil:
		return runErr
	case s.EventsFailed > 0:
		return fmt.Errorf("%d events could not be published (see the log)", s.EventsFailed)
	case len(s.EndedEarly) > 0:
		return fmt.Errorf("%w: recording ended before its declared length: %s", errIncomplete, strings.Join(s.EndedEarly, ", "))
	case replay && s.Interrupted:
		return fmt.Errorf("%w: stopped before the end of the input; counts cover %d frames read", errIncomplete, s.FramesRead)
	}
	return nil
}

// printTable writes the counts, beside the truth for generated sources.
func printTable(w io.Writer, s pipeline.Summary, elapsed time.Duration) {
	fps := 0.0
	if elapsed > 0 {
		fps = float64(s.FramesProcessed) / elapsed.Seconds()
	}
	fmt.Fprintf(w, "frames read %d, processed %d, dropped %d; events published %d", s.FramesRead, s.FramesProcessed,
		s.FramesDropped, s.EventsPublished)
	if s.EventsFailed > 0 {
		fmt.Fprintf(w, ", not published %d", s.EventsFailed)
	}
	fmt.Fprintln(w)
	fmt.Fprintf(w, "%.1f s, %.1f frames/s, peak RSS %.0f MiB\n", elapsed.Seconds(), fps, peakRSSMiB())
	if s.Interrupted {
		fmt.Fprintln(w, "interrupted: the counts cover only the frames read before the stop")
	}
	if len(s.EndedEarly) > 0 {
		fmt.Fprintf(w, "ended early (shorter than the container declares): %s\n", strings.Join(s.EndedEarly, ", "))
	}
	fmt.Fprintln(w)
	truth := s.Truth
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

// metrics lists a rule's counts under the names the events and the summary
// JSON use.
func metrics(t events.Totals) []metric {
	if t.Kind == events.RuleZone {
		return []metric{{"enter", t.Enter}, {"exit", t.Exit}, {"dwell", t.Dwell}, {"max_occupancy", t.MaxOccupancy}}
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
