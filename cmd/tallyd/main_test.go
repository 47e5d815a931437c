package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"tallyd/capture/testsrv"
	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/internal/pipeline"
	"tallyd/internal/testkit"
	"tallyd/track/eval"
)

// cli runs tallyd in-process and returns stdout, stderr and the exit code.
func cli(t *testing.T, args ...string) (string, string, int) {
	t.Helper()
	var out, errb bytes.Buffer
	code := realMain(context.Background(), args, &out, &errb)
	return out.String(), errb.String(), code
}

// sceneSite writes a site file for a generated scene with the demo's rules.
func sceneSite(t *testing.T, dir string, seed int, detector string) string {
	return sceneSiteWith(t, dir, seed, detector, "bytetrack")
}

// sceneSiteWith is sceneSite with a chosen tracker.
func sceneSiteWith(t *testing.T, dir string, seed int, detector, trackerKind string) string {
	t.Helper()
	y := fmt.Sprintf(`site: ferry-terminal
sources:
  - id: walkway
    scene: {seed: %d}
    start_time: 2026-06-01T08:00:00Z
detector:
%s
tracker:
  kind: %s
rules:
  - name: boarding-gate
    source: walkway
    line: [[0.15, 0.55], [0.85, 0.55]]
    classes: [person]
  - name: ticket-machines
    source: walkway
    zone: [[0.02, 0.08], [0.27, 0.08], [0.27, 0.45], [0.02, 0.45]]
    dwell: 10s
    classes: [person]
output:
  nats:
    embedded: {port: 0}
log: {level: warn}
`, seed, detector, trackerKind)
	p := filepath.Join(dir, fmt.Sprintf("site-%d.yaml", seed))
	if err := os.WriteFile(p, []byte(y), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

func lastJSON(t *testing.T, stdout string) pipeline.Summary {
	t.Helper()
	lines := strings.Split(strings.TrimSpace(stdout), "\n")
	var s pipeline.Summary
	if err := json.Unmarshal([]byte(lines[len(lines)-1]), &s); err != nil {
		t.Fatalf("last stdout line is not the summary: %v\n%s", err, stdout)
	}
	return s
}

func readTruth(t *testing.T, path string) map[string]events.Totals {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	var m map[string]events.Totals
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	return m
}

// TestTruthBoxesCountExactly: the scene's own truth boxes, replayed through the
// detections-file detector, the tracker and the rules, give the true totals
// exactly — the counting logic loses and invents nothing.
func TestTruthBoxesCountExactly(t *testing.T) {
	if testing.Short() {
		t.Skip("generated-scene replay")
	}
	for _, seed := range seeds {
		t.Run(fmt.Sprint("seed", seed), func(t *testing.T) {
			dir := t.TempDir()
			site := sceneSite(t, dir, seed, "  kind: motion")
			gt, truthPath := filepath.Join(dir, "gt.txt"), filepath.Join(dir, "truth.json")
			out, errOut, code := cli(t, "synth", "-c", site, "--truth", truthPath, "--gt", gt)
			if code != 0 {
				t.Fatalf("synth exit %d: %s%s", code, out, errOut)
			}
			truth := readTruth(t, truthPath)
			gate := truth["boarding-gate"]
			if gate.In < 20 || gate.Out < 20 {
				t.Fatalf("scene has too few crossings: %+v", gate)
			}
			site = sceneSite(t, dir, seed, "  kind: file\n  file:\n    paths: {walkway: gt.txt}")
			out, errOut, code = cli(t, "replay", "-c", site, "--summary", "json")
			if code != 0 {
				t.Fatalf("replay exit %d: %s", code, errOut)
			}
			s := lastJSON(t, out)
			for name, want := range truth {
				if got := s.Rules[name]; got != want {
					t.Errorf("%s: counted %+v, truth %+v", name, got, want)
				}
			}
			t.Logf("seed %d truth %v", seed, truth)
		})
	}
}

// TestMotionDetectorWithinFivePercent: through pixels with the motion
// detector, every count is within 5% of the truth.
func TestMotionDetectorWithinFivePercent(t *testing.T) {
	if testing.Short() {
		t.Skip("generated-scene replay")
	}
	for _, seed := range seeds {
		t.Run(fmt.Sprint("seed", seed), func(t *testing.T) {
			dir := t.TempDir()
			site := sceneSite(t, dir, seed, "  kind: motion\n  motion: {min_area: 200}")
			truthPath := filepath.Join(dir, "truth.json")
			if _, e, code := cli(t, "synth", "-c", site, "--truth", truthPath); code != 0 {
				t.Fatalf("synth: %s", e)
			}
			truth := readTruth(t, truthPath)
			out, errOut, code := cli(t, "replay", "-c", site, "--summary", "json")
			if code != 0 {
				t.Fatalf("replay exit %d: %s", code, errOut)
			}
			s := lastJSON(t, out)
			if s.FramesProcessed != s.FramesRead || s.FramesDropped != 0 {
				t.Errorf("pace max must process every frame: %+v", s)
			}
			for name, want := range truth {
				got := s.Rules[name]
				for _, m := range metrics(want) {
					g := metricOf(got, m.name)
					e := relErr(g, m.value)
					t.Logf("seed %d %s %s: counted %d truth %d error %s", seed, name, m.name, g, m.value, e)
					if math.Abs(float64(g-m.value)) > 0.05*float64(m.value) {
						t.Errorf("%s %s: counted %d, truth %d (error %s > 5%%)", name, m.name, g, m.value, e)
					}
				}
			}
		})
	}
}

func metricOf(t events.Totals, name string) int {
	for _, m := range metrics(t) {
		if m.name == name {
			return m.value
		}
	}
	return -1
}

// TestBadInput: each bad input gives a clear error naming what and where, exit
// code 2, and nothing starts (the events file is never created).
func TestBadInput(t *testing.T) {
	dir := t.TempDir()
	notVideo := filepath.Join(dir, "notes.avi")
	if err := os.WriteFile(notVideo, []byte("this is not a video\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	good := `site: ferry-terminal
sources:
  - id: walkway
    scene: {seed: 1}
rules:
  - name: gate
    source: walkway
    line: [[0.1, 0.5], [0.9, 0.5]]
output:
  jsonl: events.jsonl
`
	tests := []struct {
		name, yaml, want string
	}{
		{"malformed yaml", "site: [x\n", "site.yaml:1: malformed YAML"},
		{"unknown key", good + "colour: red\n", "site.yaml:11: colour: unknown key"},
		{"zero-length line", strings.Replace(good, "[[0.1, 0.5], [0.9, 0.5]]", "[[0.5, 0.5], [0.5, 0.5]]", 1),
			"site.yaml:8: rules[0].line: line has zero length"},
		{"self-intersecting zone", strings.Replace(good, "line: [[0.1, 0.5], [0.9, 0.5]]", "zone: [[0.1, 0.1], [0.9, 0.9], [0.9, 0.1], [0.1, 0.9]]", 1),
			"site.yaml:8: rules[0].zone: zone edges 1 and 3 cross each other"},
		{"missing video", strings.Replace(good, "scene: {seed: 1}", "file: gone.avi", 1),
			`site.yaml:4: sources[0].file: cannot open "` + filepath.Join(dir, "gone.avi") + `": no such file or directory`},
		{"class typo", strings.Replace(good, "0.5]]\n", "0.5]]\n    classes: [persn]\n", 1),
			`site.yaml:9: rules[0].classes[0]: the motion detector never reports class "persn" (did you mean "person"?)`},
		{"class the scene never shows", strings.Replace(strings.Replace(good, "rules:", "detector: {class: car}\nrules:", 1), "0.5]]\n", "0.5]]\n    classes: [car]\n", 1),
			`site.yaml:10: rules[0].classes[0]: the generated scene of source walkway shows only person, never "car"`},
		{"unreadable video", strings.Replace(good, "scene: {seed: 1}", "file: notes.avi", 1),
			`site.yaml:4: sources[0].file: source walkway: open ` + notVideo + `: not a video OpenCV can read`},
	}
	for _, tt := range tests {
		for _, cmd := range []string{"replay", "check", "run"} {
			t.Run(tt.name+"/"+cmd, func(t *testing.T) {
				site := filepath.Join(dir, "site.yaml")
				if err := os.WriteFile(site, []byte(tt.yaml), 0o644); err != nil {
					t.Fatal(err)
				}
				_, errOut, code := cli(t, cmd, "-c", site)
				if code != exitBadInput {
					t.Errorf("exit code %d, want 2; stderr: %s", code, errOut)
				}
				if !strings.Contains(errOut, tt.want) {
					t.Errorf("stderr %q does not contain %q", errOut, tt.want)
				}
				if _, err := os.Stat(filepath.Join(dir, "events.jsonl")); err == nil {
					t.Errorf("events file was created: something started")
				}
			})
		}
	}
	// check tries an external NATS server; run and replay start anyway
	// and retry it in the background (TestBrokerDownAtStart).
	t.Run("broker down/check", func(t *testing.T) {
		site := filepath.Join(dir, "broker.yaml")
		if err := os.WriteFile(site, []byte(good+"  nats: {url: \"nats://"+testsrv.ClosedAddr(t)+"\"}\n"), 0o644); err != nil {
			t.Fatal(err)
		}
		_, errOut, code := cli(t, "check", "-c", site)
		if code != exitBadInput || !strings.Contains(errOut, "broker.yaml:11: output.nats.url: cannot reach nats://127.0.0.1:") {
			t.Errorf("exit %d, stderr %q", code, errOut)
		}
	})
	t.Run("missing site file", func(t *testing.T) {
		_, errOut, code := cli(t, "replay", "-c", filepath.Join(dir, "nope.yaml"))
		if code != exitBadInput || !strings.Contains(errOut, "nope.yaml: cannot read site file: no such file or directory") {
			t.Errorf("exit %d, stderr %q", code, errOut)
		}
	})
	t.Run("bad flag", func(t *testing.T) {
		_, errOut, code := cli(t, "replay", "--pace", "warp", "-c", "x.yaml")
		if code != exitBadInput || !strings.Contains(errOut, `--pace: unknown pace "warp" (want max or realtime)`) {
			t.Errorf("exit %d, stderr %q", code, errOut)
		}
	})
}

// TestHelp: --help prints each command's usage once, to stdout; a bad flag
// is one error line on stderr pointing to --help, with nothing on stdout.
func TestHelp(t *testing.T) {
	for _, c := range commands {
		out, _, code := cli(t, c.name, "--help")
		if code != 0 || strings.Count(out, "Usage: tallyd "+c.name) != 1 {
			t.Errorf("%s --help: exit %d, output %q", c.name, code, out)
		}
		out, errOut, code := cli(t, c.name, "--no-such-flag")
		if code != exitBadInput || out != "" || errOut != "tallyd "+c.name+": usage: flag provided but not defined: -no-such-flag (see tallyd "+c.name+" --help)\n" {
			t.Errorf("%s --no-such-flag: exit %d, stdout %q, stderr %q", c.name, code, out, errOut)
		}
	}
	if out, _, code := cli(t, "--help"); code != 0 || !strings.Contains(out, "Commands:") {
		t.Errorf("--help: exit %d %q", code, out)
	}
}

// TestReplayFootage: the real pedestrian clip runs to its end with the motion
// detector.
func TestReplayFootage(t *testing.T) {
	clip := "../../../shared/footage/vtest.avi"
	if _, err := os.Stat(clip); err != nil {
		t.Skipf("shared footage absent (%v): skipping the vtest.avi replay", err)
	}
	out, errOut, code := cli(t, "replay", "-c", "../../configs/footage.yaml", "--summary", "json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errOut)
	}
	s := lastJSON(t, out)
	// 795 frames (shared/footage/README.md).
	if s.FramesRead != 795 || s.FramesProcessed != 795 {
		t.Errorf("frames read %d processed %d, want 795 each", s.FramesRead, s.FramesProcessed)
	}
	t.Logf("vtest.avi: %+v", s)
}

// TestListenSeesEveryEvent: `tallyd listen` on a separate NATS server prints
// exactly the events a replay publishes there, one JSON line each.
func TestListenSeesEveryEvent(t *testing.T) {
	srv, err := bus.StartEmbedded(bus.EmbeddedOptions{}, nil) // plain subjects: what a plain listener reads
	if err != nil {
		t.Fatal(err)
	}
	defer srv.Shutdown()
	dir := t.TempDir()
	site := filepath.Join(dir, "site.yaml")
	y := fmt.Sprintf(`site: ferry-terminal
sources:
  - id: walkway
    scene: {seed: 4, duration: 60s, crossings: 10, visitors: 3}
detector: {motion: {min_area: 200}}
rules:
  - {name: gate, source: walkway, line: [[0.15, 0.55], [0.85, 0.55]]}
output: {nats: {url: "%s"}}
log: {level: warn}
`, srv.URL())
	if err := os.WriteFile(site, []byte(y), 0o644); err != nil {
		t.Fatal(err)
	}
	// Replays are deterministic: a first run tells how many events to expect.
	out, errOut, code := cli(t, "replay", "-c", site, "--summary", "json")
	if code != 0 {
		t.Fatalf("replay: %s", errOut)
	}
	want := lastJSON(t, out).Events.Produced
	if want == 0 {
		t.Fatal("the scene gave no events")
	}
	type result struct {
		out, err string
		code     int
	}
	done := make(chan result, 1)
	subsBefore := srv.Subscriptions() // the server's own
	go func() {
		var out, errb bytes.Buffer
		code := realMain(context.Background(), []string{"listen", "--url", srv.URL(), "--site", "ferry-terminal",
			"--rule", "gate", "--timeout", "60s", "--count", fmt.Sprint(want)}, &out, &errb)
		done <- result{out.String(), errb.String(), code}
	}()
	testkit.WaitFor(t, 10*time.Second, "listen to subscribe", func() bool { return srv.Subscriptions() > subsBefore })
	out, errOut, code = cli(t, "replay", "-c", site, "--summary", "json")
	if code != 0 || lastJSON(t, out).Events.Produced != want {
		t.Fatalf("second replay: exit %d, %s", code, errOut)
	}
	r := <-done // listen exits by itself after --count events (or its 60 s timeout)
	var got []string
	for _, l := range strings.Split(strings.TrimSpace(r.out), "\n") {
		if l != "" {
			got = append(got, l)
		}
	}
	if r.code != 0 || int64(len(got)) != want {
		t.Fatalf("listen exit %d printed %d events, replay published %d; stderr: %s", r.code, len(got), want, r.err)
	}
	for _, l := range got {
		ev, err := events.Parse([]byte(l))
		if err != nil || ev.Data.Rule != "gate" {
			t.Errorf("bad line %q: %v", l, err)
		}
	}
}

// TestRunStopsOnSignal: the daemon runs until its context is cancelled (what
// SIGINT/SIGTERM do), then drains, flushes, logs its totals and exits 0.
func TestRunStopsOnSignal(t *testing.T) {
	dir := t.TempDir()
	site := sceneSite(t, dir, 1, "  kind: motion")
	y := strings.Replace(string(mustRead(t, site)), "log: {level: warn}", "  jsonl: events.jsonl\nlog: {level: info}", 1)
	if err := os.WriteFile(site, []byte(y), 0o644); err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 1500*time.Millisecond)
	defer cancel()
	var out, errb bytes.Buffer
	code := realMain(ctx, []string{"run", "-c", site, "--status-every", "500ms"}, &out, &errb)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	if !strings.Contains(errb.String(), "msg=stopped") {
		t.Errorf("no closing totals in the log:\n%s", errb.String())
	}
	if _, err := os.Stat(filepath.Join(dir, "events.jsonl")); err != nil {
		t.Errorf("events file not written: %v", err)
	}
}

func mustRead(t *testing.T, p string) []byte {
	t.Helper()
	b, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// TestTrackAndScore: the tracker alone over a detections file, then scored
// against the truth. With the scene's own truth boxes as detections the
// tracks must match the truth almost perfectly.
func TestTrackAndScore(t *testing.T) {
	dir := t.TempDir()
	site := sceneSite(t, dir, 2, "  kind: motion")
	gt := filepath.Join(dir, "gt.txt")
	if _, e, code := cli(t, "synth", "-c", site, "--gt", gt); code != 0 {
		t.Fatalf("synth: %s", e)
	}
	tracks := filepath.Join(dir, "tracks.txt")
	out, e, code := cli(t, "track", "--detections", gt, "--out", tracks, "--fps", "10")
	if code != 0 {
		t.Fatalf("track exit %d: %s", code, e)
	}
	t.Log(strings.TrimSpace(out))
	out, e, code = cli(t, "score", "--truth", gt, "--tracks", tracks, "--json")
	if code != 0 {
		t.Fatalf("score exit %d: %s", code, e)
	}
	lines := strings.Split(strings.TrimSpace(out), "\n")
	if len(lines) != 2 {
		t.Fatalf("score --json printed %d lines, want the sequence and COMBINED:\n%s", len(lines), out)
	}
	var m, c eval.Summary
	dec := func(line string, v *eval.Summary) {
		d := json.NewDecoder(strings.NewReader(line))
		d.DisallowUnknownFields()
		if err := d.Decode(v); err != nil {
			t.Fatalf("%v: %s", err, line)
		}
	}
	dec(lines[0], &m)
	dec(lines[1], &c)
	if m.Sequence != "tracks" || c.Sequence != "COMBINED" || c.MOTA != m.MOTA || c.Counts != m.Counts {
		t.Errorf("sequence %q and combined %q differ: %+v %+v", m.Sequence, c.Sequence, m, c)
	}
	// Birth takes two frames, so each identity's first frame is missed, and
	// the filtered box lags a little behind the truth; identities themselves
	// must not switch.
	if m.IDF1 < 0.95 || m.Counts.IDSwitches != 0 || m.MOTP < 0.95 {
		t.Errorf("tracking the truth itself scored idf1 %.3f, switches %v, motp %.3f", m.IDF1, m.Counts.IDSwitches, m.MOTP)
	}
}

// TestScoreReference: `tallyd score` on the TUD-Campus reference pair gives
// the values the py-motmetrics test suite asserts (motmetrics/tests/
// test_metrics.py, test_motchallenge_files; see ../shared/reference/mot/
// README.md §4a), with MOTP as mean IoU (1 - 0.277201).
func TestScoreReference(t *testing.T) {
	ref := "../../../shared/reference/mot/TUD-Campus/"
	if _, err := os.Stat(ref + "gt.txt"); err != nil {
		t.Skipf("shared MOT reference data absent (%v)", err)
	}
	out, e, code := cli(t, "score", "--truth", ref+"gt.txt", "--tracks", ref+"test.txt", "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, e)
	}
	var s eval.Summary
	if err := json.NewDecoder(strings.NewReader(out)).Decode(&s); err != nil {
		t.Fatal(err)
	}
	m := struct {
		MOTA, MOTP, IDF1, IDP, IDR     float64
		FP, FN, IDSW, Frag, MT, PT, ML int
	}{s.MOTA, s.MOTP, s.IDF1, s.IDP, s.IDR, s.Counts.FalsePositives, s.Counts.Misses, s.Counts.IDSwitches,
		s.Counts.Fragmentations, s.Trajectories.MostlyTracked, s.Trajectories.PartlyTracked, s.Trajectories.MostlyLost}
	near := func(name string, got, want float64) {
		if math.Abs(got-want) > 1e-3 {
			t.Errorf("%s = %.6f, want %.6f", name, got, want)
		}
	}
	near("mota", m.MOTA, 0.526462)
	near("motp", m.MOTP, 1-0.277201)
	near("idf1", m.IDF1, 0.557659)
	near("idp", m.IDP, 0.729730)
	near("idr", m.IDR, 0.451253)
	if m.FP != 13 || m.FN != 150 || m.IDSW != 7 || m.Frag != 7 || m.MT != 1 || m.PT != 6 || m.ML != 1 {
		t.Errorf("counts %+v, want FP 13 FN 150 IDSW 7 Frag 7 MT 1 PT 6 ML 1", m)
	}
}

// TestBadMOTFile: a malformed MOTChallenge file is bad input naming the line.
func TestBadMOTFile(t *testing.T) {
	dir := t.TempDir()
	bad := filepath.Join(dir, "det.txt")
	if err := os.WriteFile(bad, []byte("1,-1,10,20,30,40,0.9,-1,-1,-1\n2,-1,10,twenty,30,40,0.9,-1,-1,-1\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	_, e, code := cli(t, "track", "--detections", bad, "--out", filepath.Join(dir, "o.txt"))
	if code != exitBadInput || !strings.Contains(e, bad+":2:") {
		t.Errorf("exit %d, stderr %q; want exit 2 naming %s:2", code, e, bad)
	}
}

// TestCheckReportsEverySource: `check` opens every source once and reports
// each that fails, naming it, without its password, exit code 2.
func TestCheckReportsEverySource(t *testing.T) {
	dir := t.TempDir()
	if err := os.Mkdir(filepath.Join(dir, "empty"), 0o755); err != nil {
		t.Fatal(err)
	}
	site := filepath.Join(dir, "site.yaml")
	y := fmt.Sprintf(`site: s
sources:
  - {id: cam, url: "rtsp://viewer:hunter2@%s/live", open_timeout: 1s}
  - {id: stills, folder: empty}
  - {id: walkway, scene: {seed: 1}}
`, testsrv.ClosedAddr(t))
	if err := os.WriteFile(site, []byte(y), 0o644); err != nil {
		t.Fatal(err)
	}
	_, e, code := cli(t, "check", "-c", site)
	t.Log(e)
	if code != exitBadInput {
		t.Errorf("exit %d, want 2", code)
	}
	for _, want := range []string{"sources[0].url: source cam: open rtsp://viewer:xxxxx@", "connection refused",
		"sources[1].folder: source stills:"} {
		if !strings.Contains(e, want) {
			t.Errorf("check output lacks %q", want)
		}
	}
	if strings.Contains(e, "hunter2") {
		t.Error("check printed the password")
	}
}

// TestCheckONNX: `check` on the shipped people-counting config loads the
// shared model and says what it found (skipped without ../shared).
func TestCheckONNX(t *testing.T) {
	if _, err := os.Stat("../../../shared/models/yolox_nano_coco_416.onnx"); err != nil {
		t.Skipf("shared model absent (%v)", err)
	}
	if os.Getenv("TALLYD_ORT_LIB") == "" {
		lib, _ := filepath.Abs("../../.cache/onnxruntime/1.24.1/libonnxruntime.so.1")
		if _, err := os.Stat(lib); err != nil {
			t.Skipf("ONNX Runtime library absent (%v); run make setup", err)
		}
		t.Setenv("TALLYD_ORT_LIB", lib)
	}
	out, e, code := cli(t, "check", "-c", "../../configs/footage-people.yaml")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, e)
	}
	for _, want := range []string{"engine ONNX Runtime 1.24.1", "output output [1,3549,85]", "layout yolox-grid, 80 classes"} {
		if !strings.Contains(out, want) {
			t.Errorf("check output lacks %q:\n%s", want, out)
		}
	}
}

// TestReplayEndedEarly: a recording cut in half is replayed to where it
// breaks off, and the replay says so: ended_early in the summary, exit 3.
func TestReplayEndedEarly(t *testing.T) {
	dir := t.TempDir()
	scenes := filepath.Join(dir, "scene.yaml")
	if err := os.WriteFile(scenes, []byte("site: s\nsources:\n  - {id: cam, scene: {seed: 1, width: 320, height: 180, duration: 30s, crossings: 3, visitors: 1}}\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	video := filepath.Join(dir, "cam.avi")
	if _, e, code := cli(t, "synth", "-c", scenes, "--video", video); code != 0 {
		t.Fatalf("synth: %s", e)
	}
	b := mustRead(t, video)
	if err := os.WriteFile(video, b[:len(b)/2], 0o644); err != nil {
		t.Fatal(err)
	}
	site := filepath.Join(dir, "site.yaml")
	if err := os.WriteFile(site, []byte("site: s\nsources:\n  - {id: cam, file: cam.avi}\noutput: {nats: {embedded: {port: 0}}}\nlog: {level: error}\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	out, errOut, code := cli(t, "replay", "-c", site, "--summary", "json")
	s := lastJSON(t, out)
	t.Logf("exit %d, read %d; %s", code, s.FramesRead, errOut)
	if code != exitIncomplete || len(s.EndedEarly) != 1 || s.EndedEarly[0] != "cam" || s.FramesRead == 0 || s.FramesRead >= 300 {
		t.Errorf("exit %d, summary %+v: want exit 3 and cam ended early", code, s)
	}
	if !strings.Contains(errOut, "recording ended before its declared length: cam") {
		t.Errorf("stderr %q", errOut)
	}
}
