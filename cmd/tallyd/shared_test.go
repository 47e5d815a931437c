package main

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"sort"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"tallyd/capture/scene"
	"tallyd/events"
	"tallyd/internal/fleet"
	"tallyd/internal/pipeline"
	"tallyd/internal/testkit"
)

// sharedSources is the number of generated cameras of the shared test site.
const sharedSources = 6

// sharedSiteYAML is a ferry terminal with six generated cameras on the wall
// clock from start, each with the boarding gate and the ticket machines;
// the six ticket zones make one site-wide area.
func sharedSiteYAML(url string, start time.Time, ttl string) string {
	var b strings.Builder
	fmt.Fprintf(&b, "site: ferry-terminal\nsources:\n")
	for k := 1; k <= sharedSources; k++ {
		fmt.Fprintf(&b, "  - {id: cam%d, scene: {seed: %d, duration: 150s, crossings: 14, visitors: 4}, start_time: %s}\n",
			k, 20+k, start.UTC().Format(time.RFC3339))
	}
	b.WriteString("detector: {motion: {min_area: 200}}\nrules:\n")
	for k := 1; k <= sharedSources; k++ {
		fmt.Fprintf(&b, "  - {name: gate%d, source: cam%d, line: [[0.15, 0.55], [0.85, 0.55]]}\n", k, k)
		fmt.Fprintf(&b, "  - {name: tickets%d, source: cam%d, zone: [[0.02, 0.08], [0.27, 0.08], [0.27, 0.45], [0.02, 0.45]], area: ticket-hall}\n", k, k)
	}
	fmt.Fprintf(&b, "fleet: {lease_ttl: %s}\n", ttl)
	fmt.Fprintf(&b, "output: {nats: {url: %q, jetstream: {replicas: 3}}}\nlog: {level: info}\n", url)
	return b.String()
}

// fleetStatus reads the site's lease bucket.
func fleetStatus(t *testing.T, js jetstream.JetStream) fleet.Status {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	st, err := fleet.ReadStatus(ctx, js, "ferry-terminal")
	if err != nil {
		return fleet.Status{}
	}
	return st
}

// holders maps each held source to its holder.
func holders(st fleet.Status) map[string]string {
	out := map[string]string{}
	for _, l := range st.Leases {
		if l.Kind == fleet.KindSource {
			out[l.Name] = l.Holder
		}
	}
	return out
}

var summaryLine = regexp.MustCompile(`events produced (\d+), delivered (\d+), pending (\d+), dropped (\d+)`)

// runSummary reads the delivery line of a stopped daemon's table.
func runSummary(t *testing.T, c *child) (produced, delivered, pending, dropped int) {
	t.Helper()
	m := summaryLine.FindStringSubmatch(c.out.String())
	if m == nil {
		t.Fatalf("no summary on stdout:\n%s\nstderr:\n%s", c.out.String(), c.errOut.String())
	}
	n := func(s string) int { v, _ := strconv.Atoi(s); return v }
	return n(m[1]), n(m[2]), n(m[3]), n(m[4])
}

