package capture

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"sync"
	"time"

	"gocv.io/x/gocv"

	"tallyd/internal/repeat"
)

// Link is a live source's connection state, for status lines and tests.
type Link struct {
	// State is StateConnecting, StateUp, StateBackingOff, or StateFailed
	// once the source was given up (it cannot work as configured).
	State    State
	Reason   string    // why it is not up: the last error, password hidden ("" when up)
	Since    time.Time // when State began
	Conn     int64     // connections made so far; frames of connection n carry Frame.Conn == n
	Failures int64     // failed attempts and losses so far
	NextTry  time.Time // when backing off: the next attempt
}

// Backoff is the wait between reconnect attempts: it doubles from Min up to
// Max, each wait varied by ±Jitter so that cameras that fell together do not
// retry together, and a connection that stayed up ResetAfter starts over
// from Min. Zero fields take the defaults.
type Backoff struct {
	Min        time.Duration // default 0.5 s
	Max        time.Duration // default 30 s
	ResetAfter time.Duration // default 1 min
	Jitter     float64       // fraction, default 0.2
}

// DefaultBackoff is the back-off of live sources (common practice for
// reconnecting clients: exponential, capped, jittered).
var DefaultBackoff = Backoff{Min: 500 * time.Millisecond, Max: 30 * time.Second, ResetAfter: time.Minute, Jitter: 0.2}

func (b Backoff) withDefaults() Backoff {
	d := DefaultBackoff
	if b.Min > 0 {
		d.Min = b.Min
	}
	if b.Max > 0 {
		d.Max = b.Max
	}
	if d.Max < d.Min {
		d.Max = d.Min
	}
	if b.ResetAfter > 0 {
		d.ResetAfter = b.ResetAfter
	}
	if b.Jitter > 0 && b.Jitter < 1 {
		d.Jitter = b.Jitter
	}
	return d
}

// next is the step after prev (0: none yet), without jitter.
func (b Backoff) next(prev time.Duration) time.Duration {
	if prev <= 0 {
		return b.Min
	}
	return min(2*prev, b.Max)
}

func (b Backoff) jitter(d time.Duration) time.Duration {
	return time.Duration(float64(d) * (1 + b.Jitter*(2*rand.Float64()-1)))
}

// LiveReader is a Reader that reconnects by itself. The Worker reads it with
// ReadContext, treats an ErrDisconnected from it as a lost connection (it
// tells Worker.OnLost and reads on) and reports its Link in Stats.
type LiveReader interface {
	Reader
	// ReadContext is Read that stops waiting (between attempts) when ctx ends.
	ReadContext(ctx context.Context, dst *gocv.Mat) (time.Duration, error)
	// Link reports the connection state.
	Link() Link
}

// Reconnecting reads a live source (stream URL or device) and reopens it
// after a loss or a stall, with capped exponential back-off. Each loss is
// returned once from Read as an error wrapping ErrDisconnected; the next
// Read waits and reconnects. Only ErrUnsupported (a source that can never
// work) ends it for good: the state becomes failed. Timestamps are the
// arrival times since the reader was made, monotonic across reconnects.
//
// Reads run on one goroutine; Link, Info and Close may be called from any.
// Lock order: rmu before mu.
type Reconnecting struct {
	spec SourceSpec
	bo   Backoff
	log  *slog.Logger
	open func(SourceSpec, *slog.Logger) (Reader, Info, error)

	done      chan struct{} // closed by Close: ends a back-off wait
	closeOnce sync.Once

	rmu      sync.Mutex // held by reads, Connect and Close
	closed   bool
	cur      Reader
	connAt   time.Time
	step     time.Duration // current back-off step before jitter (0: none yet)
	delay    time.Duration // the wait before the next attempt
	waitNext bool
	downAt   time.Time
	attempts int64 // failed attempts since the last success
	start    time.Time
	lastPTS  time.Duration
	fails    *repeat.Reporter

	mu   sync.Mutex // guards link and info
	link Link
	info Info
}

// NewReconnecting makes a reader for a live source; nothing is opened until
// Connect or the first Read. log should carry the source's key.
func NewReconnecting(spec SourceSpec, bo Backoff, log *slog.Logger) *Reconnecting {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	now := time.Now()
	return &Reconnecting{
		spec:  spec,
		bo:    bo.withDefaults(),
		log:   log,
		open:  Open,
		done:  make(chan struct{}),
		start: now,
		fails: repeat.New(log, "source unavailable; retrying", 0),
		link:  Link{State: StateConnecting, Since: now},
	}
}

// Connect makes one attempt now, bounded by the open timeout, and returns
// what was found: the source's Info when it came up, else the reason. Either
// way the reader stays usable: after a failure the next Read backs off and
// tries again. Call it before the worker starts to learn the frame size.
func (r *Reconnecting) Connect() (Info, error) {
	r.rmu.Lock()
	defer r.rmu.Unlock()
	if r.closed {
		return Info{}, errReaderClosed
	}
	if r.cur != nil {
		return r.Info(), nil
	}
	err := r.attemptLocked()
	return r.Info(), err
}

// Read implements Reader; it waits through back-off until Close.
func (r *Reconnecting) Read(dst *gocv.Mat) (time.Duration, error) {
	return r.ReadContext(context.Background(), dst)
}

