package bus

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"tallyd/events/outbox"
	"tallyd/internal/repeat"
)

// Defaults of a Deliverer.
const (
	// DefaultMaxPending is how many events may wait for their ack at once:
	// enough to keep a loopback or LAN link busy, small next to the outbox.
	DefaultMaxPending = 1024
	// DefaultAckTimeout is how long an ack may take before the event counts
	// as failed and is sent again (JetStream acks on a healthy server take
	// milliseconds).
	DefaultAckTimeout = 5 * time.Second
	// DefaultPollInterval is how often the outbox is read when no wake-up
	// came, in case one was missed.
	DefaultPollInterval = time.Second
)

const (
	deleteBatch = 256                   // acked records deleted in one outbox transaction at most
	deleteEvery = 50 * time.Millisecond // acked records wait this long at most for their group
	countPage   = 1024                  // records per Read when counting what is left
)

// Pending is the outbox as a Deliverer sees it: records in order, deleted
// once the stream has them. *outbox.Outbox is one.
type Pending interface {
	Read(after uint64, max int) ([]outbox.Record, error)
	Delete(seqs []uint64) error
}

// DelivererOptions tune a Deliverer; zero values mean the defaults.
type DelivererOptions struct {
	MaxPending   int           // acks in flight at most (DefaultMaxPending)
	AckTimeout   time.Duration // an ack later than this is a failure (DefaultAckTimeout)
	PollInterval time.Duration // read the outbox this often without a wake-up (DefaultPollInterval)
	// Prepare, when set, runs once connected before the first events are
	// sent, and again after a round that found no stream (FailNoStream):
	// pass EnsureStream, so that a stream the server did not have at start
	// (unreachable then) or lost later is made. Its errors count as
	// FailNoStream and are retried with the back-off.
	Prepare func(ctx context.Context) error
	// Acked, when set, is called with the subject of each event the stream
	// acknowledged (duplicates included), on the Deliverer's goroutine:
	// keep it cheap (per-subject metrics).
	Acked func(subject string)
}

// FailureKind says why an event's delivery failed.
type FailureKind string

// The kinds of delivery failure.
const (
	FailTimeout      FailureKind = "timeout"      // no ack in time (server slow or gone)
	FailPermission   FailureKind = "permission"   // the user may not publish there (or receive the ack)
	FailNoStream     FailureKind = "no_stream"    // no stream takes the subject, or JetStream is off
	FailDisconnected FailureKind = "disconnected" // the connection dropped before the ack
	FailRejected     FailureKind = "rejected"     // the stream refused the event (limits, say)
	FailOutbox       FailureKind = "outbox"       // reading or deleting in the outbox failed
	FailOther        FailureKind = "other"        // anything else
)

var failureKinds = [...]FailureKind{FailTimeout, FailPermission, FailNoStream, FailDisconnected, FailRejected, FailOutbox, FailOther}

// Failures counts failed attempts by kind: an event whose send or ack
// failed counts once per attempt; a round not tried because the connection
// was down, or because the outbox failed, counts once.
type Failures map[FailureKind]int64

// Total is the sum over all kinds.
func (f Failures) Total() int64 {
	var n int64
	for _, v := range f {
		n += v
	}
	return n
}

// DelivererStats is a snapshot of a Deliverer's counters, in events.
type DelivererStats struct {
	Published  int64    // sent to the broker, re-sends included
	Acked      int64    // acknowledged by the stream (duplicates included) and so deleted from the outbox
	Duplicates int64    // acks saying the stream had the event already (a re-send)
	Pending    int64    // sent, waiting for the ack
	Failures   Failures // failed attempts by kind; the events are sent again
	LastErr    error    // the latest failure, nil once delivery works again
}

// ErrUndelivered is wrapped by Drain's error when events are still in the
// outbox; they are sent at the next start.
var ErrUndelivered = errors.New("events not delivered yet")