// TestSharedSite runs a site of six generated cameras on three daemons
// (real processes) over a three-node JetStream cluster inside the test (R3
// stream and buckets): every source is held by exactly one daemon, two
// each; a daemon killed with SIGKILL loses its sources to the others within
// TTL + 2 s; one NATS node is shut down for the rest of the run; a daemon
// paused with SIGSTOP past its lease finds its late events refused; the
// last two stop with SIGTERM, the first handing its sources to the second
// at once. From the stream: no event id twice; the events of one source
// under different leases never overlap in time (fencing); every hold
// begins with a handover event; the crossings counted equal the scenes'
// truth except crossings inside a measured gap (and a second of tracker
// warm-up after it); area events add up their zones.
func TestSharedSite(t *testing.T) {
	if testing.Short() {
		t.Skip("a 90 s run of three daemons")
	}
	t.Parallel()
	cl := testkit.StartCluster(t, 3)
	dir := t.TempDir()
	const ttl = 4 * time.Second
	start := time.Now().Add(10 * time.Second).Truncate(time.Second)
	site := filepath.Join(dir, "site.yaml")
	if err := os.WriteFile(site, []byte(sharedSiteYAML(cl.URL(0)+","+cl.URL(1), start, "4s")), 0o644); err != nil {
		t.Fatal(err)
	}
	if out, errOut, code := cli(t, "site", "push", "-c", site, "--nats", cl.URL(0)); code != 0 {
		t.Fatalf("site push: exit %d\n%s%s", code, out, errOut)
	}
	_, js := testkit.JetStream(t, cl.URL(1))

	var d [3]*child
	for i := range d {
		d[i] = startChild(t, "run", "--site", "ferry-terminal", "--nats", cl.URL(i), "--member", fmt.Sprintf("d%d", i),
			"--max-sources", "6", "--state-dir", filepath.Join(dir, fmt.Sprintf("d%d", i)), "--status-every", "0")
	}
	t.Cleanup(func() {
		if t.Failed() {
			t.Logf("fleet: %+v", fleetStatus(t, js))
			for i, c := range d {
				t.Logf("d%d stdout:\n%s\nstderr:\n%s", i, c.out.String(), c.errOut.String())
			}
		}
	})
	testkit.WaitFor(t, 30*time.Second, "every source held, two by each daemon", func() bool {
		h := holders(fleetStatus(t, js))
		per := map[string]int{}
		for _, m := range h {
			per[m]++
		}
		return len(h) == sharedSources && per["d0"] == 2 && per["d1"] == 2 && per["d2"] == 2
	})
	before := holders(fleetStatus(t, js))
	t.Logf("held: %v", before)

	// SIGKILL d0 once the scenes run.
	time.Sleep(time.Until(start.Add(20 * time.Second)))
	if err := d[0].cmd.Process.Kill(); err != nil {
		t.Fatal(err)
	}
	killedAt := time.Now()
	testkit.WaitFor(t, ttl+10*time.Second, "d0's sources taken over", func() bool {
		h := holders(fleetStatus(t, js))
		for src, m := range before {
			if m == "d0" && (h[src] == "" || h[src] == "d0") {
				return false
			}
		}
		return true
	})

	// One NATS node down for the rest of the run (d2 reads the site
	// through it; the events go to node 0).
	time.Sleep(time.Until(start.Add(32 * time.Second)))
	cl.Shutdown(2)

	// SIGSTOP d1 past its lease, then SIGCONT.
	time.Sleep(time.Until(start.Add(40 * time.Second)))
	if err := d[1].cmd.Process.Signal(syscall.SIGSTOP); err != nil {
		t.Fatal(err)
	}
	pausedAt := time.Now()
	time.Sleep(ttl + 3*time.Second)
	if err := d[1].cmd.Process.Signal(syscall.SIGCONT); err != nil {
		t.Fatal(err)
	}
	resumedAt := time.Now()

	// A new revision of the site with one more rule: applied without a
	// restart by whichever daemon holds cam1 (a rule_new reset event).
	time.Sleep(time.Until(start.Add(50 * time.Second)))
	y := sharedSiteYAML(cl.URL(0)+","+cl.URL(1), start, "4s")
	y = strings.Replace(y, "rules:\n", "rules:\n  - {name: gate1-low, source: cam1, line: [[0.15, 0.75], [0.85, 0.75]]}\n", 1)
	if err := os.WriteFile(site, []byte(y), 0o644); err != nil {
		t.Fatal(err)
	}
	if out, errOut, code := cli(t, "site", "push", "-c", site, "--nats", cl.URL(1)); code != 0 || !strings.Contains(out, "revision 2") {
		t.Fatalf("second site push: exit %d\n%s%s", code, out, errOut)
	}

	// The rest: d1 stops cleanly (its sources go to d2), then d2.
	time.Sleep(time.Until(start.Add(62 * time.Second)))
	d1Held := 0
	for _, m := range holders(fleetStatus(t, js)) {
		if m == "d1" {
			d1Held++
		}
	}
	d1StopAt := time.Now()
	if code, _ := d[1].stop(t, syscall.SIGTERM); code != 0 {
		t.Fatalf("d1: exit %d\n%s", code, d[1].errOut.String())
	}
	d1StoppedAt := time.Now()
	time.Sleep(3 * time.Second)
	endAt := time.Now()
	if code, _ := d[2].stop(t, syscall.SIGTERM); code != 0 {
		t.Fatalf("d2: exit %d\n%s", code, d[2].errOut.String())
	}
	for _, c := range []*child{d[1], d[2]} {
		produced, delivered, pending, dropped := runSummary(t, c)
		if pending != 0 || dropped != 0 || delivered != produced {
			t.Errorf("a cleanly stopped daemon: produced %d, delivered %d, pending %d, dropped %d", produced, delivered, pending, dropped)
		}
	}
	t.Logf("d1 (paused %v at %s, resumed %s): %s", ttl+3*time.Second, pausedAt.Format("15:04:05.000"), resumedAt.Format("15:04:05.000"),
		grepLines(d[1].errOut.String(), "lease lost", "events refused", "source released"))

	msgs := streamEvents(t, cl.URL(0)) // each message's Nats-Msg-Id checked against its event id
	ids := map[string]int{}
	bySource := map[string][]events.Event{}
	var areas []events.Event
	newRule := false
	for _, ev := range msgs {
		if ev.Data.Rule == "gate1-low" && ev.Data.Kind == events.KindReset && ev.Data.Reason == events.ReasonRuleNew {
			newRule = true
		}
		ids[ev.ID]++
		if ids[ev.ID] == 2 {
			t.Errorf("event %s twice in the stream", ev.ID)
		}
		if ev.Data.Kind == events.KindOccupancy {
			areas = append(areas, ev)
			continue
		}
		bySource[ev.Data.Source] = append(bySource[ev.Data.Source], ev)
	}
	t.Logf("%d events in the stream, %d area events", len(msgs), len(areas))
	if !newRule {
		t.Errorf("no rule_new reset event for the rule pushed in revision 2; logs:\n%s\n%s",
			grepLines(d[1].errOut.String(), "site version"), grepLines(d[2].errOut.String(), "site version"))
	}

	cfg, err := pipeline.Load(site)
	if err != nil {
		t.Fatal(err)
	}
	offTruth := 0 // crossings missed outside gaps, or counted twice, over the site
	// d1's SIGTERM hands its cameras to d2 cleanly: released, at once.
	fromStop := 0
	for _, ev := range msgs {
		if h := ev.Data.Handover; h != nil && h.From == "d1" && ev.Time.After(d1StopAt) {
			fromStop++
			if h.Cause != "released" || h.GapS > 1 {
				t.Errorf("%s after d1's SIGTERM: %+v, want released within a second", ev.Data.Source, *h)
			}
		}
	}
	if d1Held > 0 && fromStop == 0 {
		t.Errorf("d1 held %d cameras at its SIGTERM, none went to d2", d1Held)
	}
	t.Logf("d1 held %d cameras at its SIGTERM; %d hand-overs from it after", d1Held, fromStop)
	for k, sc := range cfg.Sources {
		evs := bySource[sc.ID]
		// Fencing: the events of each lease lie in a time range of their
		// own; leases follow each other in token order.
		type span struct {
			token      uint64
			first, end time.Time
			handover   *events.Event
		}
		spans := map[uint64]*span{}
		for i := range evs {
			ev := &evs[i]
			if ev.Data.Lease == 0 {
				t.Errorf("%s: event %s without a lease token", sc.ID, ev.ID)
				continue
			}
			s := spans[ev.Data.Lease]
			if s == nil {
				s = &span{token: ev.Data.Lease, first: ev.Time, end: ev.Time}
				spans[ev.Data.Lease] = s
			}
			if ev.Time.Before(s.first) {
				s.first = ev.Time
			}
			if ev.Time.After(s.end) {
				s.end = ev.Time
			}
			if ev.Data.Kind == events.KindHandover {
				s.handover = ev
			}
		}
		var order []*span
		for _, s := range spans {
			order = append(order, s)
		}
		sort.Slice(order, func(i, j int) bool { return order[i].token < order[j].token })
		type window struct{ from, to time.Time }
		var gaps []window
		fromD0 := false
		for i, s := range order {
			if s.handover == nil {
				t.Errorf("%s: lease %d has no handover event", sc.ID, s.token)
				continue
			}
			h := s.handover.Data.Handover
			// The same frame may close one hold and open the next (a
			// clean hand-over within one frame time); later is overlap.
			if i > 0 && order[i-1].end.After(s.first) {
				t.Errorf("%s: lease %d's events reach %s, after lease %d began at %s", sc.ID, order[i-1].token,
					order[i-1].end.Format("15:04:05.000"), s.token, s.first.Format("15:04:05.000"))
			}
			gapStart := s.handover.Time.Add(-time.Duration(h.GapS * float64(time.Second)))
			if i == 0 {
				gapStart = start
			}
			// A crossing is counted a few frames after the anchor passed
			// the line (the band) and needs a confirmed track: a second
			// on each side of the gap is at risk too.
			gaps = append(gaps, window{gapStart.Add(-time.Second), s.handover.Time.Add(time.Second)})
			if h.From == "d0" && h.Cause == "expired" {
				fromD0 = true
				late := s.handover.Time.Sub(killedAt)
				if late > ttl+2*time.Second {
					t.Errorf("%s: taken over %v after d0 was killed (TTL %v + 2 s)", sc.ID, late, ttl)
				}
				t.Logf("%s: first frame under the new lease %v after the SIGKILL", sc.ID, late.Round(time.Millisecond))
			}
			t.Logf("%s lease %d: %s -> %s (%s), gap %.2f s, events %s .. %s", sc.ID, s.token, h.From, h.To, h.Cause, h.GapS,
				s.first.Format("15:04:05.0"), s.end.Format("15:04:05.0"))
		}
		if before[sc.ID] == "d0" && !fromD0 {
			t.Errorf("%s: no hand-over from the killed d0 in the stream", sc.ID)
		}
		// Counts against the truth up to a cutoff before the end (after
		// it nobody counts). An event comes a few frames after its truth
		// crossing (the band), so truth crossings within a second of the
		// cutoff may be on either side of it.
		sn, err := scene.New(pipeline.SceneConfig(*sc.Scene))
		if err != nil {
			t.Fatal(err)
		}
		cutoff := endAt.Add(-2 * time.Second)
		gate := fmt.Sprintf("gate%d", k+1)
		counted := map[int]int{}
		for _, ev := range evs {
			if ev.Data.Rule != gate || !ev.Time.Before(cutoff) {
				continue
			}
			switch ev.Data.Kind {
			case events.KindIn:
				counted[1]++
			case events.KindOut:
				counted[-1]++
			}
		}
		truth, edge, inGap := map[int]int{}, map[int]int{}, map[int]int{}
		var outside []string
		for _, w := range sn.Plan() {
			at := start.Add(w.GateAt)
			if w.Cross == 0 || !at.Before(cutoff.Add(time.Second)) {
				continue
			}
			if !at.Before(cutoff.Add(-time.Second)) {
				edge[w.Cross]++
				continue
			}
			truth[w.Cross]++
			gapped := false
			for _, g := range gaps {
				if !at.Before(g.from) && at.Before(g.to) {
					inGap[w.Cross]++
					gapped = true
					break
				}
			}
			if !gapped {
				outside = append(outside, fmt.Sprintf("%+d@%s", w.Cross, at.Format("15:04:05.0")))
			}
		}
		// Beyond the gaps, one crossing per camera and direction may be
		// missed or counted twice: the cameras are live, and on this
		// 2-core machine the three daemons and the cluster (and other
		// tests) compete for the CPU, so frames are skipped now and then
		// (README: "within one of a hand count" on real footage). The
		// site-wide sum of such errors is bounded below.
		for _, dir := range []int{1, -1} {
			got, want := counted[dir], truth[dir]
			if over := got - (want + edge[dir]); over > 0 {
				offTruth += over
			}
			if under := (want - inGap[dir]) - got; under > 0 {
				offTruth += under
			}
			if got > want+edge[dir]+1 || want-got > inGap[dir]+1 {
				t.Errorf("%s direction %+d: counted %d, truth %d (+%d at the cutoff), of which %d inside hand-over gaps; crossings outside gaps: %v",
					sc.ID, dir, got, want, edge[dir], inGap[dir], outside)
			}
		}
		t.Logf("%s: in %d/%d (gaps %d), out %d/%d (gaps %d)", sc.ID, counted[1], truth[1], inGap[1], counted[-1], truth[-1], inGap[-1])
	}
	t.Logf("crossings off the truth outside hand-over gaps, whole site: %d", offTruth)
	if offTruth > 3 {
		t.Errorf("%d crossings missed outside hand-over gaps or counted twice over the site (at most 3)", offTruth)
	}
	enters := 0
	for _, evs := range bySource {
		for _, ev := range evs {
			if ev.Data.Kind == events.KindEnter {
				enters++
			}
		}
	}
	if len(areas) < 2 || len(areas) < enters/2 {
		t.Errorf("%d zone enters in the stream, but %d area events; keepers:\n%s\n%s", enters, len(areas),
			grepLines(d[1].errOut.String(), "area"), grepLines(d[2].errOut.String(), "area"))
	}
	for _, ev := range areas {
		a := ev.Data.Area
		occ, in, out := 0, 0, 0
		for _, z := range a.Zones {
			occ, in, out = occ+z.Occupancy, in+z.Enter, out+z.Exit
		}
		if a.Name != "ticket-hall" || a.Occupancy != occ || a.Enter != in || a.Exit != out || occ < 0 {
			t.Errorf("area event %s: %+v does not add up its zones (%d, %d, %d)", ev.ID, *a, occ, in, out)
			break
		}
	}
	t.Logf("d1 stopped %s, end %s", d1StoppedAt.Format("15:04:05.000"), endAt.Format("15:04:05.000"))
}

