package bus

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"

	"tallyd/events"
	"tallyd/internal/testkit"
)

func startServer(t *testing.T) *Embedded {
	t.Helper()
	srv, err := StartEmbedded(EmbeddedOptions{Host: "127.0.0.1"}, nil)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(srv.Shutdown)
	return srv
}

func connect(t *testing.T, url string) *nats.Conn {
	t.Helper()
	nc, err := Connect(url, t.Name(), nil)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(nc.Close)
	return nc
}

func testEvent(site, source, rule string, kind events.Kind, track int64) events.Event {
	types := map[events.Kind]string{"in": events.TypeLineIn, "out": events.TypeLineOut, "enter": events.TypeZoneEnter, "exit": events.TypeZoneExit, "dwell": events.TypeZoneDwell}
	return events.Event{
		SpecVersion: events.SpecVersion, ID: events.EventID(site, source, rule, kind, track, 1, ""),
		Source: events.EventSource(site, source), Type: types[kind], Subject: rule,
		Time: time.Date(2025, 3, 1, 8, 0, 0, 0, time.UTC), DataContentType: events.ContentType,
		Data: events.Data{Site: site, Source: source, Rule: rule, Kind: kind, TrackID: track, Class: "person"},
	}
}

// collector gathers what a Subscribe call delivers.
type collector struct {
	mu   sync.Mutex
	got  []events.Event
	subj []string
	bad  []*MalformedError
}

func (c *collector) add(subject string, ev events.Event, _ []byte) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.got = append(c.got, ev)
	c.subj = append(c.subj, subject)
}

func (c *collector) malformed(e *MalformedError) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.bad = append(c.bad, e)
}

func (c *collector) count() (int, int) {
	c.mu.Lock()
	defer c.mu.Unlock()
	return len(c.got), len(c.bad)
}

// subscription is a Subscribe call running in the background.
type subscription struct {
	done chan struct{} // closed when Subscribe has returned
	err  error         // its result, set before done is closed
}

// subscribe runs Subscribe in the background until the test ends and
// returns once the subscription is registered.
func subscribe(t *testing.T, nc *nats.Conn, f Filter, c *collector, opts ...SubscribeOption) *subscription {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	ready := make(chan struct{})
	s := &subscription{done: make(chan struct{})}
	go func() {
		defer close(s.done)
		s.err = Subscribe(ctx, nc, f, c.add, append(opts, OnReady(func() { close(ready) }))...)
	}()
	t.Cleanup(func() {
		cancel()
		<-s.done
	})
	select {
	case <-ready:
	case <-s.done:
		t.Fatalf("Subscribe returned early: %v", s.err)
	case <-time.After(10 * time.Second):
		t.Fatal("subscription not ready after 10s")
	}
	return s
}

