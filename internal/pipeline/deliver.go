package pipeline

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"sync"
	"sync/atomic"
	"time"

	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/events/outbox"
	"tallyd/internal/repeat"
)

// delivery carries events from the rules to the outside without ever making
// counting wait. Each event is encoded once, then offered to the outbox's
// queue (with JetStream: the outbox drains to the stream, an event leaves
// the outbox when the stream acknowledges it) or to the core publisher's
// queue (JetStream off), and to the JSON-lines file's queue. Every sink has
// its own goroutine; a full queue drops the event and counts it, so a slow
// or hung broker or disk shows in the status, never as lost frames.
type delivery struct {
	log    *slog.Logger
	prefix string

	obw   *outbox.Writer // JetStream: the outbox's queue
	ob    *outbox.Outbox
	dlv   *bus.Deliverer
	core  *queue // JetStream off: core NATS
	jsonl *queue
	state *stateSink
	// setup, when set, creates the stream and the bucket once the server
	// can be reached (it could not at start); retried with back-off.
	setup func(context.Context) error

	produced  atomic.Int64
	unencoded atomic.Int64 // events that could not be written as JSON
	acks      ackCounts    // acknowledged (JetStream) or handed over (core NATS), by subject
	drops     *repeat.Reporter

	cancel     context.CancelFunc
	stopWriter context.CancelFunc
	writerDone chan struct{}
	wg         sync.WaitGroup
	errs       chan error
}

// DeliveryStats counts events on their way out, in events.
type DeliveryStats struct {
	// Produced is every event the rules made.
	Produced int64 `json:"produced"`
	// Acked events are in the stream (JetStream acknowledged them) or, with
	// JetStream off, were handed to the NATS server.
	Acked int64 `json:"acked"`
	// Pending events wait in the outbox (kept on disk for the next start)
	// or in the core publisher's queue.
	Pending int64 `json:"pending"`
	// Dropped events are lost: a full queue or outbox dropped them, or
	// they could not be encoded.
	Dropped int64 `json:"dropped"`
	// Failures are failed delivery attempts; JetStream ones are retried.
	Failures int64 `json:"failures"`
	// JSONL counts the JSON-lines file's writes, when there is one.
	JSONL *SinkStats `json:"jsonl,omitempty"`
}

// SinkStats counts one sink's events.
type SinkStats struct {
	Written int64 `json:"written"`
	Dropped int64 `json:"dropped"` // its queue was full
	Failed  int64 `json:"failed"`  // the write failed (a full disk)
}

// queueSize is each sink's in-memory queue: about a minute of a busy site's
// events, small in memory (events are a few hundred bytes).
const queueSize = 8192

// offer hands one event to every sink; it never blocks.
func (d *delivery) offer(ev events.Event) {
	d.produced.Add(1)
	b, err := json.Marshal(ev)
	if err != nil {
		d.unencoded.Add(1)
		d.drops.Note(fmt.Errorf("encode event %s: %w", ev.ID, err), "why", "encode")
		return
	}
	subject := ev.NATSSubject(d.prefix)
	switch {
	case d.obw != nil:
		// At is when the event was produced (the outbox's max age), not
		// its event time, which is a recording's own clock.
		if !d.obw.Offer(outbox.Record{ID: ev.ID, Subject: subject, Data: b, At: time.Now()}) {
			d.drops.Note(errors.New("the outbox queue is full or stopped"), "sink", "outbox")
		}
	case d.core != nil:
		d.core.offer(item{subject: subject, data: b})
	}
	if d.jsonl != nil {
		d.jsonl.offer(item{data: b})
	}
}

// start runs the sinks' goroutines until stop.
func (d *delivery) start() {
	ctx, cancel := context.WithCancel(context.Background())
	d.cancel = cancel
	d.errs = make(chan error, 4)
	run := func(name string, f func(context.Context) error) {
		d.wg.Add(1)
		go func() {
			defer d.wg.Done()
			if err := f(ctx); err != nil && !errors.Is(err, context.Canceled) {
				d.errs <- fmt.Errorf("%s: %w", name, err)
			}
		}()
	}
	if d.obw != nil {
		// The writer has a context of its own: at stop it must append
		// everything queued before the deliverer's last drain.
		wctx, wcancel := context.WithCancel(context.Background())
		d.stopWriter, d.writerDone = wcancel, make(chan struct{})
		d.wg.Add(1)
		go func() {
			defer d.wg.Done()
			defer close(d.writerDone)
			if err := d.obw.Run(wctx); err != nil && !errors.Is(err, context.Canceled) {
				d.errs <- fmt.Errorf("outbox: %w", err)
			}
		}()
		run("jetstream", d.dlv.Run)
	}
	for _, q := range []*queue{d.core, d.jsonl} {
		if q != nil {
			run(q.name, q.run)
		}
	}
	if d.state != nil {
		run("state", d.state.run)
	}
	if d.setup != nil {
		run("setup", d.retrySetup)
	}
}

