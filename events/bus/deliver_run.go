package bus

import (
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"strings"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"tallyd/events/outbox"
)

// ErrRunTwice is returned by a second call of Deliverer.Run.
var ErrRunTwice = errors.New("deliverer run twice")

// flight is one event sent and waiting for its ack.
type flight struct {
	seq     uint64
	subject string
	paf     jetstream.PubAckFuture
	sent    time.Time
}

// runner is the state of Run's goroutine; only it touches these fields.
type runner struct {
	d   *Deliverer
	pub jetstream.JetStream

	inflight []flight // oldest first, in outbox order
	cursor   uint64   // the last Seq read from the outbox
	caughtUp bool     // the last read found nothing more: wait for a wake-up
	round    int      // failed rounds in a row, for the back-off
	prepare  bool     // run Options.Prepare before the next read

	dels     []uint64  // acked, not yet deleted from the outbox
	delAt    time.Time // when dels are due for deletion
	delFails int       // failed deletions in a row

	want uint64 // the latest Drain ticket taken; reported once idle
}

// Run delivers until ctx is done, then returns nil; events still waiting
// for their ack stay in the outbox. Failures never end it: after one, it
// lets the other events in flight finish, waits (capped exponential
// back-off, reset by the next ack) and reads again from the first event
// not acknowledged. Run may be called once.
func (d *Deliverer) Run(ctx context.Context) error {
	if !d.running.CompareAndSwap(false, true) {
		return fmt.Errorf("run deliverer: %w", ErrRunTwice)
	}
	pub, err := jetstream.New(d.nc, jetstream.WithPublishAsyncTimeout(d.o.AckTimeout),
		jetstream.WithPublishAsyncMaxPending(2*d.o.MaxPending))
	r := &runner{d: d, pub: pub, prepare: d.o.Prepare != nil}
	defer r.stop()
	if err != nil {
		return fmt.Errorf("run deliverer: %w", err)
	}
	poll := time.NewTicker(d.o.PollInterval)
	defer poll.Stop()
	for ctx.Err() == nil {
		if failed, err := r.fill(ctx); err != nil {
			if !r.failRound(ctx, failed) {
				return nil
			}
			continue
		}
		if len(r.inflight) == 0 {
			if !r.flushDeletes() {
				if !r.sleep(ctx, backoff(r.delFails)) {
					return nil
				}
				continue
			}
			if r.caughtUp {
				r.idle()
				select {
				case <-ctx.Done():
					return nil
				case <-d.wake:
					r.caughtUp = false
				case <-d.kick:
					r.takeKick()
				case <-poll.C:
					r.caughtUp = false
				}
			}
			continue
		}
		if !r.await(ctx) {
			return nil
		}
	}
	return nil
}

// fill reads and sends as many records as there is room for in flight,
// unless the outbox was found empty since the last wake-up. A failed read
// or send returns the error (and the Seq of the record not sent).
func (r *runner) fill(ctx context.Context) (uint64, error) {
	max := r.d.o.MaxPending
	room := max - len(r.inflight)
	// Top up in batches, not one record per ack.
	if r.caughtUp || room == 0 || (len(r.inflight) > 0 && room < max/4) {
		return 0, nil
	}
	// While the connection is down the client would buffer what is sent
	// and time out each ack: wait for it instead.
	if st := r.d.nc.Status(); st != nats.CONNECTED {
		err := fmt.Errorf("nats connection %s: %w", strings.ToLower(st.String()), nats.ErrDisconnected)
		r.d.noteFailure(FailDisconnected, err)
		return 0, err
	}
	if r.prepare {
		if err := r.d.o.Prepare(ctx); err != nil {
			r.d.noteFailure(FailNoStream, fmt.Errorf("prepare: %w", err))
			return 0, err
		}
		r.prepare = false
	}
	recs, err := r.d.src.Read(r.cursor, room)
	if err != nil {
		r.d.noteFailure(FailOutbox, err)
		return 0, err
	}
	r.caughtUp = len(recs) < room
	for _, rec := range recs {
		if err := r.send(rec); err != nil {
			return rec.Seq, err
		}
	}
	return 0, nil
}

// send publishes one record with its event id for de-duplication.
func (r *runner) send(rec outbox.Record) error {
	paf, err := r.pub.PublishMsgAsync(&nats.Msg{Subject: rec.Subject, Data: rec.Data}, jetstream.WithMsgID(rec.ID))
	if err != nil {
		r.failed(flight{seq: rec.Seq, subject: rec.Subject}, err)
		return err
	}
	r.inflight = append(r.inflight, flight{seq: rec.Seq, subject: rec.Subject, paf: paf, sent: time.Now()})
	r.cursor = rec.Seq
	r.d.published.Add(1)
	r.d.pending.Add(1)
	return nil
}