// ReadContext implements LiveReader.
func (r *Reconnecting) ReadContext(ctx context.Context, dst *gocv.Mat) (time.Duration, error) {
	r.rmu.Lock()
	defer r.rmu.Unlock()
	for r.cur == nil {
		if r.closed {
			return 0, fmt.Errorf("read %s: %w", r.spec.Name(), errReaderClosed)
		}
		if r.waitNext {
			if err := r.waitLocked(ctx); err != nil {
				return 0, err
			}
		}
		if err := r.attemptLocked(); err != nil && errors.Is(err, ErrUnsupported) {
			return 0, err
		}
		if err := ctx.Err(); err != nil && r.cur == nil {
			return 0, err
		}
	}
	if _, err := r.cur.Read(dst); err != nil {
		if !errors.Is(err, ErrDisconnected) {
			err = fmt.Errorf("%w: %w", err, ErrDisconnected)
		}
		r.lostLocked(err)
		return 0, err
	}
	pts := time.Since(r.start)
	if pts <= r.lastPTS {
		pts = r.lastPTS + time.Microsecond
	}
	r.lastPTS = pts
	return pts, nil
}

// waitLocked sleeps the back-off delay unless ctx ends or the reader closes.
func (r *Reconnecting) waitLocked(ctx context.Context) error {
	t := time.NewTimer(r.delay)
	defer t.Stop()
	select {
	case <-t.C:
		r.waitNext = false
		return nil
	case <-ctx.Done():
		return ctx.Err()
	case <-r.done:
		return fmt.Errorf("read %s: %w", r.spec.Name(), errReaderClosed)
	}
}

// attemptLocked opens the source once and records the outcome.
func (r *Reconnecting) attemptLocked() error {
	r.setLink(func(l *Link) { l.State, l.NextTry = StateConnecting, time.Time{} })
	rd, info, err := r.open(r.spec, r.log)
	now := time.Now()
	if err == nil {
		r.cur, r.connAt, r.waitNext = rd, now, false
		var conn int64
		r.mu.Lock()
		r.info = info
		r.link.Conn++
		conn = r.link.Conn
		r.link.State, r.link.Reason, r.link.Since = StateUp, "", now
		r.mu.Unlock()
		args := []any{"conn", conn, "width", info.Width, "height", info.Height}
		if conn > 1 || r.attempts > 0 {
			args = append(args, "failed_attempts", r.attempts, "down_for", now.Sub(r.downAt).Round(time.Millisecond))
		}
		r.fails.Reset()
		r.log.Info("source up", args...)
		r.attempts = 0
		return nil
	}
	if r.attempts == 0 && r.downAt.IsZero() {
		r.downAt = now
	}
	r.attempts++
	if errors.Is(err, ErrUnsupported) {
		r.setLink(func(l *Link) {
			l.State, l.Reason, l.Since = StateFailed, err.Error(), now
			l.Failures++
		})
		r.log.Error("source failed", "err", err)
		return err
	}
	r.step = r.bo.next(r.step)
	r.delay = r.bo.jitter(r.step)
	r.waitNext = true
	r.setLink(func(l *Link) {
		l.State, l.Reason, l.Since, l.NextTry = StateBackingOff, err.Error(), now, now.Add(r.delay)
		l.Failures++
	})
	r.fails.Note(err, "attempts", r.attempts, "retry_in", r.delay.Round(time.Millisecond))
	return err
}

// lostLocked closes a connection that stopped delivering frames.
func (r *Reconnecting) lostLocked(err error) {
	now := time.Now()
	upFor := now.Sub(r.connAt)
	_ = r.cur.Close()
	r.cur = nil
	if upFor >= r.bo.ResetAfter {
		r.step = 0
	}
	r.step = r.bo.next(r.step)
	r.delay = r.bo.jitter(r.step)
	r.waitNext = true
	r.downAt = now
	var conn int64
	r.setLink(func(l *Link) {
		l.State, l.Reason, l.Since, l.NextTry = StateBackingOff, err.Error(), now, now.Add(r.delay)
		l.Failures++
		conn = l.Conn
	})
	r.log.Warn("source lost", "conn", conn, "up_for", upFor.Round(time.Millisecond), "err", err,
		"retry_in", r.delay.Round(time.Millisecond))
}

func (r *Reconnecting) setLink(f func(*Link)) {
	r.mu.Lock()
	defer r.mu.Unlock()
	f(&r.link)
}

// Link implements LiveReader.
func (r *Reconnecting) Link() Link {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.link
}

// Info describes the source as of its latest connection (zero before the
// first). Info.Live is always true.
func (r *Reconnecting) Info() Info {
	r.mu.Lock()
	defer r.mu.Unlock()
	i := r.info
	i.Live = true
	return i
}

// Close ends a back-off wait, closes the connection and stops further
// reads; it waits for a read in progress (at most the read timeout) and logs
// failed attempts not reported yet. Safe to call twice and from any
// goroutine.
func (r *Reconnecting) Close() error {
	r.closeOnce.Do(func() { close(r.done) })
	r.rmu.Lock()
	defer r.rmu.Unlock()
	if !r.closed {
		r.fails.Flush()
	}
	r.closed = true
	if r.cur != nil {
		_ = r.cur.Close()
		r.cur = nil
	}
	return nil
}
