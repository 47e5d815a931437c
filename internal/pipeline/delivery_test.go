package pipeline

import (
	"bufio"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/capture/testsrv"
	"tallyd/events"
)

// TestOutboxFull: with the broker down and a 1 MiB outbox, a burst of
// events overfills it: the oldest are dropped and counted exactly, the
// newest wait in the outbox, and capture keeps its pace.
func TestOutboxFull(t *testing.T) {
	cfg := siteFile(t, "site: s\nsources:\n  - id: walkway\n    scene: {seed: 1, fps: 25, width: 320, height: 180, duration: 30s, crossings: 2, visitors: 0}\n"+
		"output:\n  nats:\n    url: nats://"+testsrv.ClosedAddr(t)+"\n  outbox: {max_bytes: 1048576}\nlog: {level: error}\n")
	p, err := Build(cfg, Options{Pace: capture.PaceRealtime, DeliverTimeout: 100 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 4*time.Second)
	defer cancel()
	const burst = 6000
	done := make(chan []string)
	go func() {
		// 6,000 events of about 600 bytes at 10,000 a second while the
		// camera runs: 3.4 MB for a 1 MiB outbox.
		time.Sleep(500 * time.Millisecond)
		var ids []string
		pad := strings.Repeat("p", 300)
		for i := range burst {
			ev := events.Event{SpecVersion: events.SpecVersion, ID: fmt.Sprintf("burst-%05d", i), Source: "/tallyd/s/walkway",
				Type: events.TypeLineIn, Subject: "gate", Time: time.Now().UTC(), DataContentType: events.ContentType,
				Data: events.Data{Site: "s", Source: "walkway", Rule: "gate", Kind: events.KindIn, TrackID: int64(i), Class: pad}}
			p.out.offer(ev)
			ids = append(ids, ev.ID)
			if i%100 == 99 {
				time.Sleep(10 * time.Millisecond)
			}
		}
		done <- ids
	}()
	if err := p.Run(ctx); err != nil {
		t.Fatal(err)
	}
	ids := <-done
	s := p.Summary()
	st := p.out.ob.Stats()
	t.Logf("frames read %d in 4 s; events %+v; outbox %d pending (%d bytes), %d dropped", s.FramesRead, s.Events, st.Pending, st.PendingBytes, st.Dropped)
	if s.FramesRead < 90 || s.FramesRead > 110 {
		t.Errorf("read %d frames in 4 s at 25 fps: capture did not keep its pace", s.FramesRead)
	}
	e := s.Events
	if e.Produced != burst || e.Pending+e.Dropped != e.Produced || e.Acked != 0 || st.Dropped != e.Dropped || e.Dropped == 0 {
		t.Fatalf("events %+v, outbox %+v: want every event either pending or dropped, dropped by the outbox", e, st)
	}
	if st.PendingBytes > 1<<20 {
		t.Errorf("outbox holds %d bytes, over its 1 MiB", st.PendingBytes)
	}
	// What is left is the newest: the oldest were dropped.
	recs, err := p.out.ob.Read(0, burst)
	if err != nil {
		t.Fatal(err)
	}
	want := ids[len(ids)-len(recs):]
	for i, r := range recs {
		if r.ID != want[i] {
			t.Fatalf("outbox record %d is %s, want %s: not the newest kept", i, r.ID, want[i])
		}
	}
}

// TestIntervalTotalsOnScene: with 1-minute interval totals on a generated
// 150 s walkway, each totals event holds exactly the single events of its
// interval, the intervals add up to the run's totals, and those equal the
// scene's truth.
func TestIntervalTotalsOnScene(t *testing.T) {
	dir := t.TempDir()
	cfg := siteFile(t, "site: ferry-terminal\nsources:\n  - id: walkway\n    start_time: 2026-06-01T08:00:30Z\n    scene: {seed: 5}\n"+
		sceneRules+"output:\n  nats:\n    embedded: {port: 0}\n  jsonl: "+filepath.Join(dir, "events.jsonl")+"\nintervals: {every: 1m, time_zone: Europe/Oslo}\n")
	p, err := Build(cfg, Options{Pace: capture.PaceMax})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	if err := p.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	s := p.Summary()
	f, err := os.Open(filepath.Join(dir, "events.jsonl"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	single := map[string]map[time.Time]events.Totals{} // rule -> interval start -> counts
	sums := map[string]events.Totals{}
	intervals := 0
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		ev, err := events.Parse(sc.Bytes())
		if err != nil {
			t.Fatal(err)
		}
		rule := ev.Data.Rule
		if ev.Data.Kind == events.KindTotals {
			iv := ev.Data.Interval
			intervals++
			got := single[rule][iv.Start]
			got.Kind, got.MaxOccupancy = iv.Counts.Kind, iv.Counts.MaxOccupancy
			if got != iv.Counts {
				t.Errorf("%s interval %s: totals say %+v, its single events %+v", rule, iv.Start.Format("15:04"), iv.Counts, got)
			}
			sum := sums[rule]
			sum.Kind = iv.Counts.Kind
			sum.In, sum.Out, sum.Enter, sum.Exit, sum.Dwell = sum.In+iv.Counts.In, sum.Out+iv.Counts.Out, sum.Enter+iv.Counts.Enter, sum.Exit+iv.Counts.Exit, sum.Dwell+iv.Counts.Dwell
			sum.MaxOccupancy = max(sum.MaxOccupancy, iv.Counts.MaxOccupancy)
			sums[rule] = sum
			continue
		}
		start := ev.Time.Truncate(time.Minute)
		if single[rule] == nil {
			single[rule] = map[time.Time]events.Totals{}
		}
		c := single[rule][start]
		switch ev.Data.Kind {
		case events.KindIn:
			c.In++
		case events.KindOut:
			c.Out++
		case events.KindEnter:
			c.Enter++
		case events.KindExit:
			c.Exit++
		case events.KindDwell:
			c.Dwell++
		}
		single[rule][start] = c
	}
	// 08:00:30 + 150 s: intervals 08:00 (partial), 08:01, 08:02 (partial), two rules.
	if intervals != 6 {
		t.Errorf("%d totals events, want 6", intervals)
	}
	truth := p.Truth()
	for rule, want := range s.Rules {
		if sums[rule] != want || want != truth[rule] {
			t.Errorf("%s: intervals add up to %+v, the run counted %+v, truth %+v", rule, sums[rule], want, truth[rule])
		}
	}
}

// TestTotalsContinueAfterRestart: a live camera counted by one run, then by
// a second run of the daemon: the second continues the first's totals (from
// the live state), its event ids differ from the first's, and the live
// state ends equal to its summary.
func TestTotalsContinueAfterRestart(t *testing.T) {
	sc := testScene(t, 3, 60*time.Second, 10)
	cam := testsrv.StartMJPEG(t, testsrv.MJPEGOptions{Frames: testsrv.SceneFrames(sc, 80), FPS: 25})
	dir := t.TempDir()
	site := "site: ferry-terminal\nsources:\n  - {id: cam, url: \"" + cam.URL() + "\"}\n" +
		"detector:\n  motion: {min_area: 150}\nrules:\n  - {name: gate, source: cam, line: [[0.15, 0.55], [0.85, 0.55]]}\n" +
		"output:\n  nats:\n    embedded: {port: 0}\n  jsonl: " + filepath.Join(dir, "events.jsonl") + "\nlog: {level: warn}\nstate_dir: " + filepath.Join(dir, "state") + "\n"
	runFor := func(d time.Duration) Summary {
		cfg := siteFile(t, site)
		p, err := Build(cfg, Options{Pace: capture.PaceRealtime})
		if err != nil {
			t.Fatal(err)
		}
		defer p.Close()
		ctx, cancel := context.WithTimeout(context.Background(), d)
		defer cancel()
		if err := p.Run(ctx); err != nil {
			t.Fatal(err)
		}
		return p.Summary()
	}
	first := runFor(8 * time.Second)
	second := runFor(8 * time.Second)
	// The second run's own events: the lines after the first run's.
	b, err := os.ReadFile(filepath.Join(dir, "events.jsonl"))
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(string(b)), "\n")
	own := events.Totals{Kind: events.RuleLine}
	ids := map[string]bool{}
	for i, l := range lines {
		ev, err := events.Parse([]byte(l))
		if err != nil {
			t.Fatal(err)
		}
		if ids[ev.ID] {
			t.Errorf("event id %s repeats across the two runs", ev.ID)
		}
		ids[ev.ID] = true
		if int64(i) < first.Events.Produced {
			continue
		}
		switch ev.Data.Kind {
		case events.KindIn:
			own.In++
		case events.KindOut:
			own.Out++
		}
	}
	f, g := first.Rules["gate"], second.Rules["gate"]
	t.Logf("first run %+v; second run %+v, of which its own events %+v", f, g, own)
	if f.In+f.Out == 0 {
		t.Fatal("the first run counted nothing; the test needs crossings in it")
	}
	if g.In != f.In+own.In || g.Out != f.Out+own.Out {
		t.Errorf("second run's totals %+v are not the first's %+v plus its own events %+v", g, f, own)
	}
	cfg := siteFile(t, site)
	state, from, err := LiveState(context.Background(), cfg)
	if err != nil {
		t.Fatal(err)
	}
	if st := state["cam"]["gate"]; st.Totals != g {
		t.Errorf("live state (%s) %+v, summary %+v", from, st.Totals, g)
	}
}

// testScene is a generated walkway of the given length and crossings.
func testScene(t *testing.T, seed int64, d time.Duration, crossings int) *scene.Scene {
	t.Helper()
	c := scene.Config{Seed: seed, Duration: d, Crossings: crossings}.WithDefaults()
	c.Visitors = 0
	sc, err := scene.New(c)
	if err != nil {
		t.Fatal(err)
	}
	return sc
}
