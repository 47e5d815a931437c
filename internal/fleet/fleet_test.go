package fleet

import (
	"context"
	"encoding/json"
	"errors"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"tallyd/events"
	"tallyd/internal/testkit"
)

const (
	testTTL = 2 * time.Second
	ctxWait = 10 * time.Second
)

// TestFleet runs every lease scenario on one 3-node JetStream cluster on
// loopback with R3 buckets (starting a cluster costs seconds). The node
// failure runs last.
func TestFleet(t *testing.T) {
	c := testkit.StartCluster(t, 3)
	t.Run("Spread", func(t *testing.T) { testSpread(t, c) })
	t.Run("DeadMember", func(t *testing.T) { testDeadMember(t, c) })
	t.Run("Leave", func(t *testing.T) { testLeave(t, c) })
	t.Run("Paused", func(t *testing.T) { testPaused(t, c) })
	t.Run("SameName", func(t *testing.T) { testSameName(t, c) })
	t.Run("StuckWatcher", func(t *testing.T) { testStuckWatcher(t, c) })
	t.Run("Sites", func(t *testing.T) { testSites(t, c) })
	t.Run("KeepArea", func(t *testing.T) { testKeepArea(t, c) })
	t.Run("NodeDown", func(t *testing.T) { testNodeDown(t, c) })
}

func opts(sources []string, capacity int) Options {
	return Options{TTL: testTTL, Capacity: capacity, Sources: sources, Replicas: 3}
}

// startThree starts three members of site over six sources and waits until
// each holds two.
func startThree(t *testing.T, c *testkit.Cluster, site string, capacity int) (*fleet, []string) {
	t.Helper()
	f := newFleet(t, c, site)
	src := sourceNames(6)
	for _, n := range []string{"a", "b", "c"} {
		f.join(n, opts(src, capacity))
	}
	testkit.WaitFor(t, 3*testTTL, "6 sources spread 2/2/2 over three members", func() bool {
		s := f.spread(0, 1, 2)
		return f.allHeldOnce(src, 0, 1, 2) && s[0] == 2 && s[1] == 2 && s[2] == 2
	})
	return f, src
}

func testSpread(t *testing.T, c *testkit.Cluster) {
	f, src := startThree(t, c, "spread", 6)
	// It stays that way over several renewal periods.
	time.Sleep(testTTL)
	if s := f.spread(0, 1, 2); !f.allHeldOnce(src, 0, 1, 2) || s[0] != 2 || s[1] != 2 || s[2] != 2 {
		t.Fatalf("spread changed: %v %v", s, f.holders(0, 1, 2))
	}
	for i, m := range f.members {
		if st := m.Stats(); st.Lost != 0 || st.Rebalance != 0 {
			t.Errorf("member %d: %+v", i, st)
		}
	}

	_, js := connect(t, c.URLs())
	ctx, cancel := context.WithTimeout(context.Background(), ctxWait)
	defer cancel()
	st, err := ReadStatus(ctx, js, "spread")
	if err != nil {
		t.Fatal(err)
	}
	if len(st.Members) != 3 || len(st.Leases) != 6 || len(st.Handovers) != 6 {
		t.Fatalf("status: %d members, %d leases, %d hand-overs; want 3, 6, 6: %+v", len(st.Members), len(st.Leases), len(st.Handovers), st)
	}
	for _, m := range st.Members {
		if m.Holding != 2 || m.Capacity != 6 || m.RenewedAgoS > testTTL.Seconds() {
			t.Errorf("member status %+v", m)
		}
	}
	byName := map[string]*Hold{}
	for _, m := range f.members {
		for _, h := range m.Holds() {
			byName[h.Name] = h
		}
	}
	for _, l := range st.Leases {
		h := byName[l.Name]
		if h == nil || l.Holder != h.Member || l.Token != h.Token || l.Kind != KindSource {
			t.Errorf("lease status %+v, hold %+v", l, h)
		}
	}
	for _, ho := range st.Handovers {
		if ho.Cause != CauseFirst || ho.From != "" || ho.GapS != nil {
			t.Errorf("first hand-over %+v", ho)
		}
	}
	if _, err := ReadStatus(ctx, js, "nosuchsite"); !errors.Is(err, ErrNoFleet) {
		t.Errorf("status of an unknown site: %v, want ErrNoFleet", err)
	}
	f.ledger.check(t)
}