// grepLines keeps the lines of s that hold any of subs.
func grepLines(s string, subs ...string) string {
	var out []string
	for _, l := range strings.Split(s, "\n") {
		for _, sub := range subs {
			if strings.Contains(l, sub) {
				out = append(out, l)
				break
			}
		}
	}
	return strings.Join(out, "\n")
}

// TestSitePushRefuses: a site file that tallyd check refuses is refused by
// site push with the same located errors (exit 2), and so is a file check
// accepts but several daemons cannot share; nothing is stored.
func TestSitePushRefuses(t *testing.T) {
	srv := testkit.StartNATSServer(t, true)
	dir := t.TempDir()
	write := func(name, body string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	bad := write("bad.yaml", "site: ferry-terminal\nsources:\n  - {id: cam1, scene: {seed: 1}}\nrules:\n"+
		"  - {name: gate, source: cam9, line: [[0.1, 0.5], [0.9, 0.5]]}\n"+
		"  - {name: queue, source: cam1, line: [[0.1, 0.5], [0.9, 0.5]], area: hall}\n"+
		"output: {nats: {url: \""+srv.URL()+"\"}}\n")
	_, checkErr, checkCode := cli(t, "check", "-c", bad)
	_, pushErr, pushCode := cli(t, "site", "push", "-c", bad, "--nats", srv.URL())
	if checkCode != 2 || pushCode != 2 {
		t.Fatalf("exit codes: check %d, push %d; want 2 and 2\n%s\n%s", checkCode, pushCode, checkErr, pushErr)
	}
	strip := func(s, cmd string) string { return strings.TrimPrefix(s, "tallyd "+cmd+": ") }
	if strip(checkErr, "check") != strip(pushErr, "site") || !strings.Contains(pushErr, "bad.yaml:5: rules[0].source: no source has id \"cam9\"") ||
		!strings.Contains(pushErr, "bad.yaml:6: rules[1].area: only zones have an area") {
		t.Errorf("site push errors differ from check's:\ncheck: %s\npush:  %s", checkErr, pushErr)
	}
	// Valid for one daemon, not for several: the embedded server and a
	// recorded file.
	one := write("one.yaml", "site: ferry-terminal\nsources:\n  - {id: cam1, scene: {seed: 1}}\n  - {id: rec, file: walk.mp4}\n")
	if err := os.WriteFile(filepath.Join(dir, "walk.mp4"), nil, 0o644); err != nil {
		t.Fatal(err)
	}
	_, errOut, code := cli(t, "site", "push", "-c", one, "--nats", srv.URL())
	if code != 2 || !strings.Contains(errOut, "one.yaml") || !strings.Contains(errOut, "output.nats.url") || !strings.Contains(errOut, "sources[1].file") {
		t.Errorf("site push of a one-daemon site: exit %d\n%s", code, errOut)
	}
	_, js := testkit.JetStream(t, srv.URL())
	if _, err := js.KeyValue(context.Background(), fleet.SitesBucket); err == nil {
		t.Error("a refused push created the site bucket")
	}
	// Missing flags are usage errors.
	if _, errOut, code := cli(t, "site", "push", "-c", bad); code != 2 || !strings.Contains(errOut, "--nats URL is required") && !strings.Contains(errOut, "no source has id") {
		t.Errorf("site push without --nats: exit %d, %s", code, errOut)
	}
	if _, errOut, code := cli(t, "run", "--site", "ferry-terminal", "-c", bad); code != 2 || !strings.Contains(errOut, "not both") {
		t.Errorf("run with --site and -c: exit %d, %s", code, errOut)
	}
	if _, errOut, code := cli(t, "run", "--site", "nowhere", "--nats", srv.URL()); code != 2 || !strings.Contains(errOut, `site "nowhere" is not in bucket tallyd-sites`) {
		t.Errorf("run --site of a site never pushed: exit %d, %s", code, errOut)
	}
}

// TestSharedSiteRebuild: a revision that changes the sources (one camera's
// scene, one camera more) is applied by a running daemon without a restart:
// it hands its cameras over cleanly (to itself), rebuilds its pipeline and
// takes them all again; SIGTERM then ends it with exit 0.
func TestSharedSiteRebuild(t *testing.T) {
	if testing.Short() {
		t.Skip("a 20 s run")
	}
	t.Parallel()
	srv := testkit.StartNATSServer(t, true)
	dir := t.TempDir()
	start := time.Now().Add(2 * time.Second).Truncate(time.Second)
	site := filepath.Join(dir, "site.yaml")
	body := func(sources string) []byte {
		return []byte("site: ferry-terminal\nsources:\n" + sources +
			"detector: {motion: {min_area: 200}}\nrules:\n  - {name: gate1, source: cam1, line: [[0.15, 0.55], [0.85, 0.55]]}\n" +
			"fleet: {lease_ttl: 2s}\noutput: {nats: {url: \"" + srv.URL() + "\"}}\nlog: {level: info}\n")
	}
	cam := func(id string, seed int) string {
		return fmt.Sprintf("  - {id: %s, scene: {seed: %d, duration: 60s, crossings: 4, visitors: 2}, start_time: %s}\n", id, seed, start.UTC().Format(time.RFC3339))
	}
	if err := os.WriteFile(site, body(cam("cam1", 1)), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, errOut, code := cli(t, "site", "push", "-c", site, "--nats", srv.URL()); code != 0 {
		t.Fatalf("site push: %s", errOut)
	}
	d := startChild(t, "run", "--site", "ferry-terminal", "--nats", srv.URL(), "--member", "solo", "--max-sources", "4",
		"--state-dir", filepath.Join(dir, "solo"), "--status-every", "0")
	t.Cleanup(func() {
		if t.Failed() {
			t.Logf("daemon stderr:\n%s", d.errOut.String())
		}
	})
	_, js := testkit.JetStream(t, srv.URL())
	held := func(want ...string) func() bool {
		return func() bool {
			h := holders(fleetStatus(t, js))
			for _, id := range want {
				if h[id] != "solo" {
					return false
				}
			}
			return len(h) == len(want)
		}
	}
	testkit.WaitFor(t, 20*time.Second, "cam1 held", held("cam1"))
	time.Sleep(time.Until(start.Add(3 * time.Second)))
	if err := os.WriteFile(site, body(cam("cam1", 2)+cam("cam2", 3)), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, errOut, code := cli(t, "site", "push", "-c", site, "--nats", srv.URL()); code != 0 {
		t.Fatalf("second site push: %s", errOut)
	}
	testkit.WaitFor(t, 20*time.Second, "cam1 and cam2 held after the rebuild", held("cam1", "cam2"))
	time.Sleep(2 * time.Second)
	if code, _ := d.stop(t, syscall.SIGTERM); code != 0 {
		t.Fatalf("exit %d\n%s", code, d.errOut.String())
	}
	logs := d.errOut.String()
	if !strings.Contains(logs, "rebuilding") || !strings.Contains(logs, "revision=2") {
		t.Errorf("no rebuild for revision 2 in the log:\n%s", grepLines(logs, "site", "revision"))
	}
	var causes []string
	for _, ev := range streamEvents(t, srv.URL()) {
		if h := ev.Data.Handover; h != nil {
			causes = append(causes, ev.Data.Source+":"+h.Cause)
		}
	}
	want := []string{"cam1:first", "cam1:released", "cam2:first"}
	sort.Strings(causes)
	if strings.Join(causes, " ") != strings.Join(want, " ") {
		t.Errorf("handover events %v, want %v", causes, want)
	}
}
