package bus

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"path/filepath"
	"runtime"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"tallyd/events/outbox"
	"tallyd/internal/testkit"
)

// eventData is a 400-byte stand-in for an event's JSON.
func eventData(i int) []byte {
	b := fmt.Appendf(nil, `{"specversion":"1.0","id":"ev-%06d","data":{"pad":"`, i)
	for len(b) < 398 {
		b = append(b, 'x')
	}
	return append(b, `"}`...)
}

// records makes events from..to (inclusive) on subject.
func records(from, to int, subject string) []outbox.Record {
	var out []outbox.Record
	for i := from; i <= to; i++ {
		out = append(out, outbox.Record{ID: fmt.Sprintf("ev-%06d", i), Subject: subject, Data: eventData(i)})
	}
	return out
}

// realOutbox opens an outbox file in a temporary directory.
func realOutbox(t testing.TB) *outbox.Outbox {
	t.Helper()
	ob, err := outbox.Open(filepath.Join(t.TempDir(), "outbox.db"), outbox.Options{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = ob.Close() })
	return ob
}

// appendPoke appends to the outbox and pokes wake, as the outbox writer does.
func appendPoke(t testing.TB, ob *outbox.Outbox, wake chan struct{}, recs []outbox.Record) {
	t.Helper()
	if _, err := ob.Append(recs); err != nil {
		t.Fatal(err)
	}
	select {
	case wake <- struct{}{}:
	default:
	}
}

// streamIDs reads every message of the stream and counts each Nats-Msg-Id.
func streamIDs(t testing.TB, js jetstream.JetStream, stream string) (total int, ids map[string]int) {
	t.Helper()
	ctx := context.Background()
	st, err := js.Stream(ctx, stream)
	must(t, err)
	n := int(st.CachedInfo().State.Msgs)
	ids = map[string]int{}
	if n == 0 {
		return 0, ids
	}
	cons, err := js.OrderedConsumer(ctx, stream, jetstream.OrderedConsumerConfig{})
	must(t, err)
	for total < n {
		batch, err := cons.Fetch(min(n-total, 1000), jetstream.FetchMaxWait(5*time.Second))
		must(t, err)
		got := 0
		for m := range batch.Messages() {
			ids[m.Headers().Get(jetstream.MsgIDHeader)]++
			got++
		}
		if got == 0 {
			t.Fatalf("stream %s: read %d of %d messages: %v", stream, total, n, batch.Error())
		}
		total += got
	}
	return total, ids
}

// checkExactlyOnce fails unless the stream holds events 1..n once each.
func checkExactlyOnce(t testing.TB, js jetstream.JetStream, stream string, n int) {
	t.Helper()
	total, ids := streamIDs(t, js, stream)
	if total != n || len(ids) != n {
		t.Fatalf("stream holds %d messages with %d distinct ids, want %d once each", total, len(ids), n)
	}
	for i := 1; i <= n; i++ {
		if id := fmt.Sprintf("ev-%06d", i); ids[id] != 1 {
			t.Fatalf("event %s stored %d times", id, ids[id])
		}
	}
}

// TestDeliverEveryEventOnce: a backlog and events appended while running all
// reach the stream once, in groups within the in-flight limit; the outbox
// ends empty and Drain returns at once.
func TestDeliverEveryEventOnce(t *testing.T) {
	ctx := context.Background()
	srv := startJS(t)
	_, js := jsConnect(t, srv.URL())
	_, err := EnsureStream(ctx, js, StreamSettings{Site: "depot"})
	must(t, err)
	ob := realOutbox(t)
	wake := make(chan struct{}, 1)
	const backlog, live = 3000, 1000
	appendPoke(t, ob, wake, records(1, backlog, "tallyd.depot.cam-1.door.in"))

	d := NewDeliverer(js, ob, wake, DelivererOptions{MaxPending: 256}, testkit.Log(t))
	var maxPending int64
	d.onAck = func(time.Time) { maxPending = max(maxPending, d.pending.Load()) }
	runDeliverer(t, d)
	for i := backlog + 1; i <= backlog+live; i += 100 {
		appendPoke(t, ob, wake, records(i, i+99, "tallyd.depot.cam-2.door.out"))
	}
	testkit.WaitFor(t, 30*time.Second, "an empty outbox", func() bool { return ob.Stats().Pending == 0 })
	dctx, cancel := context.WithTimeout(ctx, 5*time.Second)
	defer cancel()
	must(t, d.Drain(dctx))

	checkExactlyOnce(t, js, "TALLYD_DEPOT", backlog+live)
	s := d.Stats()
	if s.Published != backlog+live || s.Acked != backlog+live || s.Duplicates != 0 || s.Pending != 0 || s.Failures.Total() != 0 || s.LastErr != nil {
		t.Errorf("stats %+v", s)
	}
	if maxPending > 256 {
		t.Errorf("%d acks in flight, limit 256", maxPending)
	}
	if st := ob.Stats(); st.Deleted != backlog+live {
		t.Errorf("outbox deleted %d, want %d", st.Deleted, backlog+live)
	}
}