func TestPublishSubscribeExactlyN(t *testing.T) {
	srv := startServer(t)
	pubConn, subConn := connect(t, srv.URL()), connect(t, srv.URL())
	var c collector
	subscribe(t, subConn, Filter{Prefix: "tallyd"}, &c)

	pub := NewPublisher(pubConn, "tallyd")
	const n = 300
	kinds := []events.Kind{"in", "out", "enter", "exit", "dwell"}
	for i := range n {
		ev := testEvent("depot", fmt.Sprintf("cam-%d", i%3), fmt.Sprintf("rule_%d", i%4), kinds[i%5], int64(i))
		if err := pub.Publish(context.Background(), ev); err != nil {
			t.Fatal(err)
		}
	}
	if err := pub.Flush(5 * time.Second); err != nil {
		t.Fatal(err)
	}
	testkit.WaitFor(t, 10*time.Second, "all events", func() bool { got, _ := c.count(); return got >= n })
	if err := pub.Close(); err != nil {
		t.Fatal(err)
	}
	if got := pub.Published(); got != n {
		t.Errorf("Published() = %d, want %d", got, n)
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	if len(c.got) != n {
		t.Fatalf("received %d, want exactly %d", len(c.got), n)
	}
	ids := map[string]bool{}
	for i, ev := range c.got {
		// CloudEvents 1.0 required attributes: specversion, id, source, type
		// (github.com/cloudevents/spec, spec.md "Required Attributes").
		if ev.SpecVersion != "1.0" || ev.ID == "" || ev.Source != "/tallyd/depot/"+ev.Data.Source || !strings.HasPrefix(ev.Type, "tallyd.") {
			t.Fatalf("event %d: bad attributes %+v", i, ev)
		}
		if want := ev.NATSSubject("tallyd"); c.subj[i] != want {
			t.Fatalf("event %d on %s, want %s", i, c.subj[i], want)
		}
		ids[ev.ID] = true
	}
	if len(ids) != n {
		t.Errorf("%d distinct ids, want %d", len(ids), n)
	}
}

func TestSubscribeFilter(t *testing.T) {
	srv := startServer(t)
	pubConn, subConn := connect(t, srv.URL()), connect(t, srv.URL())
	var c collector
	subscribe(t, subConn, Filter{Prefix: "tallyd", Site: "depot", Rule: "door"}, &c)
	pub := NewPublisher(pubConn, "tallyd")
	want := 0
	for _, site := range []string{"depot", "yard"} {
		for _, rule := range []string{"door", "desk"} {
			for _, src := range []string{"cam-1", "cam-2"} {
				if err := pub.Publish(context.Background(), testEvent(site, src, rule, "in", 1)); err != nil {
					t.Fatal(err)
				}
				if site == "depot" && rule == "door" {
					want++
				}
			}
		}
	}
	// Another prefix is never seen either.
	if err := NewPublisher(pubConn, "other").Publish(context.Background(), testEvent("depot", "cam-1", "door", "in", 1)); err != nil {
		t.Fatal(err)
	}
	// NATS keeps one connection's messages in order: once this last
	// matching event is in, everything before it has been filtered.
	if err := pub.Publish(context.Background(), testEvent("depot", "cam-9", "door", "out", 99)); err != nil {
		t.Fatal(err)
	}
	want++
	testkit.WaitFor(t, 10*time.Second, "the last event", func() bool { got, _ := c.count(); return got >= want })
	c.mu.Lock()
	defer c.mu.Unlock()
	if len(c.got) != want {
		t.Fatalf("received %d, want %d", len(c.got), want)
	}
	for _, ev := range c.got {
		if ev.Data.Site != "depot" || ev.Data.Rule != "door" {
			t.Errorf("filter let through %s/%s", ev.Data.Site, ev.Data.Rule)
		}
	}
}

func TestSubscribeMalformed(t *testing.T) {
	srv := startServer(t)
	pubConn, subConn := connect(t, srv.URL()), connect(t, srv.URL())

	// With OnMalformed: reported with subject and reason, listening goes on.
	var c collector
	subscribe(t, subConn, Filter{Prefix: "tallyd"}, &c, OnMalformed(c.malformed))
	must(t, pubConn.Publish("tallyd.depot.cam-1.door.in", []byte(`{"specversion":"0.3"}`)))
	good := testEvent("depot", "cam-1", "door", "in", 1)
	raw := mustJSON(t, good)
	// Valid event on a subject that disagrees with its data.
	must(t, pubConn.Publish("tallyd.depot.cam-2.door.in", raw))
	must(t, NewPublisher(pubConn, "tallyd").Publish(context.Background(), good))
	testkit.WaitFor(t, 10*time.Second, "three messages", func() bool { g, b := c.count(); return g+b >= 3 })
	c.mu.Lock()
	if len(c.got) != 1 || len(c.bad) != 2 {
		t.Fatalf("got %d events and %d malformed, want 1 and 2", len(c.got), len(c.bad))
	}
	wantErrs := []string{
		`subject tallyd.depot.cam-1.door.in: malformed event: attribute "specversion": want "1.0", found "0.3"`,
		`subject tallyd.depot.cam-2.door.in: malformed event: data says subject tallyd.depot.cam-1.door.in`,
	}
	for i, w := range wantErrs {
		if got := c.bad[i].Error(); got != w {
			t.Errorf("malformed %d:\n got %q\nwant %q", i, got, w)
		}
		if !errors.Is(c.bad[i], events.ErrMalformed) {
			t.Errorf("malformed %d does not wrap events.ErrMalformed", i)
		}
	}
	c.mu.Unlock()

	// Without OnMalformed: Subscribe stops and returns the error.
	var c2 collector
	sub := subscribe(t, subConn, Filter{Prefix: "strict"}, &c2)
	must(t, pubConn.Publish("strict.depot.cam-1.door.in", []byte("not json")))
	select {
	case <-sub.done:
		err := sub.err
		var me *MalformedError
		if !errors.As(err, &me) || me.Subject != "strict.depot.cam-1.door.in" || string(me.Raw) != "not json" {
			t.Fatalf("Subscribe returned %v, want a MalformedError for the subject", err)
		}
		if got, want := err.Error(), "subject strict.depot.cam-1.door.in: malformed event: not a JSON object"; got != want {
			t.Errorf("error %q, want %q", got, want)
		}
	case <-time.After(10 * time.Second):
		t.Fatal("Subscribe did not return on a malformed message")
	}
}

func TestSubscribeReturnsOnCancelAndClose(t *testing.T) {
	srv := startServer(t)
	nc := connect(t, srv.URL())
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	ready := make(chan struct{})
	go func() {
		done <- Subscribe(ctx, nc, Filter{Prefix: "tallyd"}, func(string, events.Event, []byte) {}, OnReady(func() { close(ready) }))
	}()
	<-ready
	cancel()
	if err := <-done; err != nil {
		t.Errorf("after cancel: %v, want nil", err)
	}

	nc2, err := Connect(srv.URL(), "closing", nil)
	if err != nil {
		t.Fatal(err)
	}
	ready = make(chan struct{})
	go func() {
		done <- Subscribe(context.Background(), nc2, Filter{Prefix: "tallyd"}, func(string, events.Event, []byte) {}, OnReady(func() { close(ready) }))
	}()
	<-ready
	nc2.Close()
	select {
	case err := <-done:
		if !errors.Is(err, nats.ErrConnectionClosed) {
			t.Errorf("after close: %v, want ErrConnectionClosed", err)
		}
	case <-time.After(10 * time.Second):
		t.Fatal("Subscribe did not return when the connection closed")
	}
	if err := Subscribe(context.Background(), nc, Filter{}, nil); err == nil || err.Error() != "filter prefix: invalid subject token: empty prefix" {
		t.Errorf("empty prefix: %v", err)
	}
}

func must(t testing.TB, err error) {
	t.Helper()
	if err != nil {
		t.Fatal(err)
	}
}

func mustJSON(t *testing.T, ev events.Event) []byte {
	t.Helper()
	b, err := json.Marshal(ev)
	must(t, err)
	return b
}
