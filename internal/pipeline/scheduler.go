package pipeline

import (
	"context"
	"fmt"
	"sync"
	"time"

	"tallyd/capture"
	"tallyd/events"
)

// The detect stage is shared by every source: one or more detect workers take
// frames round-robin over the sources that have one ready, so that when the
// CPU cannot serve every source's target rate all of them slow down alike and
// none starves. A source is never in two workers at once, which keeps its
// frames in order and its tracker and background model single-threaded.

// Run processes until every source has ended or ctx is cancelled, then
// drains what was already captured, closes open zone stays and flushes the
// publishers. It returns the first processing error.
func (p *Pipeline) Run(ctx context.Context) error {
	// Processing gets its own context: a stop signal ends capture first, and
	// frames already captured are still processed and their events flushed.
	procCtx, cancelProc := context.WithCancel(context.Background())
	defer cancelProc()
	s := &scheduler{p: p, ready: make(chan struct{}, 1)}
	for _, sr := range p.sources {
		sr.worker.Out.Notify(s.ready)
		sr.worker.OnLost = func(l capture.Lost) {
			sr.lostConn.Store(l.Conn)
			s.poke()
		}
	}
	var capWG, procWG sync.WaitGroup
	errs := make(chan error, len(p.sources)+p.opts.workers())
	for _, sr := range p.sources {
		capWG.Add(1)
		go func() {
			defer capWG.Done()
			if err := sr.worker.Run(ctx); err != nil {
				p.log.Error("source failed", "source", sr.id, "err", err)
				errs <- err
			}
			s.poke()
		}()
	}
	for range p.opts.workers() {
		procWG.Add(1)
		go func() {
			defer procWG.Done()
			if err := s.work(procCtx); err != nil {
				errs <- err
				cancelProc()
			}
		}()
	}
	stopStatus := p.startStatus()
	done := make(chan struct{})
	go func() { capWG.Wait(); procWG.Wait(); close(done) }()
	select {
	case <-done:
	case <-ctx.Done():
		select {
		case <-done:
		case <-time.After(p.opts.ShutdownTimeout):
			p.log.Error("shutdown deadline passed; stopping processing", "timeout", p.opts.ShutdownTimeout)
			cancelProc()
			<-done
		}
	}
	stopStatus()
	flushErr := p.drain()
	close(errs)
	for err := range errs {
		return err
	}
	return flushErr
}

func (o Options) workers() int {
	if o.Workers > 0 {
		return o.Workers
	}
	return 1
}

type scheduler struct {
	p     *Pipeline
	ready chan struct{} // poked when any source has a frame, ends, or drops

	mu   sync.Mutex // guards next and each sourceRun's busy/finished
	next int        // round-robin start
}

func (s *scheduler) poke() {
	select {
	case s.ready <- struct{}{}:
	default:
	}
}

// job is one unit of work claimed for a source: a frame, a lost-source
// clean-up, or the end of the source.
type job struct {
	sr    *sourceRun
	frame *capture.Frame
	lost  bool
	end   bool
}

// claim takes up to max jobs, at most one per source, starting after the
// source served last. It reports whether every source has finished.
func (s *scheduler) claim(max int) ([]job, bool) {
	s.mu.Lock()
	defer s.mu.Unlock()
	var jobs []job
	n := len(s.p.sources)
	allDone := true
	for k := 0; k < n && len(jobs) < max; k++ {
		i := (s.next + k) % n
		sr := s.p.sources[i]
		if sr.finished {
			continue
		}
		allDone = false
		if sr.busy {
			continue
		}
		var j job
		switch f, ok := sr.worker.Out.TryGet(); {
		case ok:
			j = job{sr: sr, frame: f}
		case sr.worker.Out.Done():
			j = job{sr: sr, end: true}
		case sr.lostConn.Load() > sr.closedFor:
			// Lost and nothing newer waiting: close what it held open now
			// rather than when the camera comes back.
			j = job{sr: sr, lost: true}
		default:
			continue
		}
		sr.busy = true
		jobs = append(jobs, j)
		s.next = (i + 1) % n
	}
	return jobs, allDone && len(jobs) == 0
}