// TestDeliverDuplicatesCountAsDelivered: events the stream has already (a
// re-send after a lost ack) are acknowledged as duplicates, counted, and
// leave the outbox; the stream keeps one copy.
func TestDeliverDuplicatesCountAsDelivered(t *testing.T) {
	ctx := context.Background()
	srv := startJS(t)
	_, js := jsConnect(t, srv.URL())
	_, err := EnsureStream(ctx, js, StreamSettings{Site: "depot"})
	must(t, err)
	recs := records(1, 300, "tallyd.depot.cam-1.door.in")
	for _, r := range recs[:100] {
		_, err := js.Publish(ctx, r.Subject, r.Data, jetstream.WithMsgID(r.ID))
		must(t, err)
	}
	ob := newMemOutbox()
	ob.Append(recs...)
	d := NewDeliverer(js, ob, ob.wake, DelivererOptions{}, nil)
	runDeliverer(t, d)
	testkit.WaitFor(t, 10*time.Second, "an empty outbox", func() bool { return ob.Len() == 0 })
	checkExactlyOnce(t, js, "TALLYD_DEPOT", 300)
	if s := d.Stats(); s.Acked != 300 || s.Duplicates != 100 || s.Failures.Total() != 0 {
		t.Errorf("stats %+v, want 300 acked, 100 of them duplicates", s)
	}
}

// TestDeliverThroughOutage: while the broker is down nothing leaves the
// outbox, Drain reports what is left, failures are logged once per period
// with counts; after the broker returns every event is in the stream once.
func TestDeliverThroughOutage(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	srv, err := StartEmbedded(EmbeddedOptions{StoreDir: dir}, nil)
	must(t, err)
	port := srv.Port()
	var logs testkit.Buffer
	log := slog.New(slog.NewTextHandler(&logs, &slog.HandlerOptions{Level: slog.LevelDebug}))
	_, js := jsConnect(t, srv.URL())
	_, err = EnsureStream(ctx, js, StreamSettings{Site: "depot"})
	must(t, err)
	ob := realOutbox(t)
	wake := make(chan struct{}, 1)
	d := NewDeliverer(js, ob, wake, DelivererOptions{AckTimeout: 300 * time.Millisecond}, log)
	runDeliverer(t, d)
	appendPoke(t, ob, wake, records(1, 500, "tallyd.depot.cam-1.door.in"))
	testkit.WaitFor(t, 10*time.Second, "the first 500", func() bool { return ob.Stats().Pending == 0 })

	srv.Shutdown()
	down := time.Now()
	appendPoke(t, ob, wake, records(501, 1000, "tallyd.depot.cam-1.door.in"))
	testkit.WaitFor(t, 10*time.Second, "failures", func() bool { return d.Stats().Failures.Total() > 0 })
	time.Sleep(2 * time.Second) // an outage of a few back-off rounds (nothing to poll for)
	dctx, cancel := context.WithTimeout(ctx, 300*time.Millisecond)
	err = d.Drain(dctx)
	cancel()
	var ue *UndeliveredError
	if !errors.As(err, &ue) || ue.Count != 500 || !errors.Is(err, ErrUndelivered) || !errors.Is(err, context.DeadlineExceeded) {
		t.Fatalf("Drain during the outage: %v, want 500 undelivered", err)
	}
	if !strings.HasPrefix(err.Error(), "drain outbox: 500 events not delivered yet (kept in the outbox for the next start): context deadline exceeded; last delivery error: ") {
		t.Errorf("Drain error %q", err)
	}
	if s := d.Stats(); s.Acked != 500 || s.LastErr == nil {
		t.Errorf("stats during the outage %+v", s)
	}

	srv2, err := StartEmbedded(EmbeddedOptions{StoreDir: dir, Port: port}, nil)
	must(t, err)
	defer srv2.Shutdown()
	outage := time.Since(down)
	dctx, cancel = context.WithTimeout(ctx, 20*time.Second)
	defer cancel()
	must(t, d.Drain(dctx))
	checkExactlyOnce(t, js, "TALLYD_DEPOT", 1000)
	s := d.Stats()
	if s.Acked != 1000 || s.LastErr != nil || s.Pending != 0 || s.Failures[FailDisconnected] == 0 {
		t.Errorf("stats after the outage %+v", s)
	}
	t.Logf("outage %v: %+v", outage.Round(time.Millisecond), s)

	// Failures are logged once per period per kind (repeat.DefaultPeriod),
	// with counts, and recovery is logged.
	out := logs.String()
	lines := strings.Count(out, `msg="event delivery failed; sending again from the outbox"`)
	kinds := len(s.Failures)
	if lines == 0 || lines > kinds*(int(outage/time.Second)+2) {
		t.Errorf("%d failure lines for %d failures of %d kinds in %v:\n%s", lines, s.Failures.Total(), kinds, outage, out)
	}
	if !strings.Contains(out, "count=") || !strings.Contains(out, "event delivery works again") {
		t.Errorf("logs lack counts or the recovery:\n%s", out)
	}
}

