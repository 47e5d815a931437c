package bus

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"tallyd/events"
	"tallyd/internal/testkit"
)

// publishEvents stores events of site depot with track ids from..to; rule
// "door" for odd ids, "desk" for even ones.
func publishEvents(t *testing.T, js jetstream.JetStream, from, to int) {
	t.Helper()
	for i := from; i <= to; i++ {
		rule := "door"
		if i%2 == 0 {
			rule = "desk"
		}
		ev := testEvent("depot", "cam-1", rule, "in", int64(i))
		_, err := js.Publish(context.Background(), ev.NATSSubject("tallyd"), mustJSON(t, ev), jetstream.WithMsgID(ev.ID))
		must(t, err)
	}
}

// follower runs Follow in the background, collecting track ids, until it
// has want events (then it cancels itself) or the test ends.
type follower struct {
	mu     sync.Mutex
	ids    []int64
	notice string
	done   chan error
	cancel context.CancelFunc
}

func follow(t *testing.T, js jetstream.JetStream, f Filter, fs FollowSettings, want int) *follower {
	t.Helper()
	fl := &follower{done: make(chan error, 1)}
	ctx, cancel := context.WithCancel(context.Background())
	fl.cancel = cancel
	t.Cleanup(cancel)
	fs.Stream = "TALLYD_DEPOT"
	fs.Notice = func(s string) { fl.mu.Lock(); fl.notice = s; fl.mu.Unlock() }
	ready := make(chan struct{})
	go func() {
		fl.done <- Follow(ctx, js, f, fs, func(_ string, ev events.Event, _ []byte) {
			fl.mu.Lock()
			defer fl.mu.Unlock()
			fl.ids = append(fl.ids, ev.Data.TrackID)
			if len(fl.ids) == want {
				cancel()
			}
		}, OnReady(func() { close(ready) }))
	}()
	select {
	case <-ready:
	case err := <-fl.done:
		t.Fatalf("Follow returned early: %v", err)
	}
	return fl
}

// wait waits for Follow to return and gives the ids seen.
func (fl *follower) wait(t *testing.T) []int64 {
	t.Helper()
	select {
	case err := <-fl.done:
		must(t, err)
	case <-time.After(20 * time.Second):
		t.Fatal("Follow did not return")
	}
	fl.mu.Lock()
	defer fl.mu.Unlock()
	return fl.ids
}

func seq(from, to int) string {
	var b strings.Builder
	for i := from; i <= to; i++ {
		fmt.Fprintf(&b, "%d ", i)
	}
	return strings.TrimSpace(b.String())
}

func idsString(ids []int64) string {
	return strings.Trim(fmt.Sprint(ids), "[]")
}

// TestFollowDurableResumes: a durable reader that was away when events were
// stored gets every one of them, in order, and none twice across runs, even
// when a run stops in the middle of a fetched batch.
func TestFollowDurableResumes(t *testing.T) {
	ctx := context.Background()
	srv := startJS(t)
	_, js := jsConnect(t, srv.URL())
	_, err := EnsureStream(ctx, js, StreamSettings{Site: "depot"})
	must(t, err)
	publishEvents(t, js, 1, 5) // before the durable exists: a new durable starts with the whole stream

	first := follow(t, js, Filter{Prefix: "tallyd", Site: "depot"}, FollowSettings{Durable: "desk-1"}, 5)
	if got := idsString(first.wait(t)); got != seq(1, 5) {
		t.Fatalf("first run got %s", got)
	}
	publishEvents(t, js, 6, 105) // the reader is away

	second := follow(t, js, Filter{Prefix: "tallyd", Site: "depot"}, FollowSettings{Durable: "desk-1", All: true}, 60)
	if got := idsString(second.wait(t)); got != seq(6, 65) {
		t.Fatalf("second run got %s", got)
	}
	if !strings.Contains(second.notice, "durable consumer desk-1 exists: resuming after the last event it acknowledged") ||
		!strings.HasSuffix(second.notice, "; a start time or all only applies to a new one") {
		t.Errorf("notice %q", second.notice)
	}
	third := follow(t, js, Filter{Prefix: "tallyd", Site: "depot"}, FollowSettings{Durable: "desk-1"}, 40)
	if got := idsString(third.wait(t)); got != seq(66, 105) {
		t.Fatalf("third run got %s", got)
	}
	if !strings.Contains(third.notice, "(40 waiting)") {
		t.Errorf("notice %q", third.notice)
	}
}

// TestFollowReplays: an ephemeral reader replays from the start or from a
// time, then follows new events; a filter applies.
func TestFollowReplays(t *testing.T) {
	ctx := context.Background()
	srv := startJS(t)
	_, js := jsConnect(t, srv.URL())
	st, err := EnsureStream(ctx, js, StreamSettings{Site: "depot"})
	must(t, err)
	publishEvents(t, js, 1, 20)
	m, err := st.GetMsg(ctx, 11)
	must(t, err)

	all := follow(t, js, Filter{Prefix: "tallyd"}, FollowSettings{All: true}, 25)
	since := follow(t, js, Filter{Prefix: "tallyd"}, FollowSettings{Since: m.Time}, 15)
	doors := follow(t, js, Filter{Prefix: "tallyd", Rule: "door"}, FollowSettings{All: true}, 13)
	publishEvents(t, js, 21, 25) // live, after the history
	if got := idsString(all.wait(t)); got != seq(1, 25) {
		t.Errorf("all: %s", got)
	}
	if got := idsString(since.wait(t)); got != seq(11, 25) {
		t.Errorf("since event 11: %s", got)
	}
	if got := idsString(doors.wait(t)); got != "1 3 5 7 9 11 13 15 17 19 21 23 25" {
		t.Errorf("doors: %s", got)
	}
}

