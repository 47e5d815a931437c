package main

import (
	"context"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
	"github.com/nats-io/nkeys"

	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/events/outbox"
	"tallyd/internal/pipeline"
	"tallyd/internal/testkit"
)

// Delivery under faults, against a real nats-server process (built from the
// module this repository requires) with JetStream on a file store: the broker
// stops, hangs and restarts, tallyd is killed — and every event produced
// ends up in the stream exactly once.

// deliverySite writes a site file for a generated scene publishing to url.
func deliverySite(t *testing.T, dir, url, scene string) string {
	t.Helper()
	y := fmt.Sprintf(`site: ferry-terminal
sources:
  - id: walkway
    scene: %s
    start_time: 2026-06-01T08:00:00Z
detector: {motion: {min_area: 200}}
rules:
  - {name: boarding-gate, source: walkway, line: [[0.15, 0.55], [0.85, 0.55]]}
  - {name: ticket-machines, source: walkway, zone: [[0.02, 0.08], [0.27, 0.08], [0.27, 0.45], [0.02, 0.45]], dwell: 10s}
output: {nats: {url: "%s"}}
log: {level: info}
`, scene, url)
	p := filepath.Join(dir, "site.yaml")
	if err := os.WriteFile(p, []byte(y), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// streamIDs reads every message of the site's stream and counts each event
// id (the Nats-Msg-Id the stream de-duplicated on).
func streamIDs(t *testing.T, url string) map[string]int {
	t.Helper()
	ids := map[string]int{}
	for _, ev := range streamEvents(t, url) {
		ids[ev.ID]++
	}
	return ids
}

// streamEvents reads every message of the site's stream, in order; each
// message's Nats-Msg-Id must be its event's id.
func streamEvents(t *testing.T, url string) []events.Event {
	t.Helper()
	nc, err := nats.Connect(url)
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	name, _ := bus.StreamName("tallyd", "ferry-terminal")
	st, err := js.Stream(ctx, name)
	if err != nil {
		t.Fatalf("stream %s: %v", name, err)
	}
	info, err := st.Info(ctx)
	if err != nil {
		t.Fatal(err)
	}
	var out []events.Event
	for seq := info.State.FirstSeq; seq <= info.State.LastSeq && info.State.Msgs > 0; seq++ {
		m, err := st.GetMsg(ctx, seq)
		if err != nil {
			t.Fatalf("message %d: %v", seq, err)
		}
		ev, err := events.Parse(m.Data)
		if err != nil {
			t.Fatalf("message %d: %v", seq, err)
		}
		if id := m.Header.Get(nats.MsgIdHdr); id != ev.ID {
			t.Errorf("message %d: Nats-Msg-Id %q, event id %q", seq, id, ev.ID)
		}
		out = append(out, ev)
	}
	return out
}

// streamMsgs is how many events the site's stream holds (-1: no stream yet).
func streamMsgs(url string) int64 {
	nc, err := nats.Connect(url)
	if err != nil {
		return -1
	}
	defer nc.Close()
	js, _ := jetstream.New(nc)
	name, _ := bus.StreamName("tallyd", "ferry-terminal")
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
	defer cancel()
	st, err := js.Stream(ctx, name)
	if err != nil {
		return -1
	}
	info, err := st.Info(ctx)
	if err != nil {
		return -1
	}
	return int64(info.State.Msgs)
}

// checkExactlyOnce: the stream holds n events, each id once.
func checkExactlyOnce(t *testing.T, ids map[string]int, n int64) {
	t.Helper()
	for id, c := range ids {
		if c != 1 {
			t.Errorf("event %s stored %d times", id, c)
		}
	}
	if int64(len(ids)) != n {
		t.Errorf("stream holds %d events, the summary %d", len(ids), n)
	}
}

// bucketTotals reads the live state tallyd keeps in the key-value bucket.
func bucketTotals(t *testing.T, url string) map[string]events.Totals {
	t.Helper()
	nc, err := nats.Connect(url)
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	js, _ := jetstream.New(nc)
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	kv, err := bus.OpenState(ctx, js, "tallyd-ferry-terminal", 1)
	if err != nil {
		t.Fatal(err)
	}
	all, err := kv.All(ctx)
	if err != nil {
		t.Fatal(err)
	}
	out := map[string]events.Totals{}
	for k, v := range all {
		var st events.RuleState
		if err := json.Unmarshal(v, &st); err != nil {
			t.Fatal(err)
		}
		out[strings.TrimPrefix(k, "walkway.")] = st.Totals
	}
	return out
}

// summaryOf reads a replay child's JSON summary.
func summaryOf(t *testing.T, c *child) pipeline.Summary {
	t.Helper()
	lines := strings.Split(strings.TrimSpace(c.out.String()), "\n")
	var s pipeline.Summary
	if err := json.Unmarshal([]byte(lines[len(lines)-1]), &s); err != nil {
		t.Fatalf("no summary: %v\nstdout:\n%s\nstderr:\n%s", err, c.out.String(), c.errOut.String())
	}
	return s
}

// wait waits for a child to exit by itself and returns its exit code.
func (c *child) wait(t *testing.T, d time.Duration) int {
	t.Helper()
	done := make(chan struct{})
	go func() { _ = c.cmd.Wait(); close(done) }()
	select {
	case <-done:
	case <-time.After(d):
		t.Fatalf("still running after %v\nstderr:\n%s", d, c.errOut.String())
	}
	return c.cmd.ProcessState.ExitCode()
}

// TestBrokerOutage: a replay on the source clock publishes to a broker that
// is stopped for 30 s in the middle and restarted. Counting never waits;
// afterwards the stream holds every event of the summary exactly once and
// the totals in the bucket equal the summary.
func TestBrokerOutage(t *testing.T) {
	if testing.Short() {
		t.Skip("30 s outage")
	}
	t.Parallel()
	srv := testkit.StartNATSServer(t, true)
	dir := t.TempDir()
	site := deliverySite(t, dir, srv.URL(), "{seed: 4, duration: 40s, width: 320, height: 180, crossings: 6, visitors: 2}")
	c := startChild(t, "replay", "-c", site, "--pace", "realtime", "--summary", "json", "--deliver-timeout", "60s")
	time.Sleep(4 * time.Second)
	if c.cmd.ProcessState != nil || strings.Contains(c.errOut.String(), "tallyd replay:") {
		t.Fatalf("replay ended early: %s", c.errOut.String())
	}
	srv.Stop()
	time.Sleep(30 * time.Second)
	srv.Start()
	code := c.wait(t, 90*time.Second)
	s := summaryOf(t, c)
	t.Logf("exit %d; frames %d/%d; events %+v", code, s.FramesProcessed, s.FramesRead, s.Events)
	if code != 0 || !s.Delivered() || s.FramesProcessed != s.FramesRead {
		t.Fatalf("exit %d, summary %+v\nstderr:\n%s", code, s, c.errOut.String())
	}
	checkExactlyOnce(t, streamIDs(t, srv.URL()), s.Events.Produced)
	testkit.WaitFor(t, 5*time.Second, "the bucket to hold the final totals", func() bool {
		got := bucketTotals(t, srv.URL())
		for rule, want := range s.Rules {
			if got[rule] != want {
				return false
			}
		}
		return true
	})
	// A consumer that was down the whole time gets every event.
	var out, errOut testkit.Buffer
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	if code := realMain(ctx, []string{"listen", "--url", srv.URL(), "--site", "ferry-terminal", "--durable", "late-reader", "--count", fmt.Sprint(s.Events.Produced)}, &out, &errOut); code != 0 {
		t.Fatalf("listen --durable: exit %d: %s", code, errOut.String())
	}
	if n := strings.Count(out.String(), "\n"); int64(n) != s.Events.Produced {
		t.Errorf("listen --durable printed %d events, want %d", n, s.Events.Produced)
	}
}

// TestBrokerHung: a broker frozen with SIGSTOP for 30 s during a replay at
// pace max: every frame is still processed and counted, and after SIGCONT
// every event reaches the stream exactly once.
func TestBrokerHung(t *testing.T) {
	if testing.Short() {
		t.Skip("30 s hang")
	}
	t.Parallel()
	srv := testkit.StartNATSServer(t, true)
	dir := t.TempDir()
	site := deliverySite(t, dir, srv.URL(), "{seed: 3, duration: 120s, width: 320, height: 180}")
	c := startChild(t, "replay", "-c", site, "--summary", "json", "--deliver-timeout", "60s")
	time.Sleep(1500 * time.Millisecond)
	srv.Pause()
	hungAt := time.Now()
	time.Sleep(30 * time.Second)
	srv.Resume()
	code := c.wait(t, 90*time.Second)
	s := summaryOf(t, c)
	t.Logf("exit %d after %v of hang; frames %d/%d; events %+v", code, time.Since(hungAt), s.FramesProcessed, s.FramesRead, s.Events)
	if code != 0 || s.FramesProcessed != s.FramesRead || s.FramesRead != 1200 || !s.Delivered() {
		t.Fatalf("exit %d, summary %+v\nstderr:\n%s", code, s, c.errOut.String())
	}
	checkExactlyOnce(t, streamIDs(t, srv.URL()), s.Events.Produced)
}

// TestKilledMidReplay: tallyd killed with SIGKILL in the middle of a replay,
// then the same replay again: what was counted before the kill is in the
// stream or in the outbox, and afterwards the stream holds each event once.
func TestKilledMidReplay(t *testing.T) {
	t.Parallel()
	srv := testkit.StartNATSServer(t, true)
	dir := t.TempDir()
	site := deliverySite(t, dir, srv.URL(), "{seed: 1, width: 320, height: 180}")
	c := startChild(t, "replay", "-c", site, "--summary", "json")
	testkit.WaitFor(t, 30*time.Second, "events in the stream", func() bool { return streamMsgs(srv.URL()) >= 10 })
	_ = c.cmd.Process.Signal(syscall.SIGKILL)
	_ = c.cmd.Wait()
	stored := streamIDs(t, srv.URL())
	ob, err := outbox.Open(filepath.Join(dir, ".tallyd", "outbox.db"), outbox.Options{})
	if err != nil {
		t.Fatal(err)
	}
	pending, _ := ob.Read(0, 100000)
	_ = ob.Close()
	t.Logf("killed: %d events in the stream, %d in the outbox", len(stored), len(pending))

	c = startChild(t, "replay", "-c", site, "--summary", "json")
	if code := c.wait(t, 60*time.Second); code != 0 {
		t.Fatalf("second replay: exit %d\n%s", code, c.errOut.String())
	}
	s := summaryOf(t, c)
	ids := streamIDs(t, srv.URL())
	checkExactlyOnce(t, ids, s.Events.Produced)
	for id := range stored {
		if ids[id] != 1 {
			t.Errorf("event %s stored before the kill is gone", id)
		}
	}
	for _, r := range pending {
		if ids[r.ID] != 1 {
			t.Errorf("event %s waiting in the outbox at the kill is not in the stream", r.ID)
		}
	}
}

// TestForgedEventsRefused: with a login on the embedded server, a client
// without it cannot publish on tallyd's subjects.
func TestForgedEventsRefused(t *testing.T) {
	dir := t.TempDir()
	y := `site: s
sources: [{id: walkway, scene: {seed: 1, width: 320, height: 180, duration: 30s, crossings: 2, visitors: 0}}]
output: {nats: {embedded: {port: 0, user: counter, password: "env:TALLYD_TEST_EMBEDDED_PW"}}}
`
	t.Setenv("TALLYD_TEST_EMBEDDED_PW", "s3cret-embedded")
	site := filepath.Join(dir, "site.yaml")
	if err := os.WriteFile(site, []byte(y), 0o644); err != nil {
		t.Fatal(err)
	}
	cfg, err := pipeline.Load(site)
	if err != nil {
		t.Fatal(err)
	}
	p, err := pipeline.Build(cfg, pipeline.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	if nc, err := nats.Connect(p.NATSURL()); err == nil {
		nc.Close()
		t.Fatal("connected without the login")
	} else if !strings.Contains(err.Error(), "Authorization Violation") && !strings.Contains(err.Error(), "authorization violation") {
		t.Errorf("without login: %v", err)
	}
	if nc, err := nats.Connect(p.NATSURL(), nats.UserInfo("counter", "wrong")); err == nil {
		nc.Close()
		t.Fatal("connected with a wrong password")
	}
}

// TestSecretsNeverShown: against servers requiring a user and password, a
// token and an NKey, tallyd's check, replay and run — with the right secret
// and a wrong one — never print the secret: not in logs, errors or check
// output.
func TestSecretsNeverShown(t *testing.T) {
	t.Parallel()
	kp, err := nkeys.CreateUser()
	if err != nil {
		t.Fatal(err)
	}
	seed, _ := kp.Seed()
	pub, _ := kp.PublicKey()
	dir := t.TempDir()
	seedFile := filepath.Join(dir, "user.nk")
	if err := os.WriteFile(seedFile, append(seed, '\n'), 0o600); err != nil {
		t.Fatal(err)
	}
	nkeyConf := filepath.Join(dir, "nkey.conf")
	if err := os.WriteFile(nkeyConf, []byte(fmt.Sprintf("authorization { users = [ {nkey: %s} ] }\n", pub)), 0o600); err != nil {
		t.Fatal(err)
	}
	const pw, tok = "pw-Very-Secret-4711", "tok-Very-Secret-0815"
	wrongSeed, _ := nkeys.CreateUser()
	ws, _ := wrongSeed.Seed()
	wrongSeedFile := filepath.Join(dir, "wrong.nk")
	if err := os.WriteFile(wrongSeedFile, ws, 0o600); err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		name      string
		server    []string
		auth, bad string
		secrets   []string
		env       map[string]string
	}{
		{"user and password", []string{"--user", "counter", "--pass", pw},
			`auth: {user: counter, password: "env:TALLYD_TEST_NATS_PW"}`, `auth: {user: counter, password: "wrong-` + pw + `"}`,
			[]string{pw}, map[string]string{"TALLYD_TEST_NATS_PW": pw}},
		{"token", []string{"--auth", tok},
			`auth: {token: "file:token"}`, `auth: {token: "wrong-` + tok + `"}`, []string{tok}, nil},
		{"nkey", []string{"-c", nkeyConf},
			`auth: {nkey_seed: user.nk}`, `auth: {nkey_seed: wrong.nk}`, []string{string(seed), string(ws)}, nil},
	}
	if err := os.WriteFile(filepath.Join(dir, "token"), []byte(tok+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			for k, v := range tc.env { // a name of this test's own: t.Setenv refuses parallel tests
				os.Setenv(k, v)
				defer os.Unsetenv(k)
			}
			srv := testkit.StartNATSServer(t, true, tc.server...)
			var seen strings.Builder
			for _, auth := range []string{tc.auth, tc.bad} {
				site := filepath.Join(dir, "site.yaml")
				y := fmt.Sprintf(`site: s
sources: [{id: walkway, scene: {seed: 1, width: 320, height: 180, duration: 30s, crossings: 2, visitors: 0}}]
rules: [{name: gate, source: walkway, line: [[0.15, 0.55], [0.85, 0.55]]}]
output:
  nats:
    url: %s
    %s
log: {level: debug}
`, srv.URL(), auth)
				if err := os.WriteFile(site, []byte(y), 0o600); err != nil {
					t.Fatal(err)
				}
				for _, args := range [][]string{{"check", "-c", site}, {"replay", "-c", site, "--deliver-timeout", "2s"}} {
					out, errOut, code := cli(t, args...)
					seen.WriteString(out + errOut)
					t.Logf("%s %v: exit %d", auth, args[0], code)
					if auth == tc.auth && code != 0 {
						t.Errorf("%s with the right secret: exit %d\n%s", args[0], code, errOut)
					}
					if auth == tc.bad && code == 0 {
						t.Errorf("%s with a wrong secret: exit 0", args[0])
					}
				}
				ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
				var out, errOut testkit.Buffer
				realMain(ctx, []string{"run", "-c", site}, &out, &errOut)
				cancel()
				seen.WriteString(out.String() + errOut.String())
			}
			for _, s := range tc.secrets {
				if strings.Contains(seen.String(), s) {
					t.Errorf("a secret was printed:\n%s", seen.String())
				}
			}
			if !strings.Contains(seen.String(), "authorization violation") && !strings.Contains(seen.String(), "Authorization Violation") {
				t.Errorf("the wrong secret's error does not say so:\n%s", seen.String())
			}
		})
	}
}

// TestDurableListenerLosesNothing: a `listen --durable` reader frozen with
// SIGSTOP for 20 s while events flow, and a broker restarted four times,
// still prints every event the replay produced, each once.
func TestDurableListenerLosesNothing(t *testing.T) {
	if testing.Short() {
		t.Skip("20 s pause")
	}
	t.Parallel()
	srv := testkit.StartNATSServer(t, true)
	dir := t.TempDir()
	site := deliverySite(t, dir, srv.URL(), "{seed: 4, duration: 40s, width: 320, height: 180, crossings: 6, visitors: 2}")
	// The stream must exist before the reader attaches: a first, empty
	// check creates nothing, so let the replay run a moment first.
	rep := startChild(t, "replay", "-c", site, "--pace", "realtime", "--summary", "json", "--deliver-timeout", "60s")
	testkit.WaitFor(t, 20*time.Second, "the stream", func() bool { return streamMsgs(srv.URL()) > 0 })
	lis := startChild(t, "listen", "--url", srv.URL(), "--site", "ferry-terminal", "--durable", "desk")
	time.Sleep(2 * time.Second)
	_ = lis.cmd.Process.Signal(syscall.SIGSTOP)
	for range 4 {
		time.Sleep(3 * time.Second)
		srv.Stop()
		time.Sleep(500 * time.Millisecond)
		srv.Start()
	}
	time.Sleep(6 * time.Second) // 20 s frozen in all
	_ = lis.cmd.Process.Signal(syscall.SIGCONT)
	if code := rep.wait(t, 90*time.Second); code != 0 {
		t.Fatalf("replay exit %d\n%s", code, rep.errOut.String())
	}
	s := summaryOf(t, rep)
	testkit.WaitFor(t, 30*time.Second, fmt.Sprintf("the reader to print all %d events", s.Events.Produced), func() bool {
		return int64(strings.Count(lis.out.String(), "\n")) >= s.Events.Produced
	})
	code, _ := lis.stop(t, syscall.SIGTERM)
	seen := map[string]int{}
	for _, l := range strings.Split(strings.TrimSpace(lis.out.String()), "\n") {
		ev, err := events.Parse([]byte(l))
		if err != nil {
			t.Fatal(err)
		}
		seen[ev.ID]++
	}
	t.Logf("replay produced %d; reader printed %d lines, %d ids; exit %d", s.Events.Produced, strings.Count(lis.out.String(), "\n"), len(seen), code)
	checkExactlyOnce(t, seen, s.Events.Produced)
}

// TestJetStreamRequired: a server without JetStream when the site file
// requires it is bad input, located, for check and for replay.
func TestJetStreamRequired(t *testing.T) {
	srv := testkit.StartNATSServer(t, false)
	dir := t.TempDir()
	site := filepath.Join(dir, "site.yaml")
	y := fmt.Sprintf("site: s\nsources: [{id: walkway, scene: {seed: 1, width: 320, height: 180, duration: 30s, crossings: 2, visitors: 0}}]\n"+
		"output:\n  nats:\n    url: %s\n    jetstream: {mode: required}\n", srv.URL())
	if err := os.WriteFile(site, []byte(y), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, cmd := range []string{"check", "replay"} {
		_, errOut, code := cli(t, cmd, "-c", site)
		if code != exitBadInput || !strings.Contains(errOut, "site.yaml:6: output.nats.jetstream.mode: required, but the server at nats://127.0.0.1:") ||
			!strings.Contains(errOut, "has no JetStream") {
			t.Errorf("%s: exit %d, stderr %q", cmd, code, errOut)
		}
	}
}
