package pipeline

import (
	"errors"
	"fmt"
	"log/slog"
	"sync"
	"sync/atomic"
	"time"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/internal/config"
)

// Options are the run-time choices that are not part of the site file.
type Options struct {
	Pace capture.Pace
	Log  *slog.Logger
	// Start is the wall-clock time of frame 0 for sources without a
	// start_time; zero means now.
	Start time.Time
	// StatusEvery logs a status line per source at this interval (0: never).
	StatusEvery time.Duration
	// ShutdownTimeout bounds draining after the sources stop (default 10 s).
	ShutdownTimeout time.Duration
	// Detector replaces the one the site file describes (tests, benchmarks).
	Detector Detector
	// TracksOut, when set, writes each source's tracks in the MOTChallenge
	// text format to this path (with "-<source>" before the extension when
	// there are several sources).
	TracksOut string
	// Workers is the number of detect workers sharing the detector (default
	// 1). More than one helps a cheap detector on several sources; a detector
	// that already uses every core (ONNX) wants 1.
	Workers int
}

func (o Options) workers() int { return max(1, o.Workers) }

// Pipeline is one site's running daemon: capture workers per source, one
// detector shared by the detect workers, a tracker and rules per source, and
// the publishers.
type Pipeline struct {
	cfg     *config.Config
	opts    Options
	log     *slog.Logger
	det     Detector
	outlets []*outlet
	sources []*sourceRun
	drains  []func() error // publishers and track files: flushed and closed when Run ends
	closers []func() error // everything else, released by Close in reverse order
	natsURL string

	checking    bool // a dry run: open live sources once, without reconnecting
	detectCalls atomic.Int64
	published   atomic.Int64 // events every publisher accepted
	failed      atomic.Int64 // events at least one publisher refused
	interrupted atomic.Bool  // stopped before every recorded source ended
	truthOnce   sync.Once
	truth       map[string]events.Totals
}

// Build opens every source, the detector and the publishers. Problems with
// the site's inputs (unreadable video, bad detections file, a rule class the
// detector never reports) wrap config.ErrInvalid; nothing keeps running when
// Build fails.
func Build(cfg *config.Config, opts Options) (_ *Pipeline, err error) {
	if opts.Log == nil {
		opts.Log = slog.New(slog.DiscardHandler)
	}
	if opts.Pace == "" {
		opts.Pace = capture.PaceRealtime
	}
	if opts.Start.IsZero() {
		opts.Start = time.Now().UTC().Truncate(time.Millisecond)
	}
	if opts.ShutdownTimeout == 0 {
		opts.ShutdownTimeout = 10 * time.Second
	}
	p := &Pipeline{cfg: cfg, opts: opts, log: opts.Log}
	defer func() {
		if err != nil {
			_ = p.Close()
		}
	}()
	for i, sc := range cfg.Sources {
		sr, err := p.openSource(i, sc)
		if err != nil {
			return nil, err
		}
		p.sources = append(p.sources, sr)
	}
	if opts.Detector != nil {
		p.det = opts.Detector
	} else if p.det, err = buildDetector(cfg); err != nil {
		return nil, err
	}
	p.closers = append(p.closers, p.det.Close)
	if errs := checkClasses(cfg, p.det); len(errs) > 0 {
		return nil, errs
	}
	if pr, ok := p.det.(Preparer); ok {
		for _, sr := range p.sources {
			sr.worker.Prepare = pr.Prepare
		}
	}
	for _, sr := range p.sources {
		if err := sr.startTracker(); err != nil {
			return nil, cfg.Errorf("tracker", "%v", err)
		}
	}
	if err := p.openOutputs(); err != nil {
		return nil, err
	}
	if opts.TracksOut != "" {
		if err := p.openTrackFiles(opts.TracksOut); err != nil {
			return nil, err
		}
	}
	return p, nil
}