// UndeliveredError is Drain's error: how many events were left, and why.
type UndeliveredError struct {
	Count   int64 // events still in the outbox
	LastErr error // the latest delivery failure, if any
	Err     error // why Drain stopped waiting (its context's error, or the Deliverer stopped)
}

// Error says how many events wait and why.
func (e *UndeliveredError) Error() string {
	s := fmt.Sprintf("%d %v (kept in the outbox for the next start): %v", e.Count, ErrUndelivered, e.Err)
	if e.LastErr != nil {
		s += fmt.Sprintf("; last delivery error: %v", e.LastErr)
	}
	return s
}

// Unwrap gives ErrUndelivered and the reason Drain stopped waiting.
func (e *UndeliveredError) Unwrap() []error { return []error{ErrUndelivered, e.Err} }

// errStopped is the reason when Drain finds that Run has returned.
var errStopped = errors.New("deliverer stopped")

// Deliverer moves events from an outbox into a JetStream stream: at least
// once from the outbox (a record is deleted only when the stream
// acknowledged it, and sent again after any failure), exactly once in the
// stream (each is published with its event id as Nats-Msg-Id, so a re-send
// within the stream's duplicates window is dropped and acknowledged as a
// duplicate). Nobody waits for it: producers append to the outbox, and
// Stats never blocks.
type Deliverer struct {
	nc   *nats.Conn
	src  Pending
	wake <-chan struct{}
	o    DelivererOptions
	log  *slog.Logger

	fails map[FailureKind]*repeat.Reporter
	kick  chan struct{} // Drain asks for a fresh read

	running atomic.Bool
	ticket  atomic.Uint64 // Drain calls so far

	published, acked, dups, pending atomic.Int64
	failed                          [len(failureKinds)]atomic.Int64 // by index in failureKinds

	mu         sync.Mutex
	lastErr    error
	idleTicket uint64        // the latest Drain ticket seen with nothing left
	stopped    bool          // Run has returned
	changed    chan struct{} // closed and replaced when idleTicket or stopped change

	onAck func(sent time.Time) // tests: publish-to-ack latency
}

// NewDeliverer makes a Deliverer publishing on js's connection (with its own
// publish context, so that its ack timeout and limit are its own) the
// records of src, reading again whenever wake receives (an outbox writer's
// Appended channel; nil: poll only). log (nil discards) gets failures once
// per period with counts. Start it with Run.
func NewDeliverer(js jetstream.JetStream, src Pending, wake <-chan struct{}, o DelivererOptions, log *slog.Logger) *Deliverer {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	if o.MaxPending <= 0 {
		o.MaxPending = DefaultMaxPending
	}
	if o.AckTimeout <= 0 {
		o.AckTimeout = DefaultAckTimeout
	}
	if o.PollInterval <= 0 {
		o.PollInterval = DefaultPollInterval
	}
	log = log.With("component", "deliverer")
	d := &Deliverer{nc: js.Conn(), src: src, wake: wake, o: o, log: log,
		fails: map[FailureKind]*repeat.Reporter{}, kick: make(chan struct{}, 1), changed: make(chan struct{})}
	for _, k := range failureKinds {
		d.fails[k] = repeat.New(log, "event delivery failed; sending again from the outbox", repeat.DefaultPeriod)
	}
	return d
}

// Stats is a snapshot of the counters.
func (d *Deliverer) Stats() DelivererStats {
	f := Failures{}
	for i, k := range failureKinds {
		if n := d.failed[i].Load(); n > 0 {
			f[k] = n
		}
	}
	d.mu.Lock()
	last := d.lastErr
	d.mu.Unlock()
	return DelivererStats{Published: d.published.Load(), Acked: d.acked.Load(), Duplicates: d.dups.Load(),
		Pending: d.pending.Load(), Failures: f, LastErr: last}
}