func TestFollowErrors(t *testing.T) {
	ctx := context.Background()
	srv := startJS(t)
	nc, js := jsConnect(t, srv.URL())
	_, err := EnsureStream(ctx, js, StreamSettings{Site: "depot"})
	must(t, err)
	nop := func(string, events.Event, []byte) {}
	follow(t, js, Filter{Prefix: "tallyd", Rule: "door"}, FollowSettings{Durable: "d1"}, 0).cancel()
	plain := startServer(t)
	_, plainJS := jsConnect(t, plain.URL())

	tests := []struct {
		name string
		js   jetstream.JetStream
		f    Filter
		fs   FollowSettings
		want string
		is   error
	}{
		{"no stream", js, Filter{Prefix: "tallyd"}, FollowSettings{Stream: "TALLYD_YARD"},
			"follow stream TALLYD_YARD: no stream (nothing was stored for this site on this server)", ErrNoStream},
		{"since and all", js, Filter{Prefix: "tallyd"}, FollowSettings{Stream: "TALLYD_DEPOT", All: true, Since: time.Now()},
			"follow stream TALLYD_DEPOT: give a start time or all, not both", nil},
		{"durable with another filter", js, Filter{Prefix: "tallyd", Rule: "desk"}, FollowSettings{Stream: "TALLYD_DEPOT", Durable: "d1"},
			"durable consumer d1 on stream TALLYD_DEPOT follows tallyd.*.*.door.*, not tallyd.*.*.desk.*: use another name for another filter", nil},
		{"bad durable name", js, Filter{Prefix: "tallyd"}, FollowSettings{Stream: "TALLYD_DEPOT", Durable: "a.b"},
			`follow stream TALLYD_DEPOT: durable name: invalid subject token "a.b": '.' at byte 1 is not a letter, digit, '-' or '_'`, ErrInvalidToken},
		{"no jetstream", plainJS, Filter{Prefix: "tallyd"}, FollowSettings{Stream: "TALLYD_DEPOT"},
			"follow stream TALLYD_DEPOT: nats server has no jetstream (persistence) for this account (nats: no responders available for request)", ErrNoJetStream},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			err := Follow(ctx, tc.js, tc.f, tc.fs, nop)
			if err == nil || err.Error() != tc.want || (tc.is != nil && !errors.Is(err, tc.is)) {
				t.Errorf("error\n got %v\nwant %s", err, tc.want)
			}
		})
	}

	// Malformed messages: reported and skipped with OnMalformed (and
	// acknowledged), else Follow stops with the error.
	must(t, nc.Publish("tallyd.depot.cam-1.door.in", []byte(`{"specversion":"0.3"}`)))
	publishEvents(t, js, 1, 1)
	var bad []*MalformedError
	var got int
	cctx, cancel := context.WithCancel(ctx)
	defer cancel()
	err = Follow(cctx, js, Filter{Prefix: "tallyd"}, FollowSettings{Stream: "TALLYD_DEPOT", Durable: "d2", All: true},
		func(string, events.Event, []byte) { got++; cancel() }, OnMalformed(func(me *MalformedError) { bad = append(bad, me) }))
	must(t, err)
	if got != 1 || len(bad) != 1 || bad[0].Error() != `subject tallyd.depot.cam-1.door.in: malformed event: attribute "specversion": want "1.0", found "0.3"` {
		t.Errorf("got %d events, malformed %v", got, bad)
	}
	err = Follow(ctx, js, Filter{Prefix: "tallyd"}, FollowSettings{Stream: "TALLYD_DEPOT", All: true}, nop)
	var me *MalformedError
	if !errors.As(err, &me) || me.Subject != "tallyd.depot.cam-1.door.in" {
		t.Errorf("without OnMalformed: %v", err)
	}
}

// TestSubscribeReportsDrops: a core subscriber that falls behind loses
// events, and OnDropped says how many; delivered plus dropped is all.
func TestSubscribeReportsDrops(t *testing.T) {
	srv := startServer(t)
	pubConn, subConn := connect(t, srv.URL()), connect(t, srv.URL())
	var mu sync.Mutex
	var delivered, dropped int
	release := make(chan struct{})
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	ready := make(chan struct{})
	go func() {
		done <- Subscribe(ctx, subConn, Filter{Prefix: "tallyd"}, func(string, events.Event, []byte) {
			<-release
			mu.Lock()
			delivered++
			mu.Unlock()
		}, BufferLimit(10), OnDropped(func(n int) { mu.Lock(); dropped += n; mu.Unlock() }), OnReady(func() { close(ready) }))
	}()
	<-ready
	pub := NewPublisher(pubConn, "tallyd")
	const n = 200
	for i := range n {
		must(t, pub.Publish(ctx, testEvent("depot", "cam-1", "door", "in", int64(i))))
	}
	must(t, pub.Flush(5*time.Second))
	testkit.WaitFor(t, 10*time.Second, "drops to be reported", func() bool { mu.Lock(); defer mu.Unlock(); return dropped > 0 })
	close(release)
	testkit.WaitFor(t, 10*time.Second, "every event delivered or dropped", func() bool {
		mu.Lock()
		defer mu.Unlock()
		return delivered+dropped == n
	})
	cancel()
	must(t, <-done)
	t.Logf("%d delivered, %d dropped (buffer of 10)", delivered, dropped)
}
