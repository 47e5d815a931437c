package main

import (
	"context"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/events/outbox"
	"tallyd/internal/testkit"
)

const listenSite = "ferry-terminal"

// listenRun is `tallyd listen` running in-process.
type listenRun struct {
	out, errOut testkit.Buffer
	code        chan int
	cancel      context.CancelFunc
}

// startListen runs realMain with args until it exits by itself or cancel;
// stdout goes to out unless another writer is given.
func startListen(t *testing.T, stdout interface{ Write([]byte) (int, error) }, args ...string) *listenRun {
	t.Helper()
	l := &listenRun{code: make(chan int, 1)}
	ctx, cancel := context.WithCancel(context.Background())
	l.cancel = cancel
	t.Cleanup(cancel)
	if stdout == nil {
		stdout = &l.out
	}
	go func() { l.code <- realMain(ctx, append([]string{"listen"}, args...), stdout, &l.errOut) }()
	return l
}

// wait is the exit code (the test fails after 30 s).
func (l *listenRun) wait(t *testing.T) int {
	t.Helper()
	select {
	case c := <-l.code:
		return c
	case <-time.After(30 * time.Second):
		t.Fatalf("listen did not exit; stderr:\n%s", l.errOut.String())
		return -1
	}
}

// ids are the event ids printed, one JSON line each.
func (l *listenRun) ids(t *testing.T) []string {
	t.Helper()
	var ids []string
	for _, line := range strings.Split(strings.TrimSpace(l.out.String()), "\n") {
		if line == "" {
			continue
		}
		ev, err := events.Parse([]byte(line))
		if err != nil {
			t.Fatalf("printed %q: %v", line, err)
		}
		ids = append(ids, ev.ID)
	}
	return ids
}

func idRange(from, to int) string {
	var ids []string
	for i := from; i <= to; i++ {
		ids = append(ids, fmt.Sprintf("ev-%06d", i))
	}
	return strings.Join(ids, " ")
}

// listenEvent is event i of the test site: a crossing of "gate" (odd i) or
// "exit" (even i) on source walkway.
func listenEvent(i int) events.Event {
	rule := "gate"
	if i%2 == 0 {
		rule = "exit"
	}
	return events.Event{SpecVersion: events.SpecVersion, ID: fmt.Sprintf("ev-%06d", i),
		Source: events.EventSource(listenSite, "walkway"), Type: events.TypeLineIn, Subject: rule,
		Time: time.Date(2026, 6, 1, 8, 0, 0, 0, time.UTC).Add(time.Duration(i) * time.Second), DataContentType: events.ContentType,
		Data: events.Data{Site: listenSite, Source: "walkway", Rule: rule, Kind: "in", TrackID: int64(i), Class: "person"}}
}

func listenRecords(t *testing.T, from, to int) []outbox.Record {
	var recs []outbox.Record
	for i := from; i <= to; i++ {
		ev := listenEvent(i)
		b, err := json.Marshal(ev)
		if err != nil {
			t.Fatal(err)
		}
		recs = append(recs, outbox.Record{ID: ev.ID, Subject: ev.NATSSubject(bus.DefaultPrefix), Data: b})
	}
	return recs
}

// startListenJS starts an embedded JetStream server with the site's stream.
func startListenJS(t *testing.T) (*bus.Embedded, jetstream.JetStream) {
	t.Helper()
	srv, err := bus.StartEmbedded(bus.EmbeddedOptions{StoreDir: t.TempDir()}, nil)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(srv.Shutdown)
	nc, err := bus.Connect(srv.URL(), "test", nil)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(nc.Close)
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := bus.EnsureStream(context.Background(), js, bus.StreamSettings{Site: listenSite}); err != nil {
		t.Fatal(err)
	}
	return srv, js
}

// deliver puts events from..to through an outbox and a Deliverer, as the
// daemon does, and returns once the outbox is empty.
func deliver(t *testing.T, js jetstream.JetStream, from, to int) {
	t.Helper()
	ob, err := outbox.Open(filepath.Join(t.TempDir(), "outbox.db"), outbox.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer ob.Close()
	if _, err := ob.Append(listenRecords(t, from, to)); err != nil {
		t.Fatal(err)
	}
	d := bus.NewDeliverer(js, ob, nil, bus.DelivererOptions{}, nil)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- d.Run(ctx) }()
	dctx, dcancel := context.WithTimeout(ctx, 20*time.Second)
	err = d.Drain(dctx)
	dcancel()
	cancel()
	if rerr := <-done; err != nil || rerr != nil {
		t.Fatalf("deliver: drain %v, run %v", err, rerr)
	}
}

