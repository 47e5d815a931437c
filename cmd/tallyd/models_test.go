package main

import (
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// modelsSite is a short generated scene measured with the committed
// rows-obj fixture model (fixed boxes whatever the frame: scripts/
// onnx_fixtures.py) on OpenCV DNN, so the test needs no shared data.
func modelsSite(t *testing.T, dir string) string {
	t.Helper()
	fix, err := filepath.Abs("../../testdata/onnx")
	if err != nil {
		t.Fatal(err)
	}
	y := `site: ferry-terminal
sources:
  - id: walkway
    scene: {seed: 3, duration: 30s, crossings: 1, visitors: 0}
detector:
  kind: onnx
  onnx:
    model: ` + fix + `/rows-obj.onnx
    names: ` + fix + `/fixture.names
    engine: opencv
    input: {width: 64, height: 48}
    score_threshold: 0.1
rules:
  - name: gate
    source: walkway
    line: [[0.1, 0.5], [0.9, 0.5]]
`
	p := filepath.Join(dir, "site.yaml")
	if err := os.WriteFile(p, []byte(y), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

func writeFile(t *testing.T, path, s string) string {
	t.Helper()
	if err := os.WriteFile(path, []byte(s), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

func TestModelsScene(t *testing.T) {
	dir := t.TempDir()
	site := modelsSite(t, dir)
	fix, err := filepath.Abs("../../testdata/onnx")
	if err != nil {
		t.Fatal(err)
	}
	// A Darknet model (random weights) runs through the same comparison.
	cands := writeFile(t, filepath.Join(dir, "cands.yaml"), `candidates:
  - name: fixture-low
    onnx: {score_threshold: 0.1}
  - name: fixture-high
    onnx: {score_threshold: 0.5}
  - name: missing-model
    onnx: {model: nowhere.onnx}
  - name: darknet-tiny
    onnx: {model: `+fix+`/darknet-tiny.cfg, channels: rgb, scale: 1, input: {width: 0, height: 0}}
`)
	plot := filepath.Join(dir, "ap.png")
	out, errOut, code := cli(t, "models", "-c", site, "--candidates", cands, "--plot", plot, "--frames", "60")
	if code != 0 {
		t.Fatalf("exit %d\n%s\n%s", code, out, errOut)
	}
	for _, want := range []string{
		"fixture-low            OpenCV DNN 4.6.0       64x48",
		"fixture-high           OpenCV DNN 4.6.0       64x48",
		"darknet-tiny           OpenCV DNN 4.6.0       64x64",
		"missing-model          not run: " + cands + ":6: candidates[missing-model].onnx.model: cannot open \"" + filepath.Join(dir, "nowhere.onnx"),
		"\n\n",
		"gate: in ",
		"target: 1 camera(s) x 10 frames/s = 10 frames/s on ",
		"recommended: fixture-",
		"plot written to " + plot,
	} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	if st, err := os.Stat(plot); err != nil || st.Size() < 1000 {
		t.Errorf("plot: %v", err)
	}
}

// TestModelsRecordedTruth: a recorded video with MOTChallenge truth boxes
// and true counts (both written by tallyd synth from the same scene).
func TestModelsRecordedTruth(t *testing.T) {
	dir := t.TempDir()
	site := modelsSite(t, dir)
	video, gt, counts := filepath.Join(dir, "v.avi"), filepath.Join(dir, "gt.txt"), filepath.Join(dir, "counts.json")
	if out, errOut, code := cli(t, "synth", "-c", site, "--video", video, "--gt", gt, "--truth", counts); code != 0 {
		t.Fatalf("synth: exit %d\n%s\n%s", code, out, errOut)
	}
	data, err := os.ReadFile(site)
	if err != nil {
		t.Fatal(err)
	}
	fileSite := writeFile(t, filepath.Join(dir, "file.yaml"),
		strings.Replace(string(data), "scene: {seed: 3, duration: 30s, crossings: 1, visitors: 0}", "file: v.avi\n    fps: 5", 1))
	cands := writeFile(t, filepath.Join(dir, "cands.yaml"), "candidates:\n  - name: fixture\n    onnx: {}\n")
	out, errOut, code := cli(t, "models", "-c", fileSite, "--candidates", cands, "--truth", gt, "--counts", counts, "--cameras", "4")
	if code != 0 {
		t.Fatalf("exit %d\n%s\n%s", code, out, errOut)
	}
	for _, want := range []string{"fixture ", "gate: in ", "/", "target: 4 camera(s) x 5 frames/s = 20 frames/s"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, "n/a") || strings.Contains(out, "(no truth)") {
		t.Errorf("AP or counts missing despite truth:\n%s", out)
	}
}

func TestModelsBadInput(t *testing.T) {
	dir := t.TempDir()
	site := modelsSite(t, dir)
	c := func(name, s string) string { return writeFile(t, filepath.Join(dir, name), s) }
	tests := []struct {
		name string
		args []string
		want string
	}{
		{"no candidates", []string{"-c", site}, "tallyd models: usage: --candidates FILE is required\n"},
		{"missing file", []string{"-c", site, "--candidates", filepath.Join(dir, "none.yaml")},
			`tallyd models: --candidates: cannot open "` + filepath.Join(dir, "none.yaml") + `": no such file or directory` + "\n"},
		{"empty list", []string{"-c", site, "--candidates", c("empty.yaml", "candidates: []\n")},
			"tallyd models: " + filepath.Join(dir, "empty.yaml") + ": candidates: want 1 to 20 candidates (found 0)\n"},
		{"unknown candidate key", []string{"-c", site, "--candidates", c("k.yaml", "candidates:\n  - name: a\n    onxx: {}\n")},
			"tallyd models: " + filepath.Join(dir, "k.yaml") + ":3: candidates[0].onxx: unknown key (known keys: name, onnx)\n"},
		{"unknown onnx key", []string{"-c", site, "--candidates", c("o.yaml", "candidates:\n  - name: a\n    onnx: {modle: x.onnx}\n")},
			"tallyd models: " + filepath.Join(dir, "o.yaml") + ":3: candidates[0].onnx: yaml: unmarshal errors:\n  line 1: field modle not found in type config.ONNX\n"},
		{"duplicate name", []string{"-c", site, "--candidates", c("d.yaml", "candidates:\n  - name: a\n    onnx: {}\n  - name: a\n    onnx: {}\n")},
			"tallyd models: " + filepath.Join(dir, "d.yaml") + ":4: candidates[1].name: duplicate name \"a\"\n"},
		{"no name", []string{"-c", site, "--candidates", c("n.yaml", "candidates:\n  - onnx: {}\n")},
			"tallyd models: " + filepath.Join(dir, "n.yaml") + ":2: candidates[0].name: want a name of 1 to 64 characters\n"},
		{"unknown source", []string{"-c", site, "--candidates", c("ok.yaml", "candidates:\n  - name: a\n    onnx: {}\n"), "--source", "quay"},
			`tallyd models: usage: --source: no source "quay" in ` + site + "\n"},
		{"truth on a scene", []string{"-c", site, "--candidates", filepath.Join(dir, "ok.yaml"), "--truth", "gt.txt"},
			"tallyd models: usage: --truth: source walkway is a generated scene, which brings its own truth\n"},
		{"negative frames", []string{"-c", site, "--candidates", filepath.Join(dir, "ok.yaml"), "--frames", "-1"},
			"tallyd models: usage: --frames, --cameras and --fps must not be negative\n"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, errOut, code := cli(t, append([]string{"models"}, tt.args...)...)
			if code != exitBadInput || errOut != tt.want {
				t.Fatalf("exit %d, stderr\n%q\nwant exit 2 and\n%q", code, errOut, tt.want)
			}
		})
	}
}

func TestRecommend(t *testing.T) {
	nan := math.NaN()
	rs := []candidateResult{
		{Name: "big", E2EFPS: 20, E2ECPUMs: 90, AP50: 0.8, AP5095: 0.5},
		{Name: "mid", E2EFPS: 40, E2ECPUMs: 40, AP50: 0.7, AP5095: 0.4},
		{Name: "small", E2EFPS: 70, E2ECPUMs: 15, AP50: 0.5, AP5095: 0.3},
		{Name: "broken", Err: "cannot open"},
	}
	tests := []struct {
		cams  int
		rate  float64
		want  string
		noAP  bool
		cores int
	}{
		// 2 cores, at most 80% busy: 1600 CPU ms per second to spend.
		// 2 cameras x 5 fps = 10 frames/s: big needs 900 ms/s: fits, most accurate.
		{2, 5, "recommended: big (highest AP50:95", false, 2},
		// 8 x 5 = 40 frames/s: big 3600, mid 1600 (just fits): mid.
		{8, 5, "recommended: mid (highest AP50:95", false, 2},
		// 8 x 6 = 48 frames/s: big 4320, mid 1920, small 720: only small.
		{8, 6, "recommended: small (highest AP50:95", false, 2},
		// 16 x 10 = 160 frames/s: none; small holds 1600/15 = 107 frames/s = 10 cameras.
		{16, 10, "recommended: none fits; the cheapest, small (15.0 CPU ms/frame), holds about 107 frames/s: 10 camera(s) at 10 frames/s", false, 2},
		// Without truth: the most headroom.
		{2, 5, "recommended: small (no truth: accuracy unknown", true, 2},
	}
	for _, tt := range tests {
		in := append([]candidateResult(nil), rs...)
		if tt.noAP {
			for i := range in {
				in[i].AP50, in[i].AP5095, in[i].CountErrSum = nan, nan, nan
			}
		} else {
			for i := range in {
				in[i].CountErrSum = nan
			}
		}
		got := recommend(in, tt.cams, tt.rate, tt.cores)
		if !strings.Contains(got, tt.want) {
			t.Errorf("%d x %g: got\n%s\nwant %q", tt.cams, tt.rate, got, tt.want)
		}
	}
}