// TestDeliverResumesAfterStop: a Deliverer stopped with events in flight
// leaves them in the outbox; the next one sends them again and the stream
// drops the copies it has.
func TestDeliverResumesAfterStop(t *testing.T) {
	ctx := context.Background()
	srv := startJS(t)
	_, js := jsConnect(t, srv.URL())
	_, err := EnsureStream(ctx, js, StreamSettings{Site: "depot"})
	must(t, err)
	ob := realOutbox(t)
	const n = 5000
	_, err = ob.Append(records(1, n, "tallyd.depot.cam-1.door.in"))
	must(t, err)
	first := NewDeliverer(js, ob, nil, DelivererOptions{}, nil)
	stop := runDeliverer(t, first)
	testkit.WaitFor(t, 10*time.Second, "some acks", func() bool { return first.Stats().Acked > 0 })
	stop()
	left := ob.Stats().Pending
	if left == 0 {
		t.Skip("the first deliverer finished before it was stopped")
	}
	if err := first.Run(ctx); !errors.Is(err, ErrRunTwice) {
		t.Errorf("second Run: %v", err)
	}
	second := NewDeliverer(js, ob, nil, DelivererOptions{}, nil)
	runDeliverer(t, second)
	dctx, cancel := context.WithTimeout(ctx, 20*time.Second)
	defer cancel()
	must(t, second.Drain(dctx))
	checkExactlyOnce(t, js, "TALLYD_DEPOT", n)
	a, b := first.Stats(), second.Stats()
	// Every event acked once, by one of them; the copies the second sent
	// of events the first had in flight are dropped by the stream.
	if a.Acked+b.Acked != n || b.Acked != left || b.Duplicates > a.Published-a.Acked {
		t.Errorf("first %+v, second %+v, %d left between them", a, b, left)
	}
	t.Logf("stopped with %d left; %d of them were stored already (duplicates)", left, b.Duplicates)
}