// openSource opens one source: a generated scene, a recorded file or image
// folder, or a live stream or device that reconnects on its own.
func (p *Pipeline) openSource(i int, sc config.Source) (*sourceRun, error) {
	key := fmt.Sprintf("sources[%d].%s", i, sc.Kind())
	kind := sc.Kind()
	sr := &sourceRun{id: sc.ID, set: sourceSettings{
		live:  kind == capture.KindURL || kind == capture.KindDevice,
		start: p.opts.Start, maxAge: sc.MaxAge.Duration, gate: gateConfig(sc.Gate),
		tracker: trackerSettings(p.cfg.Tracker),
	}}
	if sc.StartTime != "" {
		sr.set.start, _ = time.Parse(time.RFC3339, sc.StartTime) // validated
	}
	var rd capture.Reader
	switch kind {
	case capture.KindScene:
		s, err := scene.New(SceneConfig(*sc.Scene))
		if err != nil {
			return nil, p.cfg.Errorf(key, "%v", err)
		}
		g := capture.NewGenerated(s)
		rd, sr.info, sr.scene = g, g.Info(), s
	case capture.KindFile, capture.KindFolder:
		r, in, err := capture.Open(sourceSpec(p.cfg, sc), p.log)
		if err != nil {
			return nil, p.cfg.Errorf(key, "%v", err)
		}
		rd, sr.info = r, in
	default: // url, device: live
		if p.checking {
			r, in, err := capture.Open(sourceSpec(p.cfg, sc), p.log)
			if err != nil {
				return nil, p.cfg.Errorf(key, "%v", err)
			}
			rd, sr.info = r, in
			break
		}
		rc := capture.NewReconnecting(sourceSpec(p.cfg, sc), capture.Backoff{}, p.log.With("source", sc.ID))
		in, err := rc.Connect()
		if errors.Is(err, capture.ErrUnsupported) {
			_ = rc.Close()
			return nil, p.cfg.Errorf(key, "%v", err)
		}
		if err != nil {
			// A camera that is down now may come back: keep the source, it
			// backs off and retries on its own while the others run.
			p.log.Warn("source not reachable yet; retrying in the background", "source", sc.ID, "err", err)
		}
		rd, sr.info = rc, in
	}
	sr.worker = capture.NewWorker(sc.ID, rd, sr.info, p.opts.Pace, sc.FPS, p.log)
	p.closers = append(p.closers, func() error {
		sr.worker.Out.Discard()
		sr.closeStages()
		return rd.Close()
	})
	if sr.info.Width > 0 && sr.info.Height > 0 {
		sr.setupRules(p, sr.info.Width, sr.info.Height)
	}
	return sr, nil
}

// openOutputs starts the embedded NATS server or connects to the configured
// one (an unreachable external server is retried in the background while
// events wait in the client's buffer), and opens the JSON-lines file.
func (p *Pipeline) openOutputs() error {
	n := p.cfg.Output.NATS
	url := n.URL
	if url == "" {
		srv, err := bus.StartEmbedded(n.Embedded.Host, n.Embedded.Port, p.log)
		if err != nil {
			return fmt.Errorf("start embedded NATS server on %s:%d: %w", n.Embedded.Host, n.Embedded.Port, err)
		}
		p.closers = append(p.closers, func() error { srv.Shutdown(); return nil })
		url = srv.URL()
		p.log.Info("embedded NATS server started", "url", url)
	}
	p.natsURL = url
	nc, err := bus.Connect(url, "tallyd-"+p.cfg.Site, p.log, bus.RetryFirst(n.URL != ""))
	if err != nil {
		return fmt.Errorf("connect to NATS at %s: %w", bus.RedactURL(url), err)
	}
	pub := bus.NewPublisher(nc, n.Prefix)
	p.drains = append(p.drains, pub.Close)
	p.addOutlet("nats", pub)
	if n.URL != "" && !nc.IsConnected() {
		p.log.Warn("NATS server not reachable yet; events wait in the client's buffer until it is", "url", bus.RedactURL(url))
	}
	if p.cfg.Output.JSONL != "" {
		path := p.cfg.Resolve(p.cfg.Output.JSONL)
		j, err := events.NewJSONLFile(path)
		if err != nil {
			return p.cfg.Errorf("output.jsonl", "%v", err)
		}
		p.drains = append(p.drains, j.Close)
		p.addOutlet("jsonl", j)
	}
	return nil
}

// NATSURL is the URL events are published to (the embedded server's when
// none was configured).
func (p *Pipeline) NATSURL() string { return p.natsURL }

// DetectCalls is the number of Detect calls made (gated and too-old frames
// make none).
func (p *Pipeline) DetectCalls() int64 { return p.detectCalls.Load() }

// drain flushes and closes the publishers and track files, so nothing
// already counted is lost.
func (p *Pipeline) drain() error {
	err := runAll(p.drains)
	p.drains = nil
	for _, o := range p.outlets {
		o.fails.Flush("sink", o.name)
	}
	return err
}

func runAll(fns []func() error) error {
	var errs []error
	for i := len(fns) - 1; i >= 0; i-- {
		if err := fns[i](); err != nil {
			errs = append(errs, err)
		}
	}
	return errors.Join(errs...)
}

// Close drains the publishers if Run did not, then stops the embedded server
// and releases the detector and sources. Safe to call twice.
func (p *Pipeline) Close() error {
	err := p.drain()
	if cerr := runAll(p.closers); err == nil {
		err = cerr
	}
	p.closers = nil
	return err
}