// TestListenDurableGetsWhatWasMissed: a durable listener that was down while
// the daemon delivered events gets every one of them when it comes back,
// and the next run only what came after.
func TestListenDurableGetsWhatWasMissed(t *testing.T) {
	srv, js := startListenJS(t)
	ctx := context.Background()
	args := []string{"--url", srv.URL(), "--site", listenSite, "--durable", "board"}

	first := startListen(t, nil, args...)
	testkit.WaitFor(t, 10*time.Second, "the durable consumer", func() bool {
		_, err := js.Consumer(ctx, "TALLYD_FERRY-TERMINAL", "board")
		return err == nil
	})
	first.cancel() // an interrupt: a normal end
	if code := first.wait(t); code != 0 || first.out.String() != "" {
		t.Fatalf("first run: exit %d, printed %q, stderr %q", code, first.out.String(), first.errOut.String())
	}

	deliver(t, js, 1, 50) // while nobody listens
	second := startListen(t, nil, append(args, "--count", "50")...)
	if code := second.wait(t); code != 0 {
		t.Fatalf("second run: exit %d: %s", code, second.errOut.String())
	}
	if got := strings.Join(second.ids(t), " "); got != idRange(1, 50) {
		t.Errorf("second run printed %s", got)
	}
	if want := "tallyd listen: durable consumer board exists: resuming after the last event it acknowledged (50 waiting)\n"; second.errOut.String() != want {
		t.Errorf("stderr %q, want %q", second.errOut.String(), want)
	}

	deliver(t, js, 51, 60)
	third := startListen(t, nil, append(args, "--count", "10")...)
	if code := third.wait(t); code != 0 {
		t.Fatalf("third run: exit %d: %s", code, third.errOut.String())
	}
	if got := strings.Join(third.ids(t), " "); got != idRange(51, 60) {
		t.Errorf("third run printed %s", got)
	}
}

// TestListenReplays: --all replays the stream and then follows live events;
// --since starts at a time; filters apply.
func TestListenReplays(t *testing.T) {
	srv, js := startListenJS(t)
	ctx := context.Background()
	deliver(t, js, 1, 20)
	st, err := js.Stream(ctx, "TALLYD_FERRY-TERMINAL")
	if err != nil {
		t.Fatal(err)
	}
	m11, err := st.GetMsg(ctx, 11)
	if err != nil {
		t.Fatal(err)
	}
	base := []string{"--url", srv.URL(), "--site", listenSite}
	all := startListen(t, nil, append(base, "--all", "--count", "25")...)
	since := startListen(t, nil, append(base, "--since", m11.Time.Format(time.RFC3339Nano), "--count", "15")...)
	gates := startListen(t, nil, append(base, "--all", "--rule", "gate", "--count", "13")...)
	testkit.WaitFor(t, 10*time.Second, "the history", func() bool { return len(all.ids(t)) == 20 })
	deliver(t, js, 21, 25) // live
	for _, c := range []struct {
		name string
		l    *listenRun
		want string
	}{
		{"--all", all, idRange(1, 25)},
		{"--since", since, idRange(11, 25)},
		{"--all --rule gate", gates, "ev-000001 ev-000003 ev-000005 ev-000007 ev-000009 ev-000011 ev-000013 ev-000015 ev-000017 ev-000019 ev-000021 ev-000023 ev-000025"},
	} {
		if code := c.l.wait(t); code != 0 {
			t.Errorf("%s: exit %d: %s", c.name, code, c.l.errOut.String())
		}
		if got := strings.Join(c.l.ids(t), " "); got != c.want {
			t.Errorf("%s printed %s\nwant %s", c.name, got, c.want)
		}
	}
}

// TestListenFlagErrors: wrong combinations stop before connecting, with exit
// code 2 and one clear line.
func TestListenFlagErrors(t *testing.T) {
	t.Setenv(envPassword, "")
	t.Setenv(envToken, "")
	missing := filepath.Join(t.TempDir(), "missing")
	tests := []struct {
		args []string
		want string
	}{
		{[]string{"--durable", "board"}, "usage: --durable, --all and --since read one site's stream: give --site"},
		{[]string{"--all"}, "usage: --durable, --all and --since read one site's stream: give --site"},
		{[]string{"--site", "s", "--all", "--since", "2026-06-01T08:00:00Z"}, "usage: --all replays everything, --since from a time: give one"},
		{[]string{"--site", "s", "--since", "yesterday"}, `usage: --since "yesterday": not an RFC 3339 time such as 2026-06-01T08:00:00Z`},
		{[]string{"--site", "s", "--durable", "a.b"}, `usage: --durable: invalid subject token "a.b": '.' at byte 1 is not a letter, digit, '-' or '_'`},
		{[]string{"--prefix", "a..b"}, `usage: --prefix: prefix "a..b": invalid subject token "": empty`},
		{[]string{"--count", "-1"}, "usage: --count and --timeout cannot be negative (found -1, 0s)"},
		{[]string{"--creds", "c", "--user", "u"}, "usage: choose one way to sign in (given: --creds, --user)"},
		{[]string{"--password-file", "f"}, "usage: --password-file needs --user"},
		{[]string{"--user", "u"}, "usage: --user needs a password: set $TALLYD_NATS_PASSWORD or give --password-file"},
		{[]string{"--url", "nats://u:p@127.0.0.1:1", "--token-file", "f"}, "usage: --url holds credentials and --token-file is given too: choose one"},
		{[]string{"--tls-cert", "c"}, "usage: --tls-cert and --tls-key go together"},
		{[]string{"--user", "u", "--password-file", missing}, "--password-file " + missing + ": no such file or directory"},
		{[]string{"--nkey-seed", missing}, "connect to nats://127.0.0.1:4222: nats connect: unusable nats credentials: nkey seed file " + missing + ": no such file or directory"},
		{[]string{"--bogus"}, "usage: flag provided but not defined: -bogus (see tallyd listen --help)"},
	}
	for _, tc := range tests {
		t.Run(strings.Join(tc.args, " "), func(t *testing.T) {
			out, errOut, code := cli(t, append([]string{"listen"}, tc.args...)...)
			if want := "tallyd listen: " + tc.want + "\n"; code != exitBadInput || errOut != want || out != "" {
				t.Errorf("exit %d, stderr\n%q\nwant exit 2 and\n%q", code, errOut, want)
			}
		})
	}
}

