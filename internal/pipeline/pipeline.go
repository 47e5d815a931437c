package pipeline

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"sync"
	"sync/atomic"
	"time"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/events"
	"tallyd/internal/config"
	"tallyd/track"
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
	// ShutdownTimeout bounds draining after the sources stop.
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

// Pipeline is one site's running daemon.
type Pipeline struct {
	cfg     *config.Config
	opts    Options
	log     *slog.Logger
	det     Detector
	pubs    []Publisher
	drains  []func() error // publishers: flushed and closed when Run ends
	closers []func() error // everything else, released by Close in reverse order
	sources []*sourceRun

	natsURL     string
	checking    bool // a dry run: open live sources once, without reconnecting
	detectCalls atomic.Int64
	published   atomic.Int64
	mu          sync.Mutex // guards lastErr
	lastErr     error
}

// Build opens every source, the detector and the publishers. Problems with
// the site's inputs (unreadable video, bad detections file) wrap
// config.ErrInvalid; nothing keeps running when Build fails.
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
			p.release()
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
	if pr, ok := p.det.(Preparer); ok {
		for _, sr := range p.sources {
			sr.worker.Prepare = pr.Prepare
		}
	}
	for _, sr := range p.sources {
		sr.newTracker = func() Tracker { return newTracker(cfg) }
		sr.tracker = sr.newTracker()
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

func (p *Pipeline) openSource(i int, sc config.Source) (*sourceRun, error) {
	path := fmt.Sprintf("sources[%d]", i)
	key := path + "." + sc.Kind()
	var (
		rd   capture.Reader
		info capture.Info
		sr   = &sourceRun{id: sc.ID, cfg: sc}
	)
	switch sc.Kind() {
	case "scene":
		s, err := scene.New(config.SceneConfig(*sc.Scene))
		if err != nil {
			return nil, p.cfg.Errorf(key, "%v", err)
		}
		g := capture.NewGenerated(s)
		rd, info, sr.scene = g, g.Info(), s
	case "file":
		v, err := capture.OpenVideo(p.cfg.Resolve(sc.File), p.cfg.Resolve(sc.File), false)
		if err != nil {
			return nil, p.cfg.Errorf(key, "%v", err)
		}
		rd, info = v, v.Info()
	case "folder":
		r, in, err := capture.Open(sourceSpec(p.cfg, sc), p.log)
		if err != nil {
			return nil, p.cfg.Errorf(key, "%v", err)
		}
		rd, info = r, in
	default: // url, device: live, reconnecting
		if p.checking {
			r, in, err := capture.Open(sourceSpec(p.cfg, sc), p.log)
			if err != nil {
				return nil, p.cfg.Errorf(key, "%v", err)
			}
			rd, info = r, in
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
		rd, info = rc, in
	}
	sr.info = info
	sr.worker = capture.NewWorker(sc.ID, rd, info, p.opts.Pace, sc.FPS, p.log)
	p.closers = append(p.closers, func() error { sr.worker.Out.Discard(); return rd.Close() })
	sr.start = p.opts.Start
	if sc.StartTime != "" {
		sr.start, _ = time.Parse(time.RFC3339, sc.StartTime)
	}
	sr.maxAge = sc.MaxAge.Duration
	if info.Width > 0 && info.Height > 0 {
		p.setupRules(sr, info.Width, info.Height)
	}
	return sr, nil
}

// setupRules converts the source's rules to pixels of its w x h frames and
// starts its rule engine and motion gate; called again if a reconnected
// camera delivers another size.
func (p *Pipeline) setupRules(sr *sourceRun, w, h int) {
	sr.w, sr.h = w, h
	sr.lines, sr.zones = RulesFor(p.cfg, sr.id, w, h)
	if sr.gate != nil {
		_ = sr.gate.close()
		sr.gate = nil
	}
	if sr.cfg.Gate != nil {
		sr.gate = newMotionGate(*sr.cfg.Gate, capture.Info{Width: w, Height: h}, sr.lines, sr.zones)
	}
	sr.engine = events.NewEngine(events.Meta{Site: p.cfg.Site, Source: sr.id, Start: sr.start}, sr.lines, sr.zones)
}

// sourceSpec converts a site-file source for capture.Open.
func sourceSpec(cfg *config.Config, sc config.Source) capture.SourceSpec {
	return capture.SourceSpec{ID: sc.ID, URL: sc.URL, Device: sc.Device,
		File: cfg.Resolve(sc.File), Folder: cfg.Resolve(sc.Folder), FolderFPS: sc.FolderFPS,
		Transport: sc.Transport, Username: sc.Username, Password: sc.Password.Value(),
		OpenTimeout: sc.OpenTimeout.Duration, ReadTimeout: sc.ReadTimeout.Duration}
}

// ruleToPixels converts a rule from frame fractions to source pixels.
func ruleToPixels(r config.Rule, w, h int) (*events.LineRule, *events.ZoneRule) {
	pt := func(p [2]float64) events.Point { return events.Point{X: p[0] * float64(w), Y: p[1] * float64(h)} }
	band := *r.Band * float64(h)
	if r.Kind() == "line" {
		return &events.LineRule{Name: r.Name, A: pt(r.Line[0]), B: pt(r.Line[1]), Classes: r.Classes,
			Anchor: events.Anchor(r.Anchor), Band: band}, nil
	}
	poly := make([]events.Point, len(r.Zone))
	for i, p := range r.Zone {
		poly[i] = pt(p)
	}
	return nil, &events.ZoneRule{Name: r.Name, Polygon: poly, Classes: r.Classes, Anchor: events.Anchor(r.Anchor),
		Band: band, DwellThreshold: r.Dwell.Duration}
}

func (p *Pipeline) publish(ctx context.Context, evs []events.Event) {
	for _, ev := range evs {
		ok := true
		for _, pub := range p.pubs {
			if err := pub.Publish(ctx, ev); err != nil {
				ok = false
				p.noteErr(fmt.Errorf("publish %s: %w", ev.ID, err))
			}
		}
		if ok {
			p.published.Add(1)
		}
	}
}

func (p *Pipeline) noteErr(err error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.lastErr == nil {
		p.log.Error("publishing failed", "err", err)
	}
	p.lastErr = err
}

// startStatus logs one line per source periodically; it returns a stop func.
func (p *Pipeline) startStatus() func() {
	if p.opts.StatusEvery <= 0 {
		return func() {}
	}
	stop := make(chan struct{})
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		t := time.NewTicker(p.opts.StatusEvery)
		defer t.Stop()
		for {
			select {
			case <-stop:
				return
			case <-t.C:
				for _, s := range p.Status() {
					p.log.Info("status", "source", s.ID, "state", s.State, "err", s.Err, "read", s.Read, "processed", s.Processed,
						"dropped_rate", s.DroppedRate, "dropped_mailbox", s.DroppedMailbox, "dropped_old", s.DroppedOld,
						"gated", s.Gated, "age_p50_ms", round1(s.AgeP50ms), "age_p99_ms", round1(s.AgeP99ms),
						"events", p.published.Load())
				}
			}
		}
	}()
	return func() { close(stop); wg.Wait() }
}

// Status reports each source's health and counters.
func (p *Pipeline) Status() []SourceStatus {
	out := make([]SourceStatus, 0, len(p.sources))
	for _, sr := range p.sources {
		st := sr.worker.Stats()
		p50, p99 := sr.ages.percentiles()
		out = append(out, SourceStatus{ID: sr.id, State: st.State, Err: st.Err, Read: st.Read,
			Processed: sr.processed.Load(), DroppedRate: st.DroppedRate, DroppedMailbox: st.DroppedMailbox,
			DroppedPrep: st.DroppedPrep, DroppedOld: sr.droppedOld.Load(), Gated: sr.gated.Load(),
			AgeP50ms: p50, AgeP99ms: p99, DetectTime: time.Duration(sr.detectTime.Load())})
	}
	return out
}

// Summary totals frames, events and rule counts over all sources.
func (p *Pipeline) Summary() Summary {
	s := Summary{Rules: map[string]events.Totals{}, EventsPublished: p.published.Load()}
	for _, sr := range p.sources {
		st := sr.worker.Stats()
		s.FramesRead += st.Read
		s.FramesDropped += st.Dropped() + sr.droppedOld.Load() + sr.gated.Load()
		s.FramesProcessed += sr.processed.Load()
		for name, t := range sr.engine.Totals() {
			s.Rules[name] = t
		}
	}
	return s
}

// Truth returns the true totals of the rules on generated sources (computed
// from the scene's ground truth), or nil when no source is generated.
func (p *Pipeline) Truth() map[string]events.Totals {
	var out map[string]events.Totals
	for _, sr := range p.sources {
		if sr.scene == nil {
			continue
		}
		if out == nil {
			out = map[string]events.Totals{}
		}
		for name, t := range SceneTruth(sr.scene, sr.lines, sr.zones) {
			out[name] = t
		}
	}
	return out
}

// SceneTruth computes the true rule totals of a generated scene.
func SceneTruth(s *scene.Scene, lines []events.LineRule, zones []events.ZoneRule) map[string]events.Totals {
	frames := make([]events.TruthFrame, s.Frames())
	for i := range frames {
		objs := s.Truth(i)
		tf := events.TruthFrame{TS: time.Duration(float64(i) / s.FPS() * float64(time.Second))}
		for _, o := range objs {
			tf.Objects = append(tf.Objects, events.TruthObject{ID: o.ID, Class: o.Class, Box: o.Box})
		}
		frames[i] = tf
	}
	return events.TruthTotals(lines, zones, frames)
}

// drain flushes and closes the publishers, so nothing already counted is lost.
func (p *Pipeline) drain() error {
	first := runAll(p.drains)
	p.drains = nil
	return first
}

func runAll(fns []func() error) error {
	var first error
	for i := len(fns) - 1; i >= 0; i-- {
		if err := fns[i](); err != nil && first == nil {
			first = err
		}
	}
	return first
}

// release frees everything Build opened when Build fails.
func (p *Pipeline) release() { _ = p.Close() }

// Close drains the publishers if Run did not, then stops the embedded server
// and releases the detector and sources. Safe to call twice.
func (p *Pipeline) Close() error {
	err := p.drain()
	if cerr := runAll(p.closers); err == nil {
		err = cerr
	}
	p.closers = nil
	for _, sr := range p.sources {
		if sr.gate != nil {
			_ = sr.gate.close()
			sr.gate = nil
		}
	}
	return err
}

// RulesFor converts the rules of one source to pixels of its w x h frames.
func RulesFor(cfg *config.Config, sourceID string, w, h int) ([]events.LineRule, []events.ZoneRule) {
	var lines []events.LineRule
	var zones []events.ZoneRule
	for _, r := range cfg.Rules {
		if r.Source != sourceID {
			continue
		}
		l, z := ruleToPixels(r, w, h)
		if l != nil {
			lines = append(lines, *l)
		} else {
			zones = append(zones, *z)
		}
	}
	return lines, zones
}

func round1(v float64) float64 { return math.Round(v*10) / 10 }

// DetectCalls is the number of Detect calls made (gated and too-old frames
// make none).
func (p *Pipeline) DetectCalls() int64 { return p.detectCalls.Load() }

// batchSize is how many frames one Detect call may take: the detector's own
// batch limit when it has one (BatchSizer), else 1.
func (p *Pipeline) batchSize() int {
	if b, ok := p.det.(BatchSizer); ok && b.BatchSize() > 1 {
		return b.BatchSize()
	}
	return 1
}

// BatchSizer is a detector that runs several frames in one inference call.
type BatchSizer interface {
	BatchSize() int
}

// newTracker builds the tracker the site file asks for (validated already).
func newTracker(cfg *config.Config) Tracker {
	if cfg.Tracker.Kind == "baseline" {
		return track.NewIoU(config.IoUConfig(cfg.Tracker.IoU))
	}
	return track.NewByteTrack(config.ByteTrackConfig(cfg.Tracker.ByteTrack))
}
