package pipeline

import (
	"context"
	"fmt"
	"net"
	"os"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"

	"tallyd/capture"
	"tallyd/detect"
	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/internal/config"
	"tallyd/internal/testkit"
)

func siteFile(t testing.TB, body string) *config.Config {
	t.Helper()
	p := filepath.Join(t.TempDir(), "site.yaml")
	if err := os.WriteFile(p, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	cfg, err := Load(p)
	if err != nil {
		t.Fatal(err)
	}
	return cfg
}

const sceneRules = `
detector:
  motion: {min_area: 200}
rules:
  - name: gate
    source: walkway
    line: [[0.15, 0.55], [0.85, 0.55]]
  - name: machines
    source: walkway
    zone: [[0.02, 0.08], [0.27, 0.08], [0.27, 0.45], [0.02, 0.45]]
    dwell: 10s
log: {level: warn}
`

// collector subscribes to every tallyd event and keeps them.
type collector struct {
	mu  sync.Mutex
	evs []events.Event
	bad []error
}

func (c *collector) n() int { c.mu.Lock(); defer c.mu.Unlock(); return len(c.evs) }

func subscribe(t *testing.T, url string) *collector {
	t.Helper()
	nc, err := nats.Connect(url)
	if err != nil {
		t.Fatal(err)
	}
	c := &collector{}
	ready := make(chan struct{})
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() {
		defer close(done)
		_ = bus.Subscribe(ctx, nc, bus.Filter{Prefix: "tallyd"}, func(_ string, ev events.Event, _ []byte) {
			c.mu.Lock()
			c.evs = append(c.evs, ev)
			c.mu.Unlock()
		}, bus.OnReady(func() { close(ready) }), bus.OnMalformed(func(me *bus.MalformedError) {
			c.mu.Lock()
			c.bad = append(c.bad, me)
			c.mu.Unlock()
		}))
	}()
	<-ready
	t.Cleanup(func() { cancel(); <-done; nc.Close() })
	return c
}

// checkDelivery runs a 60 s generated scene and checks that the subscriber
// gets exactly the events the summary counts, each a valid CloudEvent
// (CloudEvents 1.0 core attributes: specversion, id, source, type; events.Parse
// enforces them) with a unique id, on the subject its data names.
func checkDelivery(t *testing.T, outputs string, external string) {
	cfg := siteFile(t, "site: ferry-terminal\nsources:\n  - id: walkway\n    scene: {seed: 5, duration: 60s, crossings: 10, visitors: 3}\n"+sceneRules+outputs)
	p, err := Build(cfg, Options{Pace: capture.PaceMax})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	if external != "" && p.NATSURL() != external {
		t.Fatalf("published to %s, want the external server %s", p.NATSURL(), external)
	}
	c := subscribe(t, p.NATSURL())
	if err := p.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	s := p.Summary()
	if s.Events.Produced < 10 || !s.Delivered() || s.Events.Acked != s.Events.Produced {
		t.Fatalf("events %+v: want at least 10, every one delivered", s.Events)
	}
	testkit.WaitFor(t, 5*time.Second, "all events", func() bool { return int64(c.n()) >= s.Events.Produced })
	time.Sleep(100 * time.Millisecond) // nothing more may arrive
	c.mu.Lock()
	defer c.mu.Unlock()
	if int64(len(c.evs)) != s.Events.Produced || len(c.bad) > 0 {
		t.Fatalf("received %d events (%d malformed), summary says %d", len(c.evs), len(c.bad), s.Events.Produced)
	}
	ids := map[string]bool{}
	perRule := map[string]int{}
	for _, ev := range c.evs {
		if ev.SpecVersion != "1.0" || ev.Source != "/tallyd/ferry-terminal/walkway" || ev.Time.IsZero() || ids[ev.ID] {
			t.Errorf("bad or duplicate event: %+v", ev)
		}
		ids[ev.ID] = true
		perRule[ev.Data.Rule+"."+string(ev.Data.Kind)]++
	}
	g, z := s.Rules["gate"], s.Rules["machines"]
	if perRule["gate.in"] != g.In || perRule["gate.out"] != g.Out || perRule["machines.enter"] != z.Enter ||
		perRule["machines.exit"] != z.Exit || perRule["machines.dwell"] != z.Dwell {
		t.Errorf("events per rule %v do not match the summary %+v", perRule, s.Rules)
	}
}

func TestEventsReachEmbeddedServer(t *testing.T) {
	checkDelivery(t, "output:\n  nats:\n    embedded: {port: 0}\n", "")
}

func TestEventsReachExternalServer(t *testing.T) {
	srv, err := bus.StartEmbedded(bus.EmbeddedOptions{}, nil) // no JetStream: plain subjects
	if err != nil {
		t.Fatal(err)
	}
	defer srv.Shutdown()
	checkDelivery(t, fmt.Sprintf("output:\n  nats:\n    url: %s\n", srv.URL()), srv.URL())
}

// slowDetector stands for a detector slower than the source.
type slowDetector struct{ cost time.Duration }

func (d slowDetector) Detect(_ context.Context, b []*capture.Frame) ([][]detect.Detection, error) {
	time.Sleep(d.cost)
	return make([][]detect.Detection, len(b)), nil
}
func (slowDetector) Close() error { return nil }

// TestDropsWhenBehind: a 50 fps source in front of a detector that manages
// 25 fps, replayed on the source clock: frames are dropped and counted, the
// source keeps its pace, and read = processed + dropped.
func TestDropsWhenBehind(t *testing.T) {
	cfg := siteFile(t, "site: s\nsources:\n  - id: walkway\n    scene: {seed: 1, fps: 50, width: 320, height: 180}\n"+
		"output:\n  nats:\n    embedded: {port: 0}\n")
	p, err := Build(cfg, Options{Pace: capture.PaceRealtime, Detector: slowDetector{40 * time.Millisecond}})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 3*time.Second)
	defer cancel()
	start := time.Now()
	if err := p.Run(ctx); err != nil {
		t.Fatal(err)
	}
	elapsed := time.Since(start).Seconds()
	s := p.Summary()
	t.Logf("%.2f s: read %d, processed %d, dropped %d", elapsed, s.FramesRead, s.FramesProcessed, s.FramesDropped)
	if s.FramesDropped == 0 {
		t.Error("no frame dropped although the detector is slower than the source")
	}
	if s.FramesRead != s.FramesProcessed+s.FramesDropped {
		t.Errorf("read %d != processed %d + dropped %d", s.FramesRead, s.FramesProcessed, s.FramesDropped)
	}
	// The pace holds: about 50 frames read per second of source clock (3 s).
	if s.FramesRead < 120 || s.FramesRead > 160 {
		t.Errorf("read %d frames in 3 s at 50 fps; the source did not keep its pace", s.FramesRead)
	}
}