func testDeadMember(t *testing.T, c *testkit.Cluster) {
	f, src := startThree(t, c, "dead", 6)
	dead := f.members[0].Holds()
	killed := time.Now()
	f.cancels[0]() // no Leave: its leases stay until they expire
	// A hold is listed by Holds just before the holder's Start is called:
	// wait for both.
	started := func() bool {
		for _, d := range dead {
			found := false
			for _, r := range f.recs[1:] {
				for _, h := range r.startsAfter(killed) {
					found = found || h.Name == d.Name
				}
			}
			if !found {
				return false
			}
		}
		return true
	}
	testkit.WaitFor(t, testTTL+2*time.Second, "the dead member's sources taken by the others", func() bool {
		return f.allHeldOnce(src, 1, 2) && started()
	})
	took := time.Since(killed)
	t.Logf("taken over %v after the kill (ttl %v)", took, testTTL)
	for _, d := range dead {
		var got *Hold
		for _, r := range f.recs[1:] {
			for _, h := range r.startsAfter(killed) {
				if h.Name == d.Name {
					got = h
				}
			}
		}
		if got == nil {
			t.Fatalf("%s: no new hold", d.Name)
		}
		if got.Prior == nil || got.Prior.Member != "a" || got.Prior.Cause != CauseExpired || got.Prior.Token != d.Token {
			t.Errorf("%s: prior %+v, want member a, expired, token %d", d.Name, got.Prior, d.Token)
		}
		if got.Token <= d.Token {
			t.Errorf("%s: token %d not above the dead one's %d", d.Name, got.Token, d.Token)
		}
	}
	if s := f.spread(1, 2); s[0] != 3 || s[1] != 3 {
		t.Errorf("spread after the death: %v, want 3 3", s)
	}
	f.ledger.check(t)
}

func testLeave(t *testing.T, c *testkit.Cluster) {
	f, src := startThree(t, c, "leave", 6)
	left := f.members[0].Holds()
	t0 := time.Now()
	ctx, cancel := context.WithTimeout(context.Background(), ctxWait)
	defer cancel()
	if err := f.members[0].Leave(ctx); err != nil {
		t.Fatal(err)
	}
	if st := f.recs[0].stopsWith(CauseStopping); len(st) != 2 {
		t.Errorf("Stop(stopping) called %d times, want 2", len(st))
	}
	testkit.WaitFor(t, testTTL/2, "the leaver's sources taken well under the ttl", func() bool {
		return f.allHeldOnce(src, 1, 2)
	})
	t.Logf("taken over %v after Leave began (ttl %v)", time.Since(t0), testTTL)
	for _, d := range left {
		for _, r := range f.recs[1:] {
			for _, h := range r.startsAfter(t0) {
				if h.Name == d.Name && (h.Prior == nil || h.Prior.Cause != CauseReleased || h.Prior.Member != "a") {
					t.Errorf("%s: prior %+v, want member a, released", d.Name, h.Prior)
				}
			}
		}
	}
	f.ledger.check(t)
}

func testPaused(t *testing.T, c *testkit.Cluster) {
	f := newFleet(t, c, "paused")
	src := sourceNames(2)
	var pausing sync.Mutex
	var paused bool
	resume := make(chan struct{})
	oa := opts(src, 2)
	oa.pause = func() {
		pausing.Lock()
		p := paused
		paused = false
		pausing.Unlock()
		if p {
			<-resume // frozen past the ttl
		}
	}
	a := f.join("a", oa)
	var thaw sync.Once
	t.Cleanup(func() { thaw.Do(func() { close(resume) }) }) // runs before the member's cleanup
	f.join("b", opts(src, 2))
	testkit.WaitFor(t, 3*testTTL, "one source each", func() bool {
		s := f.spread(0, 1)
		return f.allHeldOnce(src, 0, 1) && s[0] == 1 && s[1] == 1
	})
	held := a.Holds()
	pausing.Lock()
	paused = true
	pausing.Unlock()
	testkit.WaitFor(t, 2*testTTL+2*time.Second, "b takes both sources from the frozen a", func() bool {
		return f.allHeldOnce(src, 1)
	})
	// a's holds ended (Valid false, Done closed, Stop with lost) before
	// b's began: the ledger checks the order at each Start.
	for _, h := range held {
		select {
		case <-h.Done():
		default:
			t.Errorf("%s: Done not closed", h.Name)
		}
		if h.Valid(time.Now()) {
			t.Errorf("%s: still valid", h.Name)
		}
	}
	lost := f.recs[0].stopsWith(CauseLost)
	if len(lost) != 1 || lost[0].h != held[0] {
		t.Fatalf("a's Stop(lost) calls: %+v, want one for %s", lost, held[0].Name)
	}
	for _, h := range f.recs[1].startsAfter(lost[0].h.Since) {
		for _, l := range lost {
			if l.h.Name == h.Name && !l.at.Before(h.Since) {
				t.Errorf("%s: b started at %v, a stopped only at %v", h.Name, h.Since, l.at)
			}
		}
	}
	thaw.Do(func() { close(resume) })
	// Thawed, a joins again and the spread gives it one source back.
	testkit.WaitFor(t, 4*testTTL, "a back with one source", func() bool {
		s := f.spread(0, 1)
		return f.allHeldOnce(src, 0, 1) && s[0] == 1 && s[1] == 1
	})
	if st := f.members[1].Stats(); st.Rebalance < 1 {
		t.Errorf("b: no rebalance counted: %+v", st)
	}
	if st := f.members[0].Stats(); st.Lost != 1 {
		t.Errorf("a: %+v, want 1 lost", st)
	}
	f.ledger.check(t)
}

