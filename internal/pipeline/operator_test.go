package pipeline

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"image"
	"image/png"
	"io"
	"math"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/testutil"
	dto "github.com/prometheus/client_model/go"
	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"
	"gocv.io/x/gocv"

	"tallyd/capture"
	"tallyd/events"
	"tallyd/internal/testkit"
	"tallyd/internal/web"
)

// sceneSite is a generated walkway with a line and a zone, events to a
// JSON-lines file (the embedded NATS server runs as usual).
func sceneSite(t *testing.T, scene string, extra string) (string, string) {
	t.Helper()
	dir := t.TempDir()
	path := filepath.Join(dir, "site.yaml")
	body := "site: ferry-terminal\nsources:\n  - id: walkway\n    scene: {" + scene + "}\n" +
		sceneRules + "output:\n  jsonl: events.jsonl\n" + extra
	if err := os.WriteFile(path, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	return path, filepath.Join(dir, "events.jsonl")
}

// serve starts the operator's server for p on a loopback port.
func serve(t *testing.T, p *Pipeline, token string, save bool) (string, prometheus.Gatherer) {
	t.Helper()
	reg := prometheus.NewRegistry()
	reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	if err := p.Register(reg); err != nil {
		t.Fatal(err)
	}
	srv, err := web.Listen(p.Operator(save), web.Options{Addr: "127.0.0.1:0", Token: token, Gatherer: reg, Log: testkit.Log(t)})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { defer close(done); _ = srv.Run(ctx) }()
	t.Cleanup(func() { cancel(); <-done })
	return "http://" + srv.Addr(), reg
}

func get(t *testing.T, url string) (int, []byte) {
	t.Helper()
	resp, err := http.Get(url)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, b
}

// TestMetricsEqualSummary scrapes /metrics during and after a replay: the
// text parses with Prometheus' own parser, passes client_golang's lint, and
// the counters equal the summary at the end.
func TestMetricsEqualSummary(t *testing.T) {
	path, _ := sceneSite(t, "seed: 5, duration: 60s, crossings: 10, visitors: 3", "")
	cfg, err := Load(path)
	if err != nil {
		t.Fatal(err)
	}
	p, err := Build(cfg, Options{Pace: capture.PaceMax, Log: testkit.Log(t)})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	base, reg := serve(t, p, "", false)
	if code, body := get(t, base+"/api/sources/walkway/snapshot.jpg"); code != http.StatusServiceUnavailable {
		t.Errorf("snapshot before the first frame: %d %s, want 503", code, body)
	}
	if err := p.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	s := p.Summary()
	code, body := get(t, base+"/metrics")
	if code != http.StatusOK {
		t.Fatalf("/metrics: %d", code)
	}
	parser := expfmt.NewTextParser(model.LegacyValidation)
	fams, err := parser.TextToMetricFamilies(bytes.NewReader(body))
	if err != nil {
		t.Fatalf("Prometheus text parser: %v", err)
	}
	probs, err := testutil.GatherAndLint(reg)
	if err != nil {
		t.Fatal(err)
	}
	for _, pr := range probs {
		t.Errorf("lint: %s: %s", pr.Metric, pr.Text)
	}
	value := func(name string, labels map[string]string) float64 {
		t.Helper()
		f := fams[name]
		if f == nil {
			t.Fatalf("metric %s missing", name)
		}
	next:
		for _, m := range f.Metric {
			for _, lp := range m.Label {
				if v, ok := labels[lp.GetName()]; ok && v != lp.GetValue() {
					continue next
				}
			}
			return metricValue(m)
		}
		t.Fatalf("metric %s%v missing", name, labels)
		return 0
	}
	src := map[string]string{"source": "walkway"}
	for _, c := range []struct {
		name   string
		labels map[string]string
		want   int64
	}{
		{"tallyd_source_frames_read_total", src, s.FramesRead},
		{"tallyd_source_frames_processed_total", src, s.FramesProcessed},
		{"tallyd_events_produced_total", nil, s.Events.Produced},
		{"tallyd_events_acked_total", nil, s.Events.Acked},
		{"tallyd_rule_events_total", map[string]string{"rule": "gate", "kind": "in"}, int64(s.Rules["gate"].In)},
		{"tallyd_rule_events_total", map[string]string{"rule": "gate", "kind": "out"}, int64(s.Rules["gate"].Out)},
		{"tallyd_rule_events_total", map[string]string{"rule": "machines", "kind": "enter"}, int64(s.Rules["machines"].Enter)},
		{"tallyd_rule_events_total", map[string]string{"rule": "machines", "kind": "exit"}, int64(s.Rules["machines"].Exit)},
		// Every event reached the stream by the end of the replay: acknowledged per rule and kind.
		{"tallyd_rule_events_acked_total", map[string]string{"rule": "gate", "kind": "in"}, int64(s.Rules["gate"].In)},
		{"tallyd_rule_events_acked_total", map[string]string{"rule": "gate", "kind": "out"}, int64(s.Rules["gate"].Out)},
		{"tallyd_rule_events_acked_total", map[string]string{"rule": "machines", "kind": "enter"}, int64(s.Rules["machines"].Enter)},
	} {
		if got := value(c.name, c.labels); got != float64(c.want) {
			t.Errorf("%s%v = %g, summary says %d", c.name, c.labels, got, c.want)
		}
	}
	if got := value("tallyd_source_frames_dropped_total", map[string]string{"reason": "mailbox"}); got != float64(s.Dropped.Mailbox) {
		t.Errorf("dropped mailbox = %g, summary %d", got, s.Dropped.Mailbox)
	}
	if h := fams["tallyd_detect_inference_seconds"]; h == nil || h.Metric[0].GetHistogram().GetSampleCount() != uint64(s.FramesProcessed) {
		t.Errorf("inference histogram: want %d samples", s.FramesProcessed)
	}
	if s.Rules["gate"].In+s.Rules["gate"].Out == 0 {
		t.Error("no crossings counted: the scene is too short for the test")
	}
	for _, name := range []string{"tallyd_build_info", "go_goroutines", "process_cpu_seconds_total", "tallyd_frame_age_seconds", "tallyd_zone_occupancy", "tallyd_broker_connected"} {
		if fams[name] == nil {
			t.Errorf("metric %s missing", name)
		}
	}
	// The per-source status as JSON, and the sources page's counts.
	code, body = get(t, base+"/api/status")
	var st struct {
		Sources []map[string]any `json:"sources"`
	}
	if err := json.Unmarshal(body, &st); code != 200 || err != nil || len(st.Sources) != 1 || st.Sources[0]["processed"] != float64(s.FramesProcessed) {
		t.Errorf("/api/status: %d %v %s", code, err, body)
	}
	code, body = get(t, base+"/api/sources")
	var page web.SitePage
	if err := json.Unmarshal(body, &page); code != 200 || err != nil || len(page.Sources) != 1 || page.Sources[0].Width != 640 || len(page.Sources[0].Rules) != 2 {
		t.Fatalf("/api/sources: %d %v %s", code, err, body)
	}
	var totals map[string]events.Totals
	if err := json.Unmarshal(page.Sources[0].Totals, &totals); err != nil || totals["gate"] != s.Rules["gate"] {
		t.Errorf("/api/sources totals %s, summary %+v (%v)", page.Sources[0].Totals, s.Rules["gate"], err)
	}
}

func metricValue(m *dto.Metric) float64 {
	switch {
	case m.Counter != nil:
		return m.Counter.GetValue()
	case m.Gauge != nil:
		return m.Gauge.GetValue()
	case m.Untyped != nil:
		return m.Untyped.GetValue()
	}
	return math.NaN()
}

// TestSnapshotOverlay draws a frame of a generated scene: the line's pixels
// carry the rule colour where the rule is, and track boxes lie on the truth
// boxes of the people in that frame.
func TestSnapshotOverlay(t *testing.T) {
	path, _ := sceneSite(t, "seed: 5, duration: 60s, crossings: 10, visitors: 3", "")
	cfg, err := Load(path)
	if err != nil {
		t.Fatal(err)
	}
	at := 20 * time.Second
	p, err := Build(cfg, Options{Pace: capture.PaceMax, Offline: true, Until: &at, Log: testkit.Log(t)})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	if err := p.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	drawn, plain := decodePNG(t, p, false), decodePNG(t, p, true)
	w, h := drawn.Bounds().Dx(), drawn.Bounds().Dy()
	// The gate runs from (0.15, 0.55) to (0.85, 0.55) (sceneRules).
	y := int(math.Round(0.55 * float64(h)))
	onLine, changed := 0, 0
	for x := int(0.2 * float64(w)); x < int(0.8*float64(w)); x++ {
		r, g, b, _ := drawn.At(x, y).RGBA()
		if r>>8 > 200 && g>>8 > 150 && g>>8 < 230 && b>>8 < 80 { // amber
			onLine++
		}
		if drawn.At(x, y) != plain.At(x, y) {
			changed++
		}
	}
	if n := int(0.6 * float64(w)); onLine < n*9/10 {
		t.Errorf("line pixels: %d of %d along the gate have the rule colour", onLine, n)
	}
	if r, g, b, _ := drawn.At(w/2, int(0.15*float64(h))).RGBA(); r>>8 > 200 && g>>8 > 150 && b>>8 < 80 {
		t.Error("rule colour far from the line")
	}
	// Track boxes where the truth boxes are: the magenta edge within 3 px of
	// each person's true box.
	sr := p.sources[0]
	frame := int(p.SnapshotFrame("walkway"))
	truth := sr.scene.Truth(frame)
	found, inside := 0, 0
	for _, o := range truth {
		b := o.Box
		if b.X1 < 5 || b.Y1 < 5 || b.X2 > float64(w-5) || b.Y2 > float64(h-5) || b.W() < 8 {
			continue
		}
		inside++
		if magentaNear(drawn, int(b.X1), int(b.Y1), int(b.X2), int(b.Y2), 3) {
			found++
		}
	}
	if inside == 0 || found < inside*7/10 {
		t.Errorf("track boxes on %d of %d truth boxes in frame %d", found, inside, frame)
	}
}

func decodePNG(t *testing.T, p *Pipeline, plain bool) image.Image {
	t.Helper()
	b, err := p.Snapshot("walkway", ".png", plain)
	if err != nil {
		t.Fatal(err)
	}
	img, err := png.Decode(bytes.NewReader(b))
	if err != nil {
		t.Fatal(err)
	}
	return img
}

// magentaNear: the box's top and left edges (within tol px) are mostly the
// track colour.
func magentaNear(img image.Image, x1, y1, x2, y2, tol int) bool {
	isM := func(x, y int) bool {
		r, g, b, _ := img.At(x, y).RGBA()
		return r>>8 > 180 && g>>8 < 110 && b>>8 > 150
	}
	hit := 0
	n := 0
	for x := x1 + 2; x < x2-2; x++ {
		n++
		for d := -tol; d <= tol; d++ {
			if isM(x, y1+d) {
				hit++
				break
			}
		}
	}
	for y := y1 + 2; y < y2-2; y++ {
		n++
		for d := -tol; d <= tol; d++ {
			if isM(x1+d, y) {
				hit++
				break
			}
		}
	}
	return n > 0 && hit*2 >= n
}

// TestReloadKeepsUnchangedRules reloads the rules mid-replay: the unchanged
// line counts exactly the truth, as if nothing happened; the changed zone
// and the new line start at 0 and say so in reset events.
func TestReloadKeepsUnchangedRules(t *testing.T) {
	path, jsonl := sceneSite(t, "seed: 5, duration: 60s, crossings: 10, visitors: 3", "")
	cfg, err := Load(path)
	if err != nil {
		t.Fatal(err)
	}
	p, err := Build(cfg, Options{Pace: capture.PaceMax, Log: testkit.Log(t)})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	data, _ := os.ReadFile(path)
	edited := strings.Replace(string(data), "zone: [[0.02, 0.08], [0.27, 0.08], [0.27, 0.45], [0.02, 0.45]]",
		"zone: [[0.02, 0.08], [0.30, 0.08], [0.30, 0.45], [0.02, 0.45]]", 1)
	edited = strings.Replace(edited, "log: {level: warn}", "  - name: berth\n    source: walkway\n    line: [[0.15, 0.75], [0.85, 0.75]]\nlog: {level: warn}", 1)
	next, err := Parse(path, []byte(edited))
	if err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	go func() { done <- p.Run(context.Background()) }()
	testkit.WaitFor(t, 30*time.Second, "200 frames processed", func() bool { return p.Status()[0].Processed >= 200 })
	rep := p.Reload(next)
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	if fmt.Sprint(rep.Kept, rep.Changed, rep.Added, rep.Removed) != "[gate] [machines] [berth] []" {
		t.Errorf("reload report %+v", rep)
	}
	s := p.Summary()
	if s.Rules["gate"] != s.Truth["gate"] {
		t.Errorf("unchanged gate: counted %+v, truth %+v", s.Rules["gate"], s.Truth["gate"])
	}
	if s.Rules["berth"].In+s.Rules["berth"].Out > s.Truth["berth"].In+s.Truth["berth"].Out {
		t.Errorf("new line counted %+v, more than the whole run's truth %+v", s.Rules["berth"], s.Truth["berth"])
	}
	b, err := os.ReadFile(jsonl)
	if err != nil {
		t.Fatal(err)
	}
	resets := map[string]events.Reason{}
	for _, line := range strings.Split(strings.TrimSpace(string(b)), "\n") {
		ev, err := events.Parse([]byte(line))
		if err != nil {
			t.Fatalf("event %s: %v", line, err)
		}
		if ev.Data.Kind == events.KindReset {
			resets[ev.Data.Rule] = ev.Data.Reason
		}
	}
	if fmt.Sprint(resets) != "map[berth:rule_new machines:rule_changed]" {
		t.Errorf("reset events %v", resets)
	}
}

// TestAnnotatedVideo writes the processed frames with the overlay; OpenCV
// reads back as many frames as were processed.
func TestAnnotatedVideo(t *testing.T) {
	for _, ext := range []string{".avi", ".mp4"} {
		t.Run(ext, func(t *testing.T) {
			path, _ := sceneSite(t, "seed: 5, duration: 60s, crossings: 10, visitors: 3", "")
			cfg, err := Load(path)
			if err != nil {
				t.Fatal(err)
			}
			out := filepath.Join(t.TempDir(), "annotated"+ext)
			p, err := Build(cfg, Options{Pace: capture.PaceMax, Offline: true, Annotate: out, Log: testkit.Log(t)})
			if err != nil {
				t.Fatal(err)
			}
			if err := p.Run(context.Background()); err != nil {
				t.Fatal(err)
			}
			s := p.Summary()
			p.Close()
			vc, err := gocv.VideoCaptureFile(out)
			if err != nil {
				t.Fatal(err)
			}
			defer vc.Close()
			m := gocv.NewMat()
			defer m.Close()
			n := int64(0)
			for vc.Read(&m) && !m.Empty() {
				n++
			}
			if n != s.FramesProcessed || n == 0 {
				t.Errorf("%s holds %d frames, %d processed", out, n, s.FramesProcessed)
			}
		})
	}
}