// TestListenCredentials: the password comes from the environment or a file;
// a wrong one is a clear failure that never shows it; one in the URL works
// with a warning.
func TestListenCredentials(t *testing.T) {
	const pw = "pw-S3cret-4711"
	srv, err := bus.StartEmbedded(bus.EmbeddedOptions{User: "counter", Password: pw}, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer srv.Shutdown()
	dir := t.TempDir()
	pwFile, wrongFile := filepath.Join(dir, "pw"), filepath.Join(dir, "wrong")
	if err := os.WriteFile(pwFile, []byte(pw+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(wrongFile, []byte("pw-Wr0ng\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	host := strings.TrimPrefix(srv.URL(), "nats://")
	tests := []struct {
		name   string
		env    string
		args   []string
		code   int
		stderr string
	}{
		{"password from the environment", pw, []string{"--user", "counter"}, 0, ""},
		{"password file", "", []string{"--user", "counter", "--password-file", pwFile}, 0, ""},
		{"wrong password", "", []string{"--user", "counter", "--password-file", wrongFile}, 1,
			"tallyd listen: connect to " + srv.URL() + ": nats connect with user counter: nats: authorization violation\n"},
		{"password in the URL", "", []string{"--url", "nats://counter:" + pw + "@" + host}, 0,
			"tallyd listen: warning: the credentials in --url are visible in the process list; use --user with $TALLYD_NATS_PASSWORD or --password-file, or $TALLYD_NATS_TOKEN or --token-file\n"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			t.Setenv(envPassword, tc.env)
			args := append([]string{"listen", "--url", srv.URL(), "--timeout", "300ms"}, tc.args...)
			_, errOut, code := cli(t, args...)
			if code != tc.code || errOut != tc.stderr {
				t.Errorf("exit %d, stderr %q; want %d, %q", code, errOut, tc.code, tc.stderr)
			}
			if strings.Contains(errOut, pw) {
				t.Errorf("stderr shows the password: %s", errOut)
			}
		})
	}
}

// blockedWriter holds every Write until released: a terminal that stopped
// reading.
type blockedWriter struct {
	release chan struct{}
	buf     testkit.Buffer
}

func (w *blockedWriter) Write(p []byte) (int, error) {
	<-w.release
	return w.buf.Write(p)
}

// TestListenReportsDrops: in plain mode a listener that falls behind loses
// events in the NATS client; it says so on stderr with counts, once per
// period, and exits 1.
func TestListenReportsDrops(t *testing.T) {
	srv, err := bus.StartEmbedded(bus.EmbeddedOptions{}, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer srv.Shutdown()
	nc, err := bus.Connect(srv.URL(), "pub", nil)
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	w := &blockedWriter{release: make(chan struct{})}
	base := srv.Subscriptions() // the server's own
	l := startListen(t, w, "--url", srv.URL())
	testkit.WaitFor(t, 10*time.Second, "listen to subscribe", func() bool { return srv.Subscriptions() > base })
	recs := listenRecords(t, 1, 1)
	if err := nc.Publish(recs[0].Subject, recs[0].Data); err != nil { // printing it blocks
		t.Fatal(err)
	}
	// The client holds up to 512 Ki messages for a subscriber
	// (nats.DefaultSubPendingMsgsLimit); a burst of tiny ones overflows it
	// while the server's own 64 MiB per client is never near.
	for range 530_000 {
		if err := nc.Publish("tallyd.x.y.z.in", []byte("x")); err != nil {
			t.Fatal(err)
		}
	}
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
	testkit.WaitFor(t, 20*time.Second, "the drop report", func() bool {
		return strings.Contains(l.errOut.String(), "events dropped: this listener fell behind")
	})
	l.cancel() // what is still queued is not printed
	close(w.release)
	code := l.wait(t)
	errOut := l.errOut.String()
	if code != exitFailed || !strings.Contains(errOut, "events dropped because this listener fell behind; --durable with --site loses none\n") ||
		!strings.Contains(errOut, "count=") {
		t.Errorf("exit %d, stderr:\n%s", code, errOut)
	}
	for _, line := range strings.Split(errOut, "\n") {
		if strings.Contains(line, "dropped") {
			t.Log(line)
		}
	}
	if n := strings.Count(errOut, "level=WARN"); n > 3 {
		t.Errorf("%d drop lines in about a second; want one per second at most:\n%s", n, errOut)
	}
}