func testSites(t *testing.T, c *testkit.Cluster) {
	_, js := connect(t, c.URLs())
	ctx, cancel := context.WithTimeout(context.Background(), ctxWait)
	defer cancel()
	s, err := OpenSites(ctx, js, 3)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := s.Get(ctx, "terminal"); !errors.Is(err, ErrNoSite) {
		t.Fatalf("get before push: %v, want ErrNoSite", err)
	}
	rev1, err := s.Push(ctx, "terminal", []byte("site: terminal\n"))
	if err != nil {
		t.Fatal(err)
	}
	wctx, wcancel := context.WithCancel(ctx)
	ch, err := s.Watch(wctx, "terminal")
	if err != nil {
		t.Fatal(err)
	}
	v, err := s.Get(ctx, "terminal")
	if err != nil || string(v.Data) != "site: terminal\n" || v.Revision != rev1 {
		t.Fatalf("get: %+v %v", v, err)
	}
	if _, err := s.Push(ctx, "other", []byte("site: other\n")); err != nil {
		t.Fatal(err)
	}
	rev2, err := s.Push(ctx, "terminal", []byte("site: terminal\n# v2\n"))
	if err != nil {
		t.Fatal(err)
	}
	select {
	case got := <-ch:
		if got.Revision != rev2 || !strings.Contains(string(got.Data), "v2") {
			t.Errorf("watch got rev %d %q, want rev %d (not the current one, not another site)", got.Revision, got.Data, rev2)
		}
	case <-time.After(5 * time.Second):
		t.Fatal("watch: nothing")
	}
	wcancel()
	select {
	case _, ok := <-ch:
		if ok {
			t.Error("watch sent after cancel")
		}
	case <-time.After(5 * time.Second):
		t.Error("watch channel not closed after cancel")
	}

	big := make([]byte, MaxSiteSize+1)
	for _, tc := range []struct {
		name string
		data []byte
		want string
	}{
		{"", []byte("x"), "push site: site name is empty"},
		{"a.b", []byte("x"), `push site: site name "a.b": only letters, digits, '-' and '_' are allowed`},
		{"a b", []byte("x"), `push site: site name "a b": only letters, digits, '-' and '_' are allowed`},
		{"terminal", nil, "push site terminal: the site file is empty"},
		{"terminal", big, "push site terminal: the site file has 1048577 bytes, limit 1048576"},
	} {
		if _, err := s.Push(ctx, tc.name, tc.data); err == nil || err.Error() != tc.want {
			t.Errorf("push %q (%d bytes): %v, want %q", tc.name, len(tc.data), err, tc.want)
		}
	}
	if _, err := s.Get(ctx, "a*"); err == nil || !strings.Contains(err.Error(), `site name "a*"`) {
		t.Errorf("get a*: %v", err)
	}
	if _, err := s.Watch(ctx, ""); err == nil || !strings.Contains(err.Error(), "site name is empty") {
		t.Errorf("watch empty: %v", err)
	}
}

