package pipeline

import (
	"context"
	"fmt"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/internal/config"
	"tallyd/internal/fleet"
	"tallyd/internal/repeat"
)

// A shared site's sources are spread over several daemons by leases
// (internal/fleet). The pipeline of each daemon has every source of the
// site, each behind a capture.Standby that reads it only while this daemon
// holds the source's lease. The pipeline is the fleet's Holder: Start
// switches a source on, Stop switches it off and waits until what it held
// open is closed.
//
// Fencing: every event of a shared source carries the lease's token
// (Data.Lease) and is published only if the frame behind it was captured
// while the lease was valid by this daemon's clock (Hold.Valid); the live
// state is written under the same rule. A daemon that was paused past its
// lease finds its late events refused (counted as fenced), and another
// daemon may hold the source only after the lease ran out by its own clock.
//
// Hand-over: the first frame of a new hold starts fresh tracks and a fresh
// rule engine whose totals continue from the live state in the bucket; the
// zone stays the previous holder left open there are closed with reason
// handover, and a handover event gives the gap without a holder.

// openShared opens a source of a shared site behind a standby: a stream
// reconnects on its own while held (timestamps from the run's start), a
// generated scene runs on the wall clock from its start_time.
func (p *Pipeline) openShared(sr *sourceRun, key string, sc config.Source) error {
	var open capture.Opener
	switch sc.Kind() {
	case capture.KindScene:
		s, err := scene.New(SceneConfig(*sc.Scene))
		if err != nil {
			return p.cfg.Errorf(key, "%v", err)
		}
		sr.scene = s
		w, h := s.Size()
		sr.info = capture.Info{Width: w, Height: h, FPS: s.FPS(), Live: true}
		start := sr.set.start
		open = func() (capture.LiveReader, error) { return capture.NewWallScene(s, start), nil }
	case capture.KindURL:
		spec, log, epoch := sourceSpec(p.cfg, sc), p.log.With("source", sc.ID), sr.set.start
		sr.info = capture.Info{Live: true}
		open = func() (capture.LiveReader, error) {
			rc := capture.NewReconnecting(spec, capture.Backoff{}, log)
			return capture.ShiftPTS(rc, time.Since(epoch)), nil
		}
	default:
		return p.cfg.Errorf(key, "a %s source cannot be shared by several daemons", sc.Kind())
	}
	sr.set.live = true
	sr.shared = &sharedSource{standby: capture.NewStandby(open, p.log.With("source", sc.ID)), holds: map[*fleet.Hold]*holdRun{}}
	return nil
}

// sharedSource is a shared source's hold bookkeeping.
type sharedSource struct {
	standby *capture.Standby

	mu    sync.Mutex
	holds map[*fleet.Hold]*holdRun

	// active is the hold whose frames the detect worker processes now; it
	// is owned by the worker that holds the source (see sourceRun).
	active *holdRun
}

// holdRun is one hold of a source.
type holdRun struct {
	h       *fleet.Hold
	restore map[string]events.RuleState // the live state in the bucket when the hold began
	ended   atomic.Bool                 // Stop was called: what is open closes with reason handover
	closed  atomic.Bool                 // its last connection's stays are closed
	began   atomic.Bool                 // its first frame was processed
}

// holdOf is the hold under which connection conn was opened.
func (sh *sharedSource) holdOf(conn int64) *holdRun {
	hr, _ := sh.standby.Tag(conn).(*holdRun)
	return hr
}

// valid is the fencing rule for what the source produces at t.
func (sh *sharedSource) valid(t time.Time) (*holdRun, bool) {
	hr := sh.active
	if hr == nil {
		return nil, false
	}
	if t.IsZero() {
		t = time.Now()
	}
	return hr, hr.h.Valid(t)
}

// Start implements fleet.Holder: a source is read from now on (its totals
// are read from the bucket first), an area is kept.
func (p *Pipeline) Start(h *fleet.Hold) {
	if h.Kind == fleet.KindArea {
		p.runArea(h.Name, h)
		return
	}
	sr := p.sourceByID(h.Name)
	if sr == nil || sr.shared == nil {
		p.log.Error("hold on a source this site does not share", "source", h.Name)
		return
	}
	hr := &holdRun{h: h}
	sr.shared.mu.Lock()
	sr.shared.holds[h] = hr
	sr.shared.mu.Unlock()
	go func() {
		hr.restore = p.savedState(sr.id)
		// On only if Stop did not come first (a hold released before
		// its first frame); Stop switches off under the same lock.
		sr.shared.mu.Lock()
		defer sr.shared.mu.Unlock()
		if hr.ended.Load() {
			return
		}
		sr.shared.standby.On(hr)
		p.log.Info("source held", "source", sr.id, "lease", h.Token, "prior", priorText(h.Prior))
	}()
}