// TestDeliverFailureKinds: each way the broker refuses an event is counted
// under its kind and keeps the event in the outbox until it goes through.
func TestDeliverFailureKinds(t *testing.T) {
	ctx := context.Background()
	url := startRaw(t, &server.Options{JetStream: true, StoreDir: t.TempDir(), Users: []*server.User{
		{Username: "counter", Password: "pw", Permissions: &server.Permissions{
			Publish: &server.SubjectPermission{Allow: []string{">"}, Deny: []string{"tallyd.depot.secret.>"}}}},
	}})
	_, js := jsConnect(t, url, UserPassword("counter", "pw"))
	_, err := EnsureStream(ctx, js, StreamSettings{Site: "depot"})
	must(t, err)
	_, err = js.CreateStream(ctx, jetstream.StreamConfig{Name: "SMALL", Subjects: []string{"small.>"}, MaxMsgSize: 100})
	must(t, err)
	tests := []struct {
		kind    FailureKind
		subject string
		lastErr string // in Stats().LastErr
	}{
		{FailNoStream, "nowhere.depot.cam-1.door.in", "no_stream: nats: no response from stream"},
		{FailPermission, "tallyd.depot.secret.door.in", `permission: nats: permissions violation: Permissions Violation for Publish to "tallyd.depot.secret.door.in"`},
		{FailRejected, "small.depot.cam-1.door.in", "rejected: nats: API error: code=400 err_code=10054 description=message size exceeds maximum allowed"},
	}
	for _, tc := range tests {
		t.Run(string(tc.kind), func(t *testing.T) {
			var logs testkit.Buffer
			log := slog.New(slog.NewTextHandler(&logs, nil))
			ob := newMemOutbox()
			ob.Append(records(1, 3, tc.subject)...)
			d := NewDeliverer(js, ob, ob.wake, DelivererOptions{AckTimeout: 300 * time.Millisecond}, log)
			runDeliverer(t, d)
			testkit.WaitFor(t, 10*time.Second, "a failure", func() bool { return d.Stats().Failures[tc.kind] >= 3 })
			s := d.Stats()
			if s.Failures.Total() != s.Failures[tc.kind] || s.LastErr == nil || s.LastErr.Error() != tc.lastErr || s.Acked != 0 {
				t.Errorf("stats %+v\nlast error %v\nwant      %s", s, s.LastErr, tc.lastErr)
			}
			if ob.Len() != 3 {
				t.Errorf("outbox holds %d, want the 3 events", ob.Len())
			}
			if want := "kind=" + string(tc.kind); !strings.Contains(logs.String(), want) {
				t.Errorf("logs lack %s:\n%s", want, logs.String())
			}
		})
	}
}

// TestDeliverRecoversFromOutboxErrors: a failing outbox is a failure like
// any other: counted, backed off, retried.
func TestDeliverRecoversFromOutboxErrors(t *testing.T) {
	ctx := context.Background()
	srv := startJS(t)
	_, js := jsConnect(t, srv.URL())
	_, err := EnsureStream(ctx, js, StreamSettings{Site: "depot"})
	must(t, err)
	ob := newMemOutbox()
	ob.readErr = errors.New("disk on fire")
	ob.Append(records(1, 10, "tallyd.depot.cam-1.door.in")...)
	d := NewDeliverer(js, ob, ob.wake, DelivererOptions{}, nil)
	runDeliverer(t, d)
	testkit.WaitFor(t, 5*time.Second, "an outbox failure", func() bool { return d.Stats().Failures[FailOutbox] > 0 })
	if s := d.Stats(); s.LastErr == nil || s.LastErr.Error() != "outbox: disk on fire" {
		t.Errorf("last error %v", s.LastErr)
	}
	ob.mu.Lock()
	ob.readErr = nil
	ob.mu.Unlock()
	testkit.WaitFor(t, 5*time.Second, "delivery", func() bool { return ob.Len() == 0 })
	if s := d.Stats(); s.Acked != 10 || s.LastErr != nil {
		t.Errorf("stats %+v", s)
	}
}

