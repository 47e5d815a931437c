package pipeline

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/events/outbox"
	"tallyd/internal/config"
	"tallyd/internal/repeat"
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
	// DeliverTimeout bounds the wait at the end for the outbox to empty into
	// the stream (default 5 s); what is left stays in the outbox for the
	// next start.
	DeliverTimeout time.Duration
	// Detector replaces the one the site file describes (tests, benchmarks).
	Detector Detector
	// TracksOut, when set, writes each source's tracks in the MOTChallenge
	// text format to this path (with "-<source>" before the extension when
	// there are several sources).
	TracksOut string
	// Annotate, when set, writes each source's processed frames with the
	// rules, tracks and counts drawn to this .mp4 or .avi file (with
	// "-<source>" before the extension when there are several sources).
	Annotate string
	// Offline runs without any output: no NATS server, no outbox, no files,
	// no saved state read or written (tallyd snapshot).
	Offline bool
	// Until, when set, stops processing each source after the first frame
	// at or past this source time, and keeps that frame for Snapshot.
	Until *time.Duration
	// Shared runs a site whose sources are spread over several daemons:
	// every url and scene source waits behind a capture.Standby until this
	// daemon holds its lease (Start), scenes run on the wall clock, and
	// events are fenced by the lease (see shared.go). config.CheckShared
	// lists what such a site may hold.
	Shared bool
	// Workers is the number of detect workers sharing the detector; 0 = one
	// per session of a detector that runs several inferences at once (the
	// ONNX detector's pool, one session per core by default), else 1.
	Workers int
}