// TestTargetRate: a 20 fps source with a 10 fps target hands on every other
// frame, counting the rest as dropped, even at pace max.
func TestTargetRate(t *testing.T) {
	cfg := siteFile(t, "site: s\nsources:\n  - id: walkway\n    fps: 10\n    scene: {seed: 1, fps: 20, width: 320, height: 180, duration: 30s, crossings: 3, visitors: 1}\n"+
		"output:\n  nats:\n    embedded: {port: 0}\n")
	p, err := Build(cfg, Options{Pace: capture.PaceMax, Detector: slowDetector{}})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	if err := p.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	s := p.Summary()
	if s.FramesRead != 600 || s.FramesProcessed != 300 || s.FramesDropped != 300 {
		t.Errorf("read %d processed %d dropped %d, want 600/300/300", s.FramesRead, s.FramesProcessed, s.FramesDropped)
	}
}

// TestStopDrains: cancelling a realtime run stops capture, and what was
// captured is still processed; Close is safe twice.
func TestStopDrains(t *testing.T) {
	cfg := siteFile(t, "site: s\nsources:\n  - id: walkway\n    scene: {seed: 1}\n"+sceneRules+"output:\n  nats:\n    embedded: {port: 0}\n")
	p, err := Build(cfg, Options{Pace: capture.PaceRealtime})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 700*time.Millisecond)
	defer cancel()
	if err := p.Run(ctx); err != nil {
		t.Fatal(err)
	}
	s := p.Summary()
	if s.FramesRead == 0 || s.FramesRead != s.FramesProcessed+s.FramesDropped {
		t.Errorf("read %d processed %d dropped %d", s.FramesRead, s.FramesProcessed, s.FramesDropped)
	}
	for _, st := range p.Status() {
		if st.State != capture.StateStopped {
			t.Errorf("source %s state %q, want stopped", st.ID, st.State)
		}
	}
	if err := p.Close(); err != nil {
		t.Fatal(err)
	}
	if err := p.Close(); err != nil {
		t.Fatal(err)
	}
}

// TestBrokerDownAtStart: an external NATS server that is down when the
// daemon starts does not stop it (the reference says it reconnects
// forever): Build succeeds, counting runs, and the events reach the server
// once it comes up.
func TestBrokerDownAtStart(t *testing.T) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	port := l.Addr().(*net.TCPAddr).Port
	l.Close() // nothing listens there now
	cfg := siteFile(t, "site: ferry-terminal\nsources:\n  - id: walkway\n    scene: {seed: 5, duration: 60s, crossings: 10, visitors: 3}\n"+
		sceneRules+fmt.Sprintf("output:\n  nats:\n    url: nats://127.0.0.1:%d\n", port))
	p, err := Build(cfg, Options{Pace: capture.PaceMax})
	if err != nil {
		t.Fatalf("Build with the broker down: %v", err)
	}
	defer p.Close()
	srv, err := bus.StartEmbedded(bus.EmbeddedOptions{Port: port, StoreDir: t.TempDir()}, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer srv.Shutdown()
	c := subscribe(t, srv.URL())
	if err := p.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	s := p.Summary()
	testkit.WaitFor(t, 10*time.Second, "every event at the late server", func() bool { return int64(c.n()) >= s.Events.Produced })
	if s.Events.Produced == 0 || !s.Delivered() {
		t.Errorf("events %+v: want every one delivered", s.Events)
	}
}
