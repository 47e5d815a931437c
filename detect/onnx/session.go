package onnx

import (
	"context"
	"errors"
	"fmt"
	"runtime"
	"sync"
)

// A Detector holds a pool of inference sessions: each session is one engine
// (its own copy of the model and its own buffers) that runs one inference at
// a time, so that N detect workers can infer N frames at once, one core each.
// One session with several intra-op threads spreads a single inference over
// the cores instead; on a small model that costs more CPU per frame (thread
// pool hand-offs, spin-waiting), see the README's "Sessions and threads".

// session is one engine with the scratch buffers of the inference it runs.
type session struct {
	eng   engine
	batch []float32   // input of batches of more than one frame
	cands []candidate // decoding scratch
}

// pool hands sessions to callers, one caller per session at a time.
type pool struct {
	free chan *session // idle sessions
	all  []*session
	done chan struct{} // closed by close: no new acquisitions

	closeOnce sync.Once
	closeErr  error
}

// errClosed is what Detect returns once the detector is closed.
var errClosed = errors.New("onnx detector: closed")

func newPool(sessions []*session) *pool {
	p := &pool{free: make(chan *session, len(sessions)), all: sessions, done: make(chan struct{})}
	for _, s := range sessions {
		p.free <- s
	}
	return p
}

// acquire waits for an idle session; it fails when ctx ends or the pool is
// closed.
func (p *pool) acquire(ctx context.Context) (*session, error) {
	select {
	case <-p.done:
		return nil, errClosed
	default:
	}
	select {
	case s := <-p.free:
		select {
		case <-p.done: // closed while waiting: give it back for close
			p.free <- s
			return nil, errClosed
		default:
		}
		return s, nil
	case <-p.done:
		return nil, errClosed
	case <-ctx.Done():
		return nil, ctx.Err()
	}
}

func (p *pool) release(s *session) { p.free <- s }

// close stops new acquisitions, waits for every session to come back and
// closes their engines; safe to call twice.
func (p *pool) close() error {
	p.closeOnce.Do(func() {
		close(p.done)
		var errs []error
		for range p.all {
			s := <-p.free
			errs = append(errs, s.eng.close())
		}
		p.closeErr = errors.Join(errs...)
	})
	return p.closeErr
}

// maxSessions bounds Config.Sessions (each session holds a copy of the
// model's weights and its own working memory).
const maxSessions = 64

// SessionCount is the number of inference sessions a detector with this
// configuration runs: Sessions when set, else, for ONNX Runtime, one per
// core divided by the intra-op threads of each (IntraThreads 0 lets ONNX
// Runtime use every core, so one session), and one for OpenCV's engine,
// whose own thread pool already uses every core.
func (c Config) SessionCount() int {
	if c.Sessions > 0 {
		return c.Sessions
	}
	if c.Engine == EngineOpenCV {
		return 1
	}
	intra := c.IntraThreads
	if intra <= 0 {
		intra = runtime.NumCPU()
	}
	return max(1, runtime.NumCPU()/intra)
}

// newSessions starts n engines; on failure those already started are closed.
func newSessions(n int, start func() (engine, error)) ([]*session, error) {
	if n < 1 || n > maxSessions {
		return nil, settingErr("sessions", fmt.Sprintf("must be within 1..%d (found %d)", maxSessions, n))
	}
	out := make([]*session, 0, n)
	for range n {
		e, err := start()
		if err != nil {
			for _, s := range out {
				_ = s.eng.close()
			}
			return nil, err
		}
		out = append(out, &session{eng: e})
	}
	return out, nil
}

// Sessions is how many inferences the detector runs at once: the pipeline
// starts as many detect workers by default.
func (d *Detector) Sessions() int { return len(d.pool.all) }