// Stop implements fleet.Holder: the source is switched off and Stop waits
// (up to stopWait) until the detect stage closed what it held open and the
// live state is written, so the next holder continues from it.
func (p *Pipeline) Stop(h *fleet.Hold, cause fleet.Cause) {
	if h.Kind == fleet.KindArea {
		p.stopArea(h)
		return
	}
	sr := p.sourceByID(h.Name)
	if sr == nil || sr.shared == nil {
		return
	}
	// Start's switching on and this switching off are ordered by the lock.
	sr.shared.mu.Lock()
	hr := sr.shared.holds[h]
	if hr != nil {
		hr.ended.Store(true)
		sr.shared.standby.Off(hr)
	}
	sr.shared.mu.Unlock()
	if hr == nil {
		return
	}
	// The hold stays listed until the state is written (stateWritable).
	defer func() {
		sr.shared.mu.Lock()
		delete(sr.shared.holds, h)
		sr.shared.mu.Unlock()
	}()
	deadline := time.Now().Add(stopWait)
	for p.sched.Load() != nil && hr.began.Load() && !hr.closed.Load() && time.Now().Before(deadline) {
		time.Sleep(10 * time.Millisecond)
	}
	if !hr.closed.Load() && hr.began.Load() {
		p.log.Warn("source stopped before its stays were closed", "source", sr.id, "cause", cause)
	}
	p.out.state.flush()
	p.log.Info("source released", "source", sr.id, "lease", h.Token, "cause", cause)
}

// stopWait bounds Stop's wait for the detect stage.
const stopWait = 3 * time.Second

// beginHold starts counting a source under a new hold at its first frame f:
// fresh tracks and rules, totals from the bucket, the previous holder's open
// stays closed, and a handover event.
func (p *Pipeline) beginHold(sr *sourceRun, f *capture.Frame, hr *holdRun) {
	sh := sr.shared
	sh.active = hr
	hr.began.Store(true)
	sr.resetTracker()
	if fg, ok := p.det.(Forgetter); ok {
		fg.Forget(sr.id)
	}
	sr.stages.engine, sr.restore = nil, nil
	sr.setupRules(p, f.Mat.Cols(), f.Mat.Rows())
	d := events.HandoverData{To: hr.h.Member, Cause: string(fleet.CauseFirst)}
	gap := 0.0
	if pr := hr.h.Prior; pr != nil {
		d.From, d.Cause = pr.Member, string(pr.Cause)
		if !pr.LastSeen.IsZero() {
			gap = max(0, f.Captured.Sub(pr.LastSeen).Seconds())
		}
		d.GapS = float64(int64(gap*1000)) / 1000
	}
	evs := []events.Event{events.HandoverEvent(sr.meta(p), f.Seq, f.PTS, d)}
	evs = append(evs, sr.stages.engine.Inherit(hr.restore, f.Seq, f.PTS)...)
	sr.count.handovers.Add(1)
	sr.count.gapNanos.Add(int64(gap * float64(time.Second)))
	if m := p.metrics; m != nil && hr.h.Prior != nil {
		m.handover(sr.id, gap)
	}
	p.publish(sr, f.Captured, evs)
	p.out.state.update(sr.id, sr.stages.engine.State(f.PTS))
	p.log.Info("counting a source under a new lease", "source", sr.id, "lease", hr.h.Token,
		"from", d.From, "cause", d.Cause, "gap_s", d.GapS, "inherited_stays", len(evs)-1)
}

// savedState reads a source's live state from the bucket (nil when there is
// none or it cannot be read: the source then counts from 0, said in the log).
func (p *Pipeline) savedState(source string) map[string]events.RuleState {
	kv := p.out.state.bucket()
	if kv == nil {
		return nil
	}
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	all, err := kv.Match(ctx, source+".>")
	var saved map[string]map[string]events.RuleState
	if err == nil {
		saved, err = decodeStates(all)
	}
	if err != nil {
		p.log.Warn("live state not read; the source's totals start at 0", "source", source, "err", err)
		return nil
	}
	return saved[source]
}

// stateWritable is the state sink's gate on a shared site: a source's live
// state is written only while this daemon holds a valid lease on it.
func (p *Pipeline) stateWritable(source string) bool {
	sr := p.sourceByID(source)
	if sr == nil || sr.shared == nil {
		return true
	}
	sr.shared.mu.Lock()
	defer sr.shared.mu.Unlock()
	for h, hr := range sr.shared.holds {
		if hr.began.Load() && h.Valid(time.Now()) {
			return true
		}
	}
	return false
}

func (p *Pipeline) sourceByID(id string) *sourceRun {
	for _, sr := range p.sources {
		if sr.id == id {
			return sr
		}
	}
	return nil
}

// meta is the event metadata of the source's rule engine.
func (sr *sourceRun) meta(p *Pipeline) events.Meta {
	m := events.Meta{Site: p.cfg.Site, Source: sr.id, Start: sr.set.start}
	if sr.set.live {
		m.Run = p.run
	}
	return m
}