// retrySetup runs setup until it succeeds or ctx ends.
func (d *delivery) retrySetup(ctx context.Context) error {
	fails := repeat.New(d.log, "setting up the stream failed; retrying", repeat.DefaultPeriod)
	defer fails.Flush()
	wait := time.Second
	for {
		sctx, cancel := context.WithTimeout(ctx, 5*time.Second)
		err := d.setup(sctx)
		cancel()
		if err == nil {
			return nil
		}
		fails.Note(err)
		select {
		case <-ctx.Done():
			return nil
		case <-time.After(wait):
		}
		wait = min(2*wait, 30*time.Second)
	}
}

// stop lets every sink finish what it holds, waiting up to deadline for the
// outbox to empty into the stream; what is left stays in the outbox for the
// next start. It returns the sinks' errors.
func (d *delivery) stop(deadline time.Duration) error {
	if d.cancel == nil {
		return nil
	}
	for _, q := range []*queue{d.core, d.jsonl} {
		if q != nil {
			q.close()
		}
	}
	var errs []error
	if d.obw != nil {
		d.stopWriter() // no more offers; Run appends what is queued, then returns
		<-d.writerDone
		ctx, cancel := context.WithTimeout(context.Background(), deadline)
		if err := d.dlv.Drain(ctx); errors.Is(err, bus.ErrUndelivered) {
			// Not lost: they wait in the outbox for the next start (and
			// show as pending in the summary).
			d.log.Warn("events not delivered by the deadline stay in the outbox", "err", err)
		} else if err != nil {
			errs = append(errs, err)
		}
		cancel()
	}
	if d.state != nil {
		d.state.flush()
	}
	d.cancel()
	d.wg.Wait()
	d.cancel = nil
	close(d.errs)
	for err := range d.errs {
		errs = append(errs, err)
	}
	d.drops.Flush()
	return errors.Join(errs...)
}

// stats counts the events on their way out.
func (d *delivery) stats() DeliveryStats {
	s := DeliveryStats{Produced: d.produced.Load(), Dropped: d.unencoded.Load()}
	if d.obw != nil {
		os, ws, ds := d.ob.Stats(), d.obw.Stats(), d.dlv.Stats()
		s.Acked = ds.Acked
		s.Pending = os.Pending + ws.Queued
		s.Dropped += os.Dropped + ws.Rejected + ws.TooLarge + ws.Lost
		s.Failures = ds.Failures.Total() + ws.Failures
	}
	if q := d.core; q != nil {
		s.Acked = q.written.Load()
		s.Pending = int64(len(q.ch))
		s.Dropped += q.dropped.Load() + q.failed.Load() // core NATS does not retry: a failed publish is lost
		s.Failures = q.failed.Load()
	}
	if q := d.jsonl; q != nil {
		s.JSONL = &SinkStats{Written: q.written.Load(), Dropped: q.dropped.Load(), Failed: q.failed.Load()}
	}
	return s
}

// item is one encoded event for a queue.
type item struct {
	subject string
	data    []byte
}

// queue is one sink's bounded queue and goroutine.
type queue struct {
	name  string
	ch    chan item
	write func(item) error

	mu     sync.RWMutex // offer holds it for reading; close for writing
	closed bool

	written, dropped, failed atomic.Int64
	fails, drops             *repeat.Reporter
}

func newQueue(name string, size int, write func(item) error, log *slog.Logger) *queue {
	return &queue{name: name, ch: make(chan item, size), write: write,
		fails: repeat.New(log, "writing events failed", repeat.DefaultPeriod).AtLevel(slog.LevelError),
		drops: repeat.New(log, "event queue full; events dropped", repeat.DefaultPeriod).AtLevel(slog.LevelError)}
}

// offer queues an event without waiting; a full queue drops it (counted).
func (q *queue) offer(it item) {
	q.mu.RLock()
	defer q.mu.RUnlock()
	if q.closed {
		q.dropped.Add(1)
		return
	}
	select {
	case q.ch <- it:
	default:
		q.dropped.Add(1)
		q.drops.Note(fmt.Errorf("%d events queued for %s", cap(q.ch), q.name), "sink", q.name)
	}
}

// close ends the queue: run writes what is queued, then returns.
func (q *queue) close() {
	q.mu.Lock()
	defer q.mu.Unlock()
	if !q.closed {
		q.closed = true
		close(q.ch)
	}
}

func (q *queue) run(context.Context) error {
	defer q.fails.Flush("sink", q.name)
	defer q.drops.Flush("sink", q.name)
	for it := range q.ch {
		if err := q.write(it); err != nil {
			q.failed.Add(1)
			q.fails.Note(err, "sink", q.name)
			continue
		}
		q.written.Add(1)
	}
	return nil
}