func testKeepArea(t *testing.T, c *testkit.Cluster) {
	_, js := connect(t, c.URLs())
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	kv, err := js.CreateKeyValue(ctx, jetstream.KeyValueConfig{Bucket: "area-state", History: 1, Replicas: 3})
	if err != nil {
		t.Fatal(err)
	}
	put := func(key string, occ, enter, exit int) {
		t.Helper()
		b, _ := json.Marshal(events.RuleState{Totals: events.Totals{Kind: events.RuleZone, Enter: enter, Exit: exit}, Occupancy: occ})
		if _, err := kv.Put(ctx, key, b); err != nil {
			t.Fatal(err)
		}
	}
	put("cam1.deck", 2, 5, 3)
	zones := []ZoneRef{{"cam1", "deck"}, {"cam2", "ramp"}}
	var mu sync.Mutex
	var got []events.AreaData
	kctx, kcancel := context.WithCancel(ctx)
	done := make(chan error, 1)
	go func() {
		done <- KeepArea(kctx, kv, "boarding", zones, func(a events.AreaData) {
			mu.Lock()
			got = append(got, a)
			mu.Unlock()
		})
	}()
	last := func() (events.AreaData, int) {
		mu.Lock()
		defer mu.Unlock()
		if len(got) == 0 {
			return events.AreaData{}, 0
		}
		return got[len(got)-1], len(got)
	}
	testkit.WaitFor(t, 5*time.Second, "the first area state", func() bool {
		select {
		case err := <-done:
			t.Fatalf("KeepArea returned early: %v", err)
		default:
		}
		_, n := last()
		return n == 1
	})
	if a, _ := last(); a.Occupancy != 2 || a.Enter != 5 || a.Exit != 3 || len(a.Zones) != 2 || a.Zones[1] != (events.AreaZone{Source: "cam2", Rule: "ramp"}) {
		t.Fatalf("first: %+v", a)
	}
	put("cam2.ramp", 4, 4, 0)
	put("cam3.other", 9, 9, 9) // not in the area
	testkit.WaitFor(t, 5*time.Second, "the summed area state", func() bool { a, _ := last(); return a.Occupancy == 6 })
	if a, n := last(); a.Enter != 9 || a.Exit != 3 || n != 2 {
		t.Fatalf("sum: %+v (%d emits)", a, n)
	}
	put("cam2.ramp", 4, 4, 0) // no change: no emit
	put("cam1.deck", 1, 5, 4)
	testkit.WaitFor(t, 5*time.Second, "the exit", func() bool { a, _ := last(); return a.Exit == 4 })
	if a, n := last(); a.Occupancy != 5 || n != 3 {
		t.Fatalf("after exit: %+v (%d emits)", a, n)
	}
	e, err := kv.Get(ctx, AreaKey("boarding"))
	if err != nil {
		t.Fatal(err)
	}
	var stored events.AreaData
	if err := json.Unmarshal(e.Value(), &stored); err != nil || stored.Occupancy != 5 || stored.Enter != 9 || stored.Exit != 4 {
		t.Fatalf("stored %s: %+v %v", e.Value(), stored, err)
	}
	kcancel()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	// A new keeper that finds the same sums stored emits nothing at start.
	kctx2, kcancel2 := context.WithCancel(ctx)
	go func() {
		done <- KeepArea(kctx2, kv, "boarding", zones, func(a events.AreaData) { t.Errorf("unexpected emit %+v", a) })
	}()
	time.Sleep(300 * time.Millisecond)
	kcancel2()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	if err := KeepArea(ctx, kv, "bad name", zones, nil); err == nil || !strings.Contains(err.Error(), `area name "bad name"`) {
		t.Errorf("bad name: %v", err)
	}
	if err := KeepArea(ctx, kv, "x", []ZoneRef{{"cam.1", "deck"}}, nil); err == nil || !strings.Contains(err.Error(), `area x: zones[0].source "cam.1"`) {
		t.Errorf("bad zone: %v", err)
	}
}

