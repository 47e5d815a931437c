package fleet

import (
	"context"
	"fmt"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"tallyd/internal/testkit"
)

// connect opens a client on the whole cluster that reconnects fast.
func connect(t testing.TB, urls string) (*nats.Conn, jetstream.JetStream) {
	t.Helper()
	return testkit.JetStream(t, urls, nats.ReconnectWait(50*time.Millisecond), nats.MaxReconnects(-1), nats.Timeout(time.Second))
}

// ledger checks the fencing promise across members: when a hold starts, no
// other member's hold of the same lease is still valid, and tokens grow.
type ledger struct {
	mu         sync.Mutex
	cur        map[string]*Hold
	violations []string
}

func newLedger() *ledger { return &ledger{cur: map[string]*Hold{}} }

func (l *ledger) start(h *Hold) {
	now := time.Now()
	l.mu.Lock()
	defer l.mu.Unlock()
	k := string(h.Kind) + "." + h.Name
	if p := l.cur[k]; p != nil {
		if p.Member != h.Member && p.Valid(now) {
			l.violations = append(l.violations, fmt.Sprintf("%s: %s started token %d while %s's token %d was still valid", k, h.Member, h.Token, p.Member, p.Token))
		}
		if h.Token <= p.Token {
			l.violations = append(l.violations, fmt.Sprintf("%s: token %d after %d", k, h.Token, p.Token))
		}
	}
	l.cur[k] = h
}

func (l *ledger) check(t testing.TB) {
	t.Helper()
	l.mu.Lock()
	defer l.mu.Unlock()
	for _, v := range l.violations {
		t.Error(v)
	}
}

// stopRec is one Holder.Stop call.
type stopRec struct {
	h     *Hold
	cause Cause
	at    time.Time
}

// recorder is a Holder that records its calls.
type recorder struct {
	name   string
	ledger *ledger
	mu     sync.Mutex
	starts []*Hold
	stops  []stopRec
}

func (r *recorder) Start(h *Hold) {
	if r.ledger != nil {
		r.ledger.start(h)
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	r.starts = append(r.starts, h)
}

func (r *recorder) Stop(h *Hold, cause Cause) {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.stops = append(r.stops, stopRec{h, cause, time.Now()})
}

func (r *recorder) stopsWith(c Cause) []stopRec {
	r.mu.Lock()
	defer r.mu.Unlock()
	var out []stopRec
	for _, s := range r.stops {
		if s.cause == c {
			out = append(out, s)
		}
	}
	return out
}

// startsAfter are the holds started at or after t.
func (r *recorder) startsAfter(t time.Time) []*Hold {
	r.mu.Lock()
	defer r.mu.Unlock()
	var out []*Hold
	for _, h := range r.starts {
		if !h.Since.Before(t) {
			out = append(out, h)
		}
	}
	return out
}

// fleet is a group of members of one site for a test.
type fleet struct {
	t       testing.TB
	site    string
	urls    string
	ledger  *ledger
	members []*Member
	recs    []*recorder
	cancels []context.CancelFunc
	conns   []*nats.Conn
}

func newFleet(t testing.TB, c *testkit.Cluster, site string) *fleet {
	return &fleet{t: t, site: site, urls: c.URLs(), ledger: newLedger()}
}

// join adds a member with its own connection; o.Site and o.Member are set
// here, o.Log when nil.
func (f *fleet) join(name string, o Options) *Member {
	f.t.Helper()
	nc, js := connect(f.t, f.urls)
	ctx, cancel := context.WithCancel(context.Background())
	o.Site, o.Member = f.site, name
	if o.Log == nil {
		o.Log = testkit.Log(f.t).With("test", f.t.Name())
	}
	rec := &recorder{name: name, ledger: f.ledger}
	m, err := Join(ctx, js, o, rec)
	if err != nil {
		cancel()
		f.t.Fatal(err)
	}
	f.members, f.recs, f.cancels, f.conns = append(f.members, m), append(f.recs, rec), append(f.cancels, cancel), append(f.conns, nc)
	f.t.Cleanup(func() {
		cancel()
		m.wg.Wait()
	})
	return m
}

// holders maps each source held now to its holders (by Holds()).
func (f *fleet) holders(alive ...int) map[string][]string {
	out := map[string][]string{}
	for _, i := range alive {
		for _, h := range f.members[i].Holds() {
			if h.Kind == KindSource && h.Valid(time.Now()) {
				out[h.Name] = append(out[h.Name], h.Member)
			}
		}
	}
	return out
}

// spread is how many valid source holds each of the given members has.
func (f *fleet) spread(alive ...int) []int {
	var n []int
	for _, i := range alive {
		c := 0
		for _, h := range f.members[i].Holds() {
			if h.Kind == KindSource && h.Valid(time.Now()) {
				c++
			}
		}
		n = append(n, c)
	}
	return n
}

// allHeldOnce says whether every source is held by exactly one of the
// given members.
func (f *fleet) allHeldOnce(sources []string, alive ...int) bool {
	hs := f.holders(alive...)
	for _, s := range sources {
		if len(hs[s]) != 1 {
			return false
		}
	}
	return len(hs) == len(sources)
}

func sourceNames(n int) []string {
	var s []string
	for i := 0; i < n; i++ {
		s = append(s, fmt.Sprintf("cam%d", i+1))
	}
	return s
}
