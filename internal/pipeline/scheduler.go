package pipeline

import (
	"context"
	"sync"

	"tallyd/capture"
)

// The detect stage is shared by every source: one or more detect workers (by
// default one per session of the detector's pool) take frames round-robin
// over the sources that have one ready, so that when the
// CPU cannot serve every source's target rate all of them slow down alike and
// none starves. A source is never in two workers at once, which keeps its
// frames in order and its tracker and background model single-threaded.

type scheduler struct {
	p     *Pipeline
	ready chan struct{} // poked when any source has a frame, ends, or drops

	mu   sync.Mutex // guards next and each sourceRun's sched
	next int        // round-robin start
}

func newScheduler(p *Pipeline) *scheduler {
	return &scheduler{p: p, ready: make(chan struct{}, 1)}
}

func (s *scheduler) poke() {
	select {
	case s.ready <- struct{}{}:
	default:
	}
}

// jobKind is what a claimed job asks of the detect worker.
type jobKind int

const (
	jobFrame jobKind = iota // process a frame
	jobLost                 // close what a lost connection held open
	jobEnd                  // the source ended: close its zone stays
)

// job is one unit of work claimed for a source.
type job struct {
	kind  jobKind
	sr    *sourceRun
	frame *capture.Frame // jobFrame only
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
		if sr.sched.finished {
			continue
		}
		allDone = false
		if sr.sched.busy {
			continue
		}
		var j job
		switch f, ok := sr.worker.Out.TryGet(); {
		case ok:
			j = job{kind: jobFrame, sr: sr, frame: f}
		case sr.worker.Out.Done():
			j = job{kind: jobEnd, sr: sr}
		case sr.lostConn.Load() > sr.cursor.closedFor:
			// Lost and nothing newer waiting: close what it held open now
			// rather than when the camera comes back.
			j = job{kind: jobLost, sr: sr}
		default:
			continue
		}
		sr.sched.busy = true
		jobs = append(jobs, j)
		s.next = (i + 1) % n
	}
	return jobs, allDone && len(jobs) == 0
}

func (s *scheduler) release(jobs []job) {
	s.mu.Lock()
	for _, j := range jobs {
		j.sr.sched.busy = false
		if j.kind == jobEnd {
			j.sr.sched.finished = true
		}
	}
	s.mu.Unlock()
	s.poke() // another worker may be waiting for one of these sources
}

// work is one detect worker's loop: claim, process, release, until every
// source has finished or ctx is cancelled.
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
		err := p.process(ctx, jobs)
		s.release(jobs)
		if err != nil {
			return err
		}
	}
}

// concurrent is a detector that runs several inferences at once, one per
// session of its pool (the ONNX detector).
type concurrent interface{ Sessions() int }

// workers is the number of detect workers: Options.Workers when set, else
// one per detector session, else 1.
func (p *Pipeline) workers() int {
	if p.opts.Workers > 0 {
		return p.opts.Workers
	}
	if c, ok := p.det.(concurrent); ok && c.Sessions() > 1 {
		return c.Sessions()
	}
	return 1
}

// batchSize is how many frames one Detect call may take: the detector's own
// batch limit when it has one (BatchSizer), else 1.
func (p *Pipeline) batchSize() int {
	if b, ok := p.det.(BatchSizer); ok && b.BatchSize() > 1 {
		return b.BatchSize()
	}
	return 1
}