// Pipeline is one site's running daemon: capture workers per source, one
// detector shared by the detect workers, a tracker and rules per source, and
// the publishers.
type Pipeline struct {
	cfg     *config.Config
	opts    Options
	log     *slog.Logger
	det     Detector
	out     *delivery
	jsonl   *events.JSONL // nil without output.jsonl
	run     string        // this run's id, in live sources' event ids
	sources []*sourceRun
	drains  []func() error // publishers and track files: flushed and closed when Run ends
	closers []func() error // everything else, released by Close in reverse order
	natsURL string
	nc      *nats.Conn
	metrics *metrics // nil until Register
	// rules holds the site file whose rules are in force after a reload
	// (nil: cfg's); reloadMu serialises reloads.
	rules    atomic.Pointer[config.Config]
	reloadMu sync.Mutex
	sched    atomic.Pointer[scheduler] // set while Run runs
	// stopCapture stops every capture worker (Options.Until reached); set
	// by Run. untilLeft counts sources still short of Until.
	stopCapture context.CancelFunc
	untilLeft   atomic.Int64

	// areas are the site-wide areas this daemon keeps (shared.go).
	fenced      *repeat.Reporter // events refused for want of a valid lease
	areasMu     sync.Mutex
	areas       map[string]*areaRun
	fencedAreas atomic.Int64

	checking    bool // a dry run: open live sources once, without reconnecting
	detectCalls atomic.Int64
	interrupted atomic.Bool // stopped before every recorded source ended
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
	if opts.DeliverTimeout == 0 {
		opts.DeliverTimeout = 5 * time.Second
	}
	p := &Pipeline{cfg: cfg, opts: opts, log: opts.Log, run: newRunID(opts.Start), areas: map[string]*areaRun{}}
	p.fenced = repeat.New(p.log, "events refused: the source's lease is no longer valid (another daemon may hold it)", repeat.DefaultPeriod).AtLevel(slog.LevelWarn)
	p.untilLeft.Store(int64(len(cfg.Sources)))
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
	if opts.Annotate != "" {
		if err := p.openAnnotators(opts.Annotate); err != nil {
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
	switch {
	case p.opts.Shared:
		if err := p.openShared(sr, key, sc); err != nil {
			return nil, err
		}
		rd = sr.shared.standby
	case kind == capture.KindScene:
		s, err := scene.New(SceneConfig(*sc.Scene))
		if err != nil {
			return nil, p.cfg.Errorf(key, "%v", err)
		}
		g := capture.NewGenerated(s)
		rd, sr.info, sr.scene = g, g.Info(), s
	case kind == capture.KindFile || kind == capture.KindFolder:
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

// openOutputs starts the embedded NATS server (with JetStream on state_dir)
// or connects to the configured one (an unreachable external server is
// retried in the background), sets up the stream, the outbox and the live
// state, and opens the JSON-lines file. Nothing is started until Run.
func (p *Pipeline) openOutputs() error {
	n := p.cfg.Output.NATS
	d := &delivery{log: p.log, prefix: n.Prefix,
		drops: repeat.New(p.log, "events dropped", repeat.DefaultPeriod).AtLevel(slog.LevelError)}
	p.out = d
	if p.opts.Offline {
		d.state = newStateSink(nil, "", p.log)
		return nil
	}
	url := n.URL
	useJS := n.JetStream.Mode != config.JetStreamOff
	if url == "" {
		eo := embeddedOptions(p.cfg)
		if !useJS {
			eo.StoreDir = ""
		}
		srv, err := bus.StartEmbedded(eo, p.log)
		if err != nil {
			return fmt.Errorf("start embedded NATS server on %s:%d: %w", eo.Host, eo.Port, err)
		}
		p.closers = append(p.closers, func() error { srv.Shutdown(); return nil })
		url = srv.URL()
		p.log.Info("embedded NATS server started", "url", url, "jetstream", useJS)
	}
	p.natsURL = url
	nc, err := p.connect(url)
	if err != nil {
		return err
	}
	p.closers = append(p.closers, func() error { nc.Close(); return nil })
	p.nc = nc
	if n.URL != "" && !nc.IsConnected() {
		p.log.Warn("NATS server not reachable yet; events wait in the outbox until it is", "url", bus.RedactURL(url))
	}
	ctx, cancel := context.WithTimeout(context.Background(), brokerTimeout)
	defer cancel()
	var kv *bus.State
	if useJS {
		js, err := jetstream.New(nc)
		if err != nil {
			return fmt.Errorf("jetstream: %w", err)
		}
		err = errNotConnected
		if nc.IsConnected() {
			_, err = bus.EnsureStream(ctx, js, streamSettings(p.cfg))
		}
		switch {
		case errors.Is(err, bus.ErrNoJetStream) && n.JetStream.Mode == config.JetStreamAuto && nc.IsConnected():
			p.log.Warn("the NATS server has no JetStream: events go to plain subjects, without persistence", "url", bus.RedactURL(url))
			useJS = false
		case errors.Is(err, bus.ErrNoJetStream) && nc.IsConnected():
			return p.cfg.Errorf("output.nats.jetstream.mode", "required, but the server at %s has no JetStream", bus.RedactURL(url))
		case err != nil && nc.IsConnected():
			return p.cfg.Errorf("output.nats.jetstream", "%v", err)
		case err != nil:
			// Set up once the server is there; meanwhile events wait in
			// the outbox. (With a server that turns out to have no
			// JetStream they keep waiting: set jetstream.mode: off.)
			p.log.Warn("stream not set up yet (server unreachable); events wait in the outbox", "err", err)
			// The deliverer creates the stream when it connects (Prepare);
			// the live-state bucket is opened here once the server is there.
			d.setup = func(ctx context.Context) error {
				kv, err := bus.OpenState(ctx, js, bucketName(p.cfg), n.JetStream.Replicas)
				if err != nil {
					return err
				}
				d.state.setKV(kv)
				p.log.Info("live-state bucket set up", "bucket", bucketName(p.cfg))
				return nil
			}
		}
		if useJS {
			if err := p.openOutbox(d, js); err != nil {
				return err
			}
			if d.setup == nil {
				kv, err = bus.OpenState(ctx, js, bucketName(p.cfg), n.JetStream.Replicas)
				if err != nil {
					return p.cfg.Errorf("output.nats.jetstream.bucket", "%v", err)
				}
			}
		}
	}
	if !useJS {
		pub := bus.NewPublisher(nc, n.Prefix)
		d.core = newQueue("nats", queueSize, func(it item) error {
			if err := pub.PublishRaw(it.subject, it.data); err != nil {
				return err
			}
			d.acks.add(it.subject)
			return nil
		}, p.log)
		p.drains = append(p.drains, pub.Close)
	}
	if err := os.MkdirAll(p.cfg.Resolve(p.cfg.StateDir), 0o700); err != nil {
		return p.cfg.Errorf("state_dir", "%v", err)
	}
	d.state = newStateSink(kv, p.cfg.StatePath("state.json"), p.log)
	if p.opts.Shared {
		d.state.gate = p.stateWritable
	}
	if err := p.restoreState(ctx, kv); err != nil {
		return err
	}
	if p.cfg.Output.JSONL != "" {
		j, err := events.NewJSONLFile(p.cfg.Resolve(p.cfg.Output.JSONL))
		if err != nil {
			return p.cfg.Errorf("output.jsonl", "%v", err)
		}
		p.jsonl = j
		d.jsonl = newQueue("jsonl", queueSize, func(it item) error { return j.WriteLine(it.data) }, p.log)
		p.drains = append(p.drains, j.Close)
	}
	return nil
}

// errNotConnected stands for "the server cannot be reached yet".
var errNotConnected = errors.New("the NATS server is not reachable yet")

// connect connects to the NATS server. An external server is tried once
// first: one that refuses the login is bad input (nothing starts), one that
// cannot be reached is retried in the background while counting goes on.
func (p *Pipeline) connect(url string) (*nats.Conn, error) {
	opts := connectOptions(p.cfg, p.cfg.Output.NATS.URL != "")
	name := "tallyd-" + p.cfg.Site
	if p.cfg.Output.NATS.URL == "" {
		nc, err := bus.Connect(url, name, p.log, opts...)
		if err != nil {
			return nil, fmt.Errorf("connect to the embedded NATS server: %w", err)
		}
		return nc, nil
	}
	nc, err := bus.Connect(url, name, p.log, opts...)
	switch {
	case err == nil:
		return nc, nil
	case errors.Is(err, nats.ErrAuthorization) || errors.Is(err, bus.ErrCredentials) || errors.Is(err, nats.ErrAuthExpired):
		return nil, p.cfg.Errorf("output.nats.auth", "%s refused the login: %v", bus.RedactURL(url), err)
	}
	nc, err = bus.Connect(url, name, p.log, append(opts, bus.RetryFirst(true))...)
	if err != nil {
		return nil, p.cfg.Errorf("output.nats", "connect to %s: %v", bus.RedactURL(url), err)
	}
	return nc, nil
}

// openOutbox opens the outbox under state_dir and the deliverer that drains
// it into the stream.
func (p *Pipeline) openOutbox(d *delivery, js jetstream.JetStream) error {
	o := p.cfg.Output.Outbox
	ob, err := outbox.Open(p.cfg.StatePath("outbox.db"), outbox.Options{MaxBytes: o.MaxBytes, MaxAge: o.MaxAge.Duration})
	if err != nil {
		return p.cfg.Errorf("state_dir", "%v", err)
	}
	p.closers = append(p.closers, ob.Close)
	if st := ob.Stats(); st.Pending > 0 {
		p.log.Info("outbox holds events from an earlier run; they are sent first", "pending", st.Pending, "oldest", st.Oldest)
	}
	d.ob = ob
	d.obw = outbox.NewWriter(ob, queueSize).ReportTo(repeat.New(p.log, "writing the outbox failed", repeat.DefaultPeriod).AtLevel(slog.LevelError))
	d.dlv = bus.NewDeliverer(js, ob, d.obw.Appended(), bus.DelivererOptions{
		MaxPending: p.cfg.Output.NATS.JetStream.MaxPending,
		// Create the stream on (re)connect, also when someone deleted it.
		Prepare: func(ctx context.Context) error {
			_, err := bus.EnsureStream(ctx, js, streamSettings(p.cfg))
			return err
		},
		Acked: d.acks.add,
	}, p.log)
	return nil
}

// restoreState reads the saved totals: live sources continue them (a
// recorded source is counted from its start again on every run, so its
// totals start at 0).
func (p *Pipeline) restoreState(ctx context.Context, kv *bus.State) error {
	saved, from, err := loadState(ctx, kv, p.cfg.StatePath("state.json"))
	if err != nil {
		p.log.Warn("saved totals not read; live sources count from 0", "err", err)
		return nil
	}
	for _, sr := range p.sources {
		if sr.shared != nil {
			continue // restored from the bucket at each hold (shared.go)
		}
		if st := saved[sr.id]; sr.set.live && len(st) > 0 {
			sr.restore = st
			if sr.stages.engine != nil { // opened already: nothing counted yet
				sr.stages.engine.Restore(st)
			}
			p.log.Info("totals continue from the saved state", "source", sr.id, "from", from, "rules", len(st))
		}
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
