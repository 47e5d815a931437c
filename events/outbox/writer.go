package outbox

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"sync/atomic"
	"time"

	"tallyd/internal/repeat"
)

// MaxBatch is the most records Writer appends in one commit.
const MaxBatch = 1024

// Retry back-off of a Writer whose append failed: doubled after each
// failure up to the cap, reset by a success.
const (
	retryMin = 10 * time.Millisecond
	retryMax = time.Second
)

// ErrWriterRunning is returned by a second call of Writer.Run.
var ErrWriterRunning = errors.New("outbox writer already running")

// WriterStats is a snapshot of a Writer's queue and counters.
type WriterStats struct {
	Queued    int64 // records offered and not yet committed (in the queue or held for a retry)
	Rejected  int64 // offers refused because the queue was full or the writer had stopped
	TooLarge  int64 // offers refused because the record alone exceeds the outbox's MaxBytes
	Committed int64 // batches committed
	Appended  int64 // records committed
	Failures  int64 // failed append attempts (each one retried)
	Lost      int64 // records still unwritten when Run gave up at shutdown
	LastErr   error // the last append error, nil if none
}

// Writer takes records from a bounded queue and appends them in groups:
// one commit per batch of whatever is queued (up to MaxBatch), so the
// outbox keeps up with bursts while producers never wait for the disk.
//
// When an append fails (disk full, say) the batch is kept and retried with
// capped exponential back-off; meanwhile the queue fills and further offers
// are refused and counted in Rejected. Failures and LastErr show it, and a
// Reporter set with ReportTo logs it once per period. Nothing is lost
// silently: only at shutdown, when the final attempt fails too, are the
// records still queued given up, counted in Lost and named in Run's error.
type Writer struct {
	o        *Outbox
	appendFn func([]Record) ([]Record, error) // o.Append; tests swap it
	q        chan Record
	notify   chan struct{}
	rep      *repeat.Reporter

	gate    sync.RWMutex // Offer holds it for reading; shutdown for writing
	stopped bool         // under gate: no more offers
	running atomic.Bool

	held                                                    atomic.Int64 // taken from q, not committed
	rejected, tooLarge, committed, appended, failures, lost atomic.Int64

	errMu   sync.Mutex
	lastErr error
}

// NewWriter makes a Writer for o whose queue holds up to queue records (at
// least 1). Start it with Run.
func NewWriter(o *Outbox, queue int) *Writer {
	return &Writer{
		o:        o,
		appendFn: o.Append,
		q:        make(chan Record, max(queue, 1)),
		notify:   make(chan struct{}, 1),
	}
}

// ReportTo makes the writer note every failed append on r, which logs them
// once per period with a count; Run flushes r when it returns. Call it
// before Run.
func (w *Writer) ReportTo(r *repeat.Reporter) *Writer {
	w.rep = r
	return w
}

// Offer queues r for appending. It never blocks: it returns false when the
// queue is full or the writer has stopped (counted in Rejected), or when r
// alone exceeds the outbox's MaxBytes (counted in TooLarge).
func (w *Writer) Offer(r Record) bool {
	if r.size() > w.o.maxBytes {
		w.tooLarge.Add(1)
		return false
	}
	w.gate.RLock()
	defer w.gate.RUnlock()
	if !w.stopped {
		select {
		case w.q <- r:
			return true
		default:
		}
	}
	w.rejected.Add(1)
	return false
}

// Appended receives a notification after each commit (1-buffered: several
// commits may come as one), so that the publisher knows to read.
func (w *Writer) Appended() <-chan struct{} { return w.notify }

// Stats returns a snapshot of the queue and the counters.
func (w *Writer) Stats() WriterStats {
	w.errMu.Lock()
	last := w.lastErr
	w.errMu.Unlock()
	return WriterStats{
		Queued:    int64(len(w.q)) + w.held.Load(),
		Rejected:  w.rejected.Load(),
		TooLarge:  w.tooLarge.Load(),
		Committed: w.committed.Load(),
		Appended:  w.appended.Load(),
		Failures:  w.failures.Load(),
		Lost:      w.lost.Load(),
		LastErr:   last,
	}
}

// Run is the writer's goroutine: it appends what is offered, in batches,
// until ctx is cancelled. Then it stops taking offers, appends everything
// offered before and returns nil. A failed append does not end Run: the
// batch is retried until it succeeds or ctx is cancelled; at shutdown one
// final attempt is made and, if it fails, Run returns an error wrapping
// the append error and saying how many records were not written. Run may
// be called once.
func (w *Writer) Run(ctx context.Context) error {
	if !w.running.CompareAndSwap(false, true) {
		return ErrWriterRunning
	}
	if w.rep != nil {
		defer w.rep.Flush()
	}
	batch := make([]Record, 0, MaxBatch)
	wait := time.Duration(0)
	for {
		if len(batch) == 0 {
			select {
			case r := <-w.q:
				batch = w.fill(append(batch, r))
			case <-ctx.Done():
				return w.drain(batch)
			}
		}
		if err := w.write(batch); err != nil {
			wait = min(max(2*wait, retryMin), retryMax)
			t := time.NewTimer(wait)
			select {
			case <-t.C:
			case <-ctx.Done():
				t.Stop()
				return w.drain(batch)
			}
			continue
		}
		if wait > 0 && w.rep != nil {
			w.rep.Flush("recovered", true)
			w.rep.Reset()
		}
		wait = 0
		clear(batch) // let the records' data go
		batch = batch[:0]
	}
}

// fill adds to batch what is queued, without waiting, up to MaxBatch.
func (w *Writer) fill(batch []Record) []Record {
	for len(batch) < MaxBatch {
		select {
		case r := <-w.q:
			batch = append(batch, r)
		default:
			w.held.Store(int64(len(batch)))
			return batch
		}
	}
	w.held.Store(int64(len(batch)))
	return batch
}

// write appends one batch and counts the outcome.
func (w *Writer) write(batch []Record) error {
	if _, err := w.appendFn(batch); err != nil {
		w.failures.Add(1)
		w.errMu.Lock()
		w.lastErr = err
		w.errMu.Unlock()
		if w.rep != nil {
			w.rep.Note(err, "records", len(batch), "queued", len(w.q))
		}
		return err
	}
	w.held.Store(0)
	w.committed.Add(1)
	w.appended.Add(int64(len(batch)))
	select {
	case w.notify <- struct{}{}:
	default:
	}
	return nil
}

// drain stops offers and appends everything offered before, starting with
// batch; at the first failure it gives the rest up and counts it in Lost.
func (w *Writer) drain(batch []Record) error {
	w.gate.Lock()
	w.stopped = true
	w.gate.Unlock()
	// From here the queue only shrinks.
	for {
		batch = w.fill(batch)
		if len(batch) == 0 {
			return nil
		}
		if err := w.write(batch); err != nil {
			n := int64(len(batch))
			for len(w.q) > 0 {
				<-w.q
				n++
			}
			w.held.Store(0)
			w.lost.Store(n)
			return fmt.Errorf("outbox %s: writer stopped with %d records not written: %w", w.o.path, n, err)
		}
		clear(batch)
		batch = batch[:0]
	}
}
