package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"math"
	"os"
	"strings"
	"syscall"
	"time"

	"tallyd/capture"
	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/internal/pipeline"
)

func cmdRun(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("run", "run -c FILE [--status-every 10s]  |  run --site NAME --nats URL [--member NAME] [--max-sources N] [--state-dir DIR]", stdout)
	cfgPath := fs.String("c", "", "site file (YAML)")
	every := fs.Duration("status-every", 10*time.Second, "log a status line per source at this interval (0: never)")
	site := fs.String("site", "", "run a shared site stored with tallyd site push (instead of -c): this daemon counts the sources its leases give it")
	member := fs.String("member", "", "with --site: this daemon's name, unique in the site (default hostname-pid)")
	maxSources := fs.Int("max-sources", 0, "with --site: most sources this daemon counts (0: estimated from the detector's time at the sources' rates)")
	stateDir := fs.String("state-dir", "", "with --site: this daemon's state folder (outbox, saved state); default .tallyd-MEMBER")
	bf := addBrokerFlags(fs, "run")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *site != "" || *bf.url != "" {
		if *cfgPath != "" {
			return usageErr("give -c FILE (a site of its own) or --site NAME --nats URL (a shared site), not both")
		}
		if *site == "" {
			return usageErr("--nats goes with --site NAME")
		}
		if *maxSources < 0 {
			return usageErr("--max-sources cannot be negative (found %d)", *maxSources)
		}
		if *member == "" {
			host, _ := os.Hostname()
			*member = fmt.Sprintf("%s-%d", host, os.Getpid())
		}
		if err := bus.ValidToken(*member); err != nil {
			return usageErr("--member: %v", err)
		}
		if *stateDir == "" {
			*stateDir = ".tallyd-" + *member
		}
		return runShared(ctx, sharedRun{site: *site, member: *member, stateDir: *stateDir, maxSources: *maxSources,
			every: *every, broker: bf}, stdout, stderr)
	}
	if *member != "" || *maxSources != 0 || *stateDir != "" {
		return usageErr("--member, --max-sources and --state-dir go with --site NAME")
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
	warnCapacity(ctx, p, log)
	log.Info("running", "site", cfg.Site, "sources", len(cfg.Sources), "nats", bus.RedactURL(p.NATSURL()))
	stopOperator, err := startOperator(cfg, p, *cfgPath, log)
	if err != nil {
		return err
	}
	defer stopOperator()
	start := time.Now()
	runErr := p.Run(ctx)
	s := p.Summary()
	log.Info("stopped", "frames_read", s.FramesRead, "frames_processed", s.FramesProcessed,
		"frames_dropped", s.FramesDropped, "events_produced", s.Events.Produced, "events_acked", s.Events.Acked,
		"events_pending", s.Events.Pending, "events_dropped", s.Events.Dropped)
	printTable(stdout, s, time.Since(start))
	// A daemon stopped by a signal is a normal stop, not an incomplete run;
	// events still pending are kept in the outbox for the next start.
	return outcome(runErr, s, false)
}

// warnCapacity measures what the sources cost on this machine (about a
// second) and warns when they need more CPU than it has.
func warnCapacity(ctx context.Context, p *pipeline.Pipeline, log *slog.Logger) {
	c, err := p.EstimateCapacity(ctx)
	if err != nil {
		log.Warn("capacity not measured", "err", err)
		return
	}
	attrs := []any{"cpu_ms_per_s_needed", math.Round(c.DemandMs), "cpu_ms_per_s_counted_on", math.Round(c.BudgetMs),
		"load_percent", math.Round(100 * c.Load()), "cores", c.Cores, "detect_workers", c.Workers}
	if !c.Exceeded() {
		log.Info("capacity", attrs...)
		return
	}
	for _, s := range c.Sources {
		attrs = append(attrs, "source_"+s.ID, fmt.Sprintf("%.1f ms decode x %.4g fps + %.1f ms detect x %.4g fps",
			s.DecodeMs, s.FPS, s.DetectMs, s.DetectFPS))
	}
	log.Warn("the sources need more CPU than this machine has: expect dropped frames (tallyd check shows the measurement)", attrs...)
}

func cmdReplay(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("replay", "replay -c FILE [--pace max|realtime] [--summary table|json] [--tracks OUT.txt] [--deliver-timeout 30s]", stdout)
	cfgPath := fs.String("c", "", "site file (YAML)")
	paceName := fs.String("pace", "max", "max: every frame as fast as the CPU allows; realtime: source clock, drop when behind")
	format := fs.String("summary", "table", "table: counts beside the truth when known; json: one JSON line last")
	tracksOut := fs.String("tracks", "", "also write tracks in the MOTChallenge text format to this file (-<source> added with several sources)")
	deliver := fs.Duration("deliver-timeout", 30*time.Second, "at the end, wait this long for every event to reach the stream (the rest stays in the outbox)")
	annotate := fs.String("annotate", "", "also write the processed frames with boxes, ids, rules and counts to this .mp4 or .avi (-<source> added with several sources)")
	progress := fs.String("progress", "auto", "auto: a progress bar when stderr is a terminal; on; off")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *progress != "auto" && *progress != "on" && *progress != "off" {
		return usageErr("--progress: want auto, on or off (found %q)", *progress)
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
	p, err := pipeline.Build(cfg, pipeline.Options{Pace: pace, Log: log, TracksOut: *tracksOut, DeliverTimeout: *deliver, Annotate: *annotate})
	if err != nil {
		return err
	}
	defer p.Close()
	stopOperator, err := startOperator(cfg, p, *cfgPath, log)
	if err != nil {
		return err
	}
	defer stopOperator()
	stopBar := showProgress(p, *progress, stderr)
	start := time.Now()
	runErr := p.Run(ctx)
	elapsed := time.Since(start)
	stopBar()
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
	for src, n := range p.AnnotatedFrames() {
		log.Info("annotated video written", "source", src, "frames", n)
	}
	return outcome(runErr, s, true)
}

// outcome is the error a run ends with: a processing error, then events lost
// (exit 1; a replay also fails on events still pending), then, for replays,
// input not read to its end (exit 3).
func outcome(runErr error, s pipeline.Summary, replay bool) error {
	e := s.Events
	switch {
	case runErr != nil:
		return runErr
	case e.Dropped > 0 || (e.JSONL != nil && (e.JSONL.Dropped > 0 || e.JSONL.Failed > 0)):
		return fmt.Errorf("%d events lost (see the log): %s", e.Dropped+jsonlLost(e.JSONL), deliveryLine(e))
	case replay && e.Pending > 0:
		return fmt.Errorf("%d events not delivered by the end (kept in the outbox for the next run): %s", e.Pending, deliveryLine(e))
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
	fmt.Fprintf(w, "frames read %d, processed %d, dropped %d\n", s.FramesRead, s.FramesProcessed, s.FramesDropped)
	fmt.Fprintf(w, "events %s\n", deliveryLine(s.Events))
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

// deliveryLine says what became of the events, in events.
func deliveryLine(e pipeline.DeliveryStats) string {
	line := fmt.Sprintf("produced %d, delivered %d, pending %d, dropped %d", e.Produced, e.Acked, e.Pending, e.Dropped)
	if e.Failures > 0 {
		line += fmt.Sprintf(", failed attempts %d", e.Failures)
	}
	if j := e.JSONL; j != nil {
		line += fmt.Sprintf("; file written %d, dropped %d, failed %d", j.Written, j.Dropped, j.Failed)
	}
	return line
}

func jsonlLost(j *pipeline.SinkStats) int64 {
	if j == nil {
		return 0
	}
	return j.Dropped + j.Failed
}