// Drain waits until everything in the outbox when it was called has been
// acknowledged (the outbox is empty), or until ctx is done; call it while
// Run runs (or is about to), before stopping it; after Run returned it
// answers at once. Its error is an *UndeliveredError counting the events
// left: they stay in the outbox for the next start.
func (d *Deliverer) Drain(ctx context.Context) error {
	t := d.ticket.Add(1)
	select {
	case d.kick <- struct{}{}:
	default: // a kick is pending: Run reads the ticket when it takes it
	}
	var why error
	for why == nil {
		d.mu.Lock()
		served, stopped, changed := d.idleTicket, d.stopped, d.changed
		d.mu.Unlock()
		switch {
		case served >= t:
			return nil
		case stopped:
			why = errStopped
			continue
		}
		select {
		case <-changed:
		case <-ctx.Done():
			why = ctx.Err()
		}
	}
	n, err := d.countLeft()
	if err != nil {
		return fmt.Errorf("drain outbox: %w", err)
	}
	if n == 0 {
		return nil
	}
	d.mu.Lock()
	last := d.lastErr
	d.mu.Unlock()
	return fmt.Errorf("drain outbox: %w", &UndeliveredError{Count: n, LastErr: last, Err: why})
}

// countLeft counts the records in the outbox: from its Stats when it has
// them, else by reading it through.
func (d *Deliverer) countLeft() (int64, error) {
	if s, ok := d.src.(interface{ Stats() outbox.Stats }); ok {
		return s.Stats().Pending, nil
	}
	var n int64
	var after uint64
	for {
		recs, err := d.src.Read(after, countPage)
		if err != nil {
			return n, fmt.Errorf("count what is left: %w", err)
		}
		n += int64(len(recs))
		if len(recs) < countPage {
			return n, nil
		}
		after = recs[len(recs)-1].Seq
	}
}

// broadcast wakes Drain calls. Call with d.mu held.
func (d *Deliverer) broadcastLocked() {
	close(d.changed)
	d.changed = make(chan struct{})
}

// noteFailure counts and reports one failed attempt.
func (d *Deliverer) noteFailure(kind FailureKind, err error, attrs ...any) {
	for i, k := range failureKinds {
		if k == kind {
			d.failed[i].Add(1)
		}
	}
	err = fmt.Errorf("%s: %w", kind, err)
	d.mu.Lock()
	d.lastErr = err
	d.mu.Unlock()
	d.fails[kind].Note(err, append([]any{"kind", kind}, attrs...)...)
}

// recovered ends a spell of failures: their last counts are logged, and the
// next failure is logged at once.
func (d *Deliverer) recovered() {
	d.mu.Lock()
	had := d.lastErr != nil
	d.lastErr = nil
	d.mu.Unlock()
	if !had {
		return
	}
	for _, r := range d.fails {
		r.Flush()
		r.Reset()
	}
	d.log.Info("event delivery works again")
}

// classify names the kind of a failed publish.
func (d *Deliverer) classify(err error, subject string) (FailureKind, error) {
	var apiErr *jetstream.APIError
	switch {
	case errors.Is(err, jetstream.ErrAsyncPublishTimeout):
		// A denied publish gets no reply, only an asynchronous error on the
		// connection: look there before calling it a timeout.
		if last := d.nc.LastError(); errors.Is(last, nats.ErrPermissionViolation) &&
			(strings.Contains(last.Error(), `"`+subject+`"`) || strings.Contains(last.Error(), "Subscription to")) {
			return FailPermission, last
		}
		return FailTimeout, err
	case errors.Is(err, nats.ErrPermissionViolation) || errors.Is(err, nats.ErrAuthorization):
		return FailPermission, err
	case errors.Is(err, jetstream.ErrNoStreamResponse) || errors.Is(err, nats.ErrNoResponders):
		return FailNoStream, err
	case errors.Is(err, nats.ErrDisconnected) || errors.Is(err, nats.ErrConnectionClosed) ||
		errors.Is(err, nats.ErrConnectionReconnecting) || errors.Is(err, nats.ErrReconnectBufExceeded):
		return FailDisconnected, err
	case errors.As(err, &apiErr):
		return FailRejected, err
	}
	return FailOther, err
}