// TestDrainWithoutRun: before Run, Drain waits for it until its deadline;
// after Run returned, it answers at once. Either way it says what the
// outbox holds (counted by reading it, as memOutbox has no Stats).
func TestDrainWithoutRun(t *testing.T) {
	srv := startJS(t)
	_, js := jsConnect(t, srv.URL())
	ob := newMemOutbox()
	d := NewDeliverer(js, ob, nil, DelivererOptions{}, nil)
	ob.Append(records(1, 2500, "nowhere.depot.cam-1.door.in")...)
	ctx, cancel := context.WithTimeout(context.Background(), 100*time.Millisecond)
	defer cancel()
	err := d.Drain(ctx)
	var ue *UndeliveredError
	if !errors.As(err, &ue) || ue.Count != 2500 || err.Error() != "drain outbox: 2500 events not delivered yet (kept in the outbox for the next start): context deadline exceeded" {
		t.Errorf("Drain before Run = %v", err)
	}
	runDeliverer(t, d)()
	start := time.Now()
	err = d.Drain(context.Background())
	if !errors.As(err, &ue) || ue.Count != 2500 || !strings.HasPrefix(err.Error(), "drain outbox: 2500 events not delivered yet (kept in the outbox for the next start): deliverer stopped") {
		t.Errorf("Drain after Run = %v", err)
	}
	if took := time.Since(start); took > time.Second {
		t.Errorf("Drain after Run took %v", took)
	}
	ob.Delete([]uint64{1, 2, 3})
	ob2 := newMemOutbox()
	d2 := NewDeliverer(js, ob2, nil, DelivererOptions{}, nil)
	runDeliverer(t, d2)()
	must(t, d2.Drain(context.Background())) // stopped, but nothing left: no error
}

var _ Pending = (*outbox.Outbox)(nil)
var _ = nats.ErrTimeout

// TestDelivererLeavesNoGoroutines: once Run returned and the connection and
// server are closed, nothing the Deliverer started is left running.
func TestDelivererLeavesNoGoroutines(t *testing.T) {
	before := runtime.NumGoroutine()
	srv, err := StartEmbedded(EmbeddedOptions{StoreDir: t.TempDir()}, nil)
	must(t, err)
	nc, err := Connect(srv.URL(), "leak", nil)
	must(t, err)
	js, err := jetstream.New(nc)
	must(t, err)
	_, err = EnsureStream(context.Background(), js, StreamSettings{Site: "depot"})
	must(t, err)
	ob := newMemOutbox()
	ob.Append(records(1, 100, "tallyd.depot.cam-1.door.in")...)
	d := NewDeliverer(js, ob, ob.wake, DelivererOptions{}, nil)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- d.Run(ctx) }()
	dctx, dcancel := context.WithTimeout(ctx, 10*time.Second)
	must(t, d.Drain(dctx))
	dcancel()
	cancel()
	must(t, <-done)
	nc.Close()
	srv.Shutdown()
	testkit.WaitFor(t, 10*time.Second, "goroutines to finish", func() bool { return runtime.NumGoroutine() <= before })
}

// TestDeliverPrepareMakesTheStream: with EnsureStream as Prepare, a stream
// missing at start, or deleted later, is made and the events go through.
func TestDeliverPrepareMakesTheStream(t *testing.T) {
	ctx := context.Background()
	srv := startJS(t)
	_, js := jsConnect(t, srv.URL())
	var prepared atomic.Int64
	prepare := func(ctx context.Context) error {
		prepared.Add(1)
		_, err := EnsureStream(ctx, js, StreamSettings{Site: "depot"})
		return err
	}
	ob := newMemOutbox()
	ob.Append(records(1, 10, "tallyd.depot.cam-1.door.in")...)
	d := NewDeliverer(js, ob, ob.wake, DelivererOptions{Prepare: prepare}, nil)
	runDeliverer(t, d)
	testkit.WaitFor(t, 10*time.Second, "the first events", func() bool { return ob.Len() == 0 })
	must(t, js.DeleteStream(ctx, "TALLYD_DEPOT"))
	ob.Append(records(11, 20, "tallyd.depot.cam-1.door.in")...)
	testkit.WaitFor(t, 20*time.Second, "the events after the loss", func() bool { return ob.Len() == 0 })
	total, ids := streamIDs(t, js, "TALLYD_DEPOT")
	if total != 10 || ids["ev-000011"] != 1 || ids["ev-000020"] != 1 {
		t.Errorf("the new stream holds %d: %v", total, ids)
	}
	if s := d.Stats(); prepared.Load() != 2 || s.Failures[FailNoStream] == 0 || s.Acked != 20 {
		t.Errorf("prepared %d times; stats %+v", prepared.Load(), s)
	}
}