func (s *scheduler) release(jobs []job) {
	s.mu.Lock()
	for _, j := range jobs {
		j.sr.busy = false
		if j.end {
			j.sr.finished = true
		}
	}
	s.mu.Unlock()
	s.poke() // another worker may be waiting for one of these sources
}

// work is one detect worker's loop.
func (s *scheduler) work(ctx context.Context) error {
	p := s.p
	for {
		jobs, allDone := s.claim(p.batchSize())
		if allDone {
			s.poke() // wake the other workers so they see it too
			return nil
		}
		if len(jobs) == 0 {
			select {
			case <-s.ready:
				continue
			case <-ctx.Done():
				return nil
			}
		}
		err := s.run(ctx, jobs)
		s.release(jobs)
		if err != nil {
			return err
		}
	}
}

// run does the claimed jobs: age and motion checks, one Detect call for the
// frames that remain, then tracking, rules and publishing per source.
func (s *scheduler) run(ctx context.Context, jobs []job) error {
	p := s.p
	var batch []*capture.Frame
	var owners []*sourceRun
	for _, j := range jobs {
		switch {
		case j.lost:
			p.closeLost(ctx, j.sr, j.sr.lostConn.Load())
		case j.end:
			p.closeSource(ctx, j.sr, events.ReasonStreamEnd)
		default:
			f := j.frame
			sr := j.sr
			// A frame from a newer connection: the old one's tracks end
			// first (backstop for a loss report that a newer frame overtook).
			if sr.conn != 0 && f.Conn != sr.conn && sr.closedFor < sr.conn {
				p.closeLost(ctx, sr, sr.conn)
			}
			sr.conn = f.Conn
			if w, h := f.Mat.Cols(), f.Mat.Rows(); w != sr.w || h != sr.h {
				if sr.engine != nil {
					p.closeSource(ctx, sr, events.ReasonSourceLost)
					sr.resetTracking()
				}
				p.setupRules(sr, w, h)
			}
			if why := sr.skip(f); why != "" {
				j.sr.countDrop(why)
				f.Close()
				continue
			}
			batch = append(batch, f)
			owners = append(owners, j.sr)
		}
	}
	if len(batch) == 0 {
		return nil
	}
	start := time.Now()
	dets, err := p.det.Detect(ctx, batch)
	p.detectCalls.Add(1)
	for _, f := range batch {
		f.Close()
	}
	if err != nil {
		return fmt.Errorf("detect: %w", err)
	}
	detectTime := time.Since(start)
	for i, f := range batch {
		sr := owners[i]
		res := sr.tracker.Update(f.PTS, dets[i])
		if sr.tracksOut != nil {
			if err := sr.tracksOut.write(int(f.Seq)+1, f.PTS, res); err != nil {
				return fmt.Errorf("source %s: write tracks: %w", sr.id, err)
			}
		}
		p.publishFrom(ctx, sr, f.Captured, sr.engine.Step(f.Seq, f.PTS, res))
		sr.processed.Add(1)
		sr.ages.add(float64(time.Since(f.Captured)) / float64(time.Millisecond))
		sr.detectTime.Add(int64(detectTime) / int64(len(batch)))
		sr.lastSeq, sr.lastPTS, sr.lastCaptured = f.Seq, f.PTS, f.Captured
	}
	return nil
}

// closeSource ends every zone stay open on a source.
func (p *Pipeline) closeSource(ctx context.Context, sr *sourceRun, reason string) {
	if sr.engine == nil {
		return // never delivered a frame
	}
	p.publishFrom(ctx, sr, sr.lastCaptured, sr.engine.CloseAll(sr.lastSeq, sr.lastPTS, reason))
}

// closeLost ends what a lost connection held open: zone stays (reason
// source_lost), tracks, the detector's and the gate's memory of the scene.
func (p *Pipeline) closeLost(ctx context.Context, sr *sourceRun, conn int64) {
	if conn <= sr.closedFor {
		return
	}
	sr.closedFor = conn
	p.closeSource(ctx, sr, events.ReasonSourceLost)
	sr.resetTracking()
	if f, ok := p.det.(Forgetter); ok {
		f.Forget(sr.id)
	}
	if sr.gate != nil {
		sr.gate.reset()
	}
}