func testNodeDown(t *testing.T, c *testkit.Cluster) {
	f, src := startThree(t, c, "nodedown", 6)
	// Take down the node leading the lease bucket's stream: the hardest
	// case (its clients reconnect elsewhere and the bucket elects a leader).
	stream := "KV_" + LeaseBucket("nodedown")
	node := -1
	for i := 0; i < c.N(); i++ {
		if s := c.Server(i); s != nil && s.JetStreamIsStreamLeader("$G", stream) {
			node = i
		}
	}
	if node < 0 {
		t.Fatal("no leader for", stream)
	}
	t0 := time.Now()
	c.Shutdown(node)
	t.Logf("node %d (leader of %s) down", node, stream)
	// Hold through several ttls with the node down.
	deadline := time.Now().Add(3 * testTTL)
	for time.Now().Before(deadline) {
		if hs := f.holders(0, 1, 2); len(hs) > 0 {
			for s, who := range hs {
				if len(who) > 1 {
					t.Fatalf("%s held by %v at once", s, who)
				}
			}
		}
		time.Sleep(20 * time.Millisecond)
	}
	if !f.allHeldOnce(src, 0, 1, 2) {
		t.Errorf("after the node went down: %v", f.holders(0, 1, 2))
	}
	for i, m := range f.members {
		st := m.Stats()
		t.Logf("member %d: %+v", i, st)
		if st.Lost != 0 || st.Started != 2 {
			t.Errorf("member %d lost a lease or started a new one: %+v", i, st)
		}
	}
	c.Restart(node)
	t.Logf("node back after %v", time.Since(t0))
	time.Sleep(testTTL)
	if !f.allHeldOnce(src, 0, 1, 2) {
		t.Errorf("after the node came back: %v", f.holders(0, 1, 2))
	}
	f.ledger.check(t)
}

// testSameName: a daemon restarted under the name of its dead self joins
// once the old member key went stale; a name a live member renews is
// refused.
func testSameName(t *testing.T, c *testkit.Cluster) {
	f := newFleet(t, c, "samename")
	f.join("x", opts(sourceNames(1), 1))
	f.join("live", opts(sourceNames(1), 1))
	f.cancels[0]() // x dies
	_, js := connect(t, c.URLs())
	ctx, cancel := context.WithTimeout(context.Background(), ctxWait)
	defer cancel()
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		o := opts(sourceNames(1), 1)
		o.Site, o.Member = "samename", "live"
		_, err := Join(ctx, js, o, &recorder{})
		if err == nil || !strings.Contains(err.Error(), `join site samename: member name "live" is in use`) {
			t.Errorf("joining as a live member: %v", err)
		}
	}()
	t0 := time.Now()
	o := opts(sourceNames(1), 1)
	o.Site, o.Member = "samename", "x"
	mctx, mcancel := context.WithCancel(context.Background())
	defer mcancel()
	m, err := Join(mctx, js, o, &recorder{})
	if err != nil {
		t.Fatalf("joining again as x: %v", err)
	}
	t.Logf("x joined again after %v", time.Since(t0))
	wg.Wait()
	mcancel()
	m.wg.Wait()
}

// testStuckWatcher: a member whose lease-bucket watcher stops delivering
// (seen after a daemon was frozen) would never see a lease go free; it
// notices that its own member-key renewals do not come back, starts a new
// watcher, and takes the sources another member releases.
func testStuckWatcher(t *testing.T, c *testkit.Cluster) {
	f := newFleet(t, c, "stuck")
	src := sourceNames(2)
	f.join("a", opts(src, 2))
	testkit.WaitFor(t, 3*testTTL, "a holds both sources", func() bool { return f.allHeldOnce(src, 0) })
	var mu sync.Mutex
	deaf := true // b's first watcher gets stuck after a second, the next ones do not
	ob := opts(src, 2)
	ob.deafWatch = func() time.Duration {
		mu.Lock()
		defer mu.Unlock()
		if deaf {
			deaf = false
			return time.Second
		}
		return 0
	}
	b := f.join("b", ob)
	time.Sleep(1500 * time.Millisecond) // b has seen a's leases; its watcher is deaf now
	ctx, cancel := context.WithTimeout(context.Background(), ctxWait)
	defer cancel()
	t0 := time.Now()
	if err := f.members[0].Leave(ctx); err != nil {
		t.Fatal(err)
	}
	testkit.WaitFor(t, 3*testTTL, "b takes the released sources with a new watcher", func() bool {
		return f.allHeldOnce(src, 1)
	})
	t.Logf("b took both %v after a left (its first watcher deaf)", time.Since(t0))
	if st := b.Stats(); st.Rewatch < 1 {
		t.Errorf("b: no watcher restart counted: %+v", st)
	}
	f.ledger.check(t)
}