func priorText(pr *fleet.Prior) string {
	if pr == nil {
		return "none"
	}
	return fmt.Sprintf("%s (%s)", pr.Member, pr.Cause)
}

// areaRun is one area kept by this daemon.
type areaRun struct {
	cancel context.CancelFunc
	done   chan struct{}
}

// runArea keeps a site-wide area: its occupancy and totals are summed from
// the live state of its zones and published when they change; h is the
// area's lease (nil on a site of one daemon).
func (p *Pipeline) runArea(name string, h *fleet.Hold) {
	kv := p.out.state.bucket()
	if kv == nil {
		p.log.Warn("site-wide area not kept: no live-state bucket (JetStream off)", "area", name)
		return
	}
	var zones []fleet.ZoneRef
	for _, z := range p.rulesConfig().Areas()[name] {
		zones = append(zones, fleet.ZoneRef{Source: z.Source, Rule: z.Rule})
	}
	ctx, cancel := context.WithCancel(context.Background())
	ar := &areaRun{cancel: cancel, done: make(chan struct{})}
	p.areasMu.Lock()
	p.areas[name] = ar
	p.areasMu.Unlock()
	var seq atomic.Int64
	fenced := repeat.New(p.log, "area events refused: the lease on the area is no longer valid", repeat.DefaultPeriod)
	emit := func(a events.AreaData) {
		now := time.Now()
		ev := events.AreaEvent(p.cfg.Site, now.UTC().Round(time.Millisecond), seq.Add(1), p.run, a)
		if h != nil {
			if !h.Valid(now) {
				p.fencedAreas.Add(1)
				fenced.Note(fmt.Errorf("area %s", name))
				return
			}
			ev.Data.Lease = h.Token
		}
		p.out.offer(ev)
	}
	go func() {
		defer close(ar.done)
		defer fenced.Flush()
		if err := fleet.KeepArea(ctx, kv.KV(), name, zones, emit); err != nil && ctx.Err() == nil {
			p.log.Error("keeping a site-wide area failed", "area", name, "err", err)
		}
	}()
	p.log.Info("keeping site-wide area", "area", name, "zones", len(zones))
}

func (p *Pipeline) stopArea(h *fleet.Hold) {
	p.areasMu.Lock()
	ar := p.areas[h.Name]
	delete(p.areas, h.Name)
	p.areasMu.Unlock()
	if ar != nil {
		ar.cancel()
		<-ar.done
	}
}

// stopAreas stops every area kept (Run's end).
func (p *Pipeline) stopAreas() {
	p.areasMu.Lock()
	all := p.areas
	p.areas = map[string]*areaRun{}
	p.areasMu.Unlock()
	for _, ar := range all {
		ar.cancel()
		<-ar.done
	}
}

// SharedSources are the ids of the sources a shared site spreads over its
// daemons.
func (p *Pipeline) SharedSources() []string {
	var ids []string
	for _, sr := range p.sources {
		if sr.shared != nil {
			ids = append(ids, sr.id)
		}
	}
	return ids
}

// HoldCapacity is how many of the site's shared sources this daemon can
// count at their target rates: 80% of the detect workers' CPU time over the
// costliest source's need, the detector timed on a frame of each source
// size (measureDetect; a stream of unknown size counts as 1280x720, an
// unknown rate as 10 fps). At least 1.
func (p *Pipeline) HoldCapacity(ctx context.Context) (int, error) {
	caps := make([]SourceCapacity, len(p.sources))
	for i, sr := range p.sources {
		c := sourceCapacity(p.cfg.Sources[i], sr.info)
		if c.Width <= 0 || c.Height <= 0 {
			c.Width, c.Height = 1280, 720
		}
		if c.DetectFPS <= 0 {
			c.DetectFPS = 10
		}
		caps[i] = c
	}
	if err := measureDetect(ctx, p.det, caps, nil); err != nil {
		return 0, err
	}
	var need float64 // CPU ms per second of the costliest source
	for _, c := range caps {
		need = max(need, c.DetectMs*c.DetectFPS)
	}
	if need <= 0 {
		return len(p.sources), nil
	}
	return max(1, int(0.8*float64(p.workers())*1000/need)), nil
}

// PrepareShared creates (or checks) the site's stream and live-state bucket
// on its NATS server, so that the daemons of a shared site starting
// together find them (tallyd site push).
func PrepareShared(ctx context.Context, cfg *config.Config, js jetstream.JetStream) error {
	if _, err := bus.EnsureStream(ctx, js, streamSettings(cfg)); err != nil {
		return cfg.Errorf("output.nats.jetstream", "%v", err)
	}
	if _, err := bus.OpenState(ctx, js, bucketName(cfg), cfg.Output.NATS.JetStream.Replicas); err != nil {
		return cfg.Errorf("output.nats.jetstream.bucket", "%v", err)
	}
	return nil
}