// await waits for the oldest ack (or a wake-up, a Drain, deletions due),
// then takes every ack already in. It reports false when ctx is done.
func (r *runner) await(ctx context.Context) bool {
	head := r.inflight[0]
	var wake <-chan struct{}
	if r.caughtUp && len(r.inflight) < r.d.o.MaxPending {
		wake = r.d.wake
	}
	var due <-chan time.Time
	if len(r.dels) > 0 {
		t := time.NewTimer(max(time.Until(r.delAt), 0))
		defer t.Stop()
		due = t.C
	}
	select {
	case <-ctx.Done():
		return false
	case ack := <-head.paf.Ok():
		r.acked(ack)
		r.takeReady()
	case err := <-head.paf.Err():
		r.inflight = r.inflight[1:]
		r.d.pending.Add(-1)
		r.failed(head, err)
		return r.failRound(ctx, head.seq)
	case <-wake:
		r.caughtUp = false
	case <-r.d.kick:
		r.takeKick()
	case <-due:
	}
	if len(r.dels) >= deleteBatch || len(r.inflight) == 0 || !time.Now().Before(r.delAt) {
		r.flushDeletes()
	}
	return true
}

// takeReady takes the acks that are already in, oldest first.
func (r *runner) takeReady() {
	for len(r.inflight) > 0 {
		select {
		case ack := <-r.inflight[0].paf.Ok():
			r.acked(ack)
		default:
			return
		}
	}
}

// acked records the ack of the oldest event in flight.
func (r *runner) acked(ack *jetstream.PubAck) {
	f := r.inflight[0]
	r.inflight = r.inflight[1:]
	r.d.pending.Add(-1)
	if len(r.dels) == 0 {
		r.delAt = time.Now().Add(deleteEvery)
	}
	r.dels = append(r.dels, f.seq)
	r.d.acked.Add(1)
	if ack.Duplicate {
		r.d.dups.Add(1)
	}
	if r.d.onAck != nil {
		r.d.onAck(f.sent)
	}
	if r.d.o.Acked != nil {
		r.d.o.Acked(f.subject)
	}
	r.round = 0
	r.d.recovered()
}

// failed counts a failed send or ack.
func (r *runner) failed(f flight, err error) {
	kind, cause := r.d.classify(err, f.subject)
	r.d.noteFailure(kind, cause, "seq", f.seq, "subject", f.subject)
	if kind == FailNoStream && r.d.o.Prepare != nil {
		r.prepare = true
	}
}

// failRound ends a round in which the event with Seq first (0: none) failed:
// it waits for the rest in flight (acked ones are deleted), backs off and
// sets the outbox to be read again from the first event not acknowledged.
// It reports false when ctx is done.
func (r *runner) failRound(ctx context.Context, first uint64) bool {
	lowest := first
	for len(r.inflight) > 0 {
		f := r.inflight[0]
		select {
		case <-ctx.Done():
			return false
		case ack := <-f.paf.Ok():
			r.acked(ack)
			continue
		case err := <-f.paf.Err():
			r.inflight = r.inflight[1:]
			r.d.pending.Add(-1)
			r.failed(f, err)
			if lowest == 0 || f.seq < lowest {
				lowest = f.seq
			}
		}
	}
	r.flushDeletes()
	if lowest > 0 {
		r.cursor = lowest - 1
	}
	r.caughtUp = false
	r.round++
	return r.sleep(ctx, backoff(r.round))
}

// sleep waits d plus up to 10% jitter; false when ctx ends first.
func (r *runner) sleep(ctx context.Context, d time.Duration) bool {
	t := time.NewTimer(d + rand.N(d/10+1))
	defer t.Stop()
	select {
	case <-ctx.Done():
		return false
	case <-t.C:
		return true
	}
}

// flushDeletes deletes the acked records from the outbox in one
// transaction; on failure they are kept for the next try.
func (r *runner) flushDeletes() bool {
	if len(r.dels) == 0 {
		return true
	}
	if err := r.d.src.Delete(r.dels); err != nil {
		r.delFails++
		r.delAt = time.Now().Add(backoff(r.delFails))
		r.d.noteFailure(FailOutbox, err, "acked", len(r.dels))
		return false
	}
	r.dels, r.delFails = r.dels[:0], 0
	return true
}

// takeKick notes a Drain call: the outbox is read again, and the call is
// answered once nothing is left.
func (r *runner) takeKick() {
	r.want = r.d.ticket.Load()
	r.caughtUp = false
}

// idle answers the Drain calls taken: nothing is in flight, nothing left
// to delete, and a read after the call found the outbox empty.
func (r *runner) idle() {
	d := r.d
	d.mu.Lock()
	defer d.mu.Unlock()
	if r.want > d.idleTicket {
		d.idleTicket = r.want
		d.broadcastLocked()
	}
}

// stop deletes what was acked, flushes the failure reports and wakes Drain
// calls.
func (r *runner) stop() {
	r.flushDeletes()
	if r.pub != nil {
		r.pub.CleanupPublisher()
	}
	r.d.pending.Store(0)
	for _, rep := range r.d.fails {
		rep.Flush()
	}
	r.d.mu.Lock()
	r.d.stopped = true
	r.d.broadcastLocked()
	r.d.mu.Unlock()
}
