package main

import (
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"syscall"
	"testing"
	"time"

	"tallyd/events"
	"tallyd/internal/pipeline"
	"tallyd/internal/testkit"
)

// httpAddr waits for the child's "http server listening" log line.
var listenRE = regexp.MustCompile(`msg="http server listening" addr=(\S+)`)

func httpAddr(t *testing.T, c *child) string {
	t.Helper()
	var addr string
	testkit.WaitFor(t, 20*time.Second, "the http server's address in the log", func() bool {
		m := listenRE.FindStringSubmatch(c.errOut.String())
		if m != nil {
			addr = m[1]
		}
		return m != nil
	})
	return "http://" + addr
}

func getJSON(url string, v any) (int, error) {
	resp, err := http.Get(url)
	if err != nil {
		return 0, err
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, json.Unmarshal(b, v)
}

const httpSite = `site: ferry-terminal
sources:
  - id: walkway
    scene: {seed: 5, duration: 10m, crossings: 100, visitors: 20}
detector:
  motion: {min_area: 200}
rules:
  - name: gate
    source: walkway
    line: [[0.15, 0.55], [0.85, 0.55]]
  - name: machines
    source: walkway
    zone: [[0.02, 0.08], [0.27, 0.08], [0.27, 0.45], [0.02, 0.45]]
output:
  jsonl: events.jsonl
http:
  listen: 127.0.0.1:0
log: {level: info}
`

// TestReloadOnSIGHUP edits the site file mid-replay and sends SIGHUP to the
// real process: the unchanged line's count equals the truth exactly, the
// new rule starts at 0 with a reset event, and a broken file changes
// nothing.
func TestReloadOnSIGHUP(t *testing.T) {
	dir := t.TempDir()
	site := filepath.Join(dir, "site.yaml")
	if err := os.WriteFile(site, []byte(httpSite), 0o644); err != nil {
		t.Fatal(err)
	}
	c := startChild(t, "replay", "-c", site, "--pace", "max", "--summary", "json")
	base := httpAddr(t, c)
	var st struct {
		Sources []map[string]any `json:"sources"`
	}
	testkit.WaitFor(t, 60*time.Second, "1000 frames processed", func() bool {
		code, err := getJSON(base+"/api/status", &st)
		return code == 200 && err == nil && len(st.Sources) == 1 && st.Sources[0]["processed"].(float64) >= 1000
	})
	// A file with an error first: refused, nothing changes.
	if err := os.WriteFile(site, []byte(strings.Replace(httpSite, "line: [[0.15, 0.55]", "line: [[1.15, 0.55]", 1)), 0o644); err != nil {
		t.Fatal(err)
	}
	_ = c.cmd.Process.Signal(syscall.SIGHUP)
	testkit.WaitFor(t, 10*time.Second, "the refused reload in the log", func() bool {
		return strings.Contains(c.errOut.String(), "site file not reloaded")
	})
	edited := strings.Replace(httpSite, "output:", "  - name: berth\n    source: walkway\n    line: [[0.15, 0.75], [0.85, 0.75]]\noutput:", 1)
	if err := os.WriteFile(site, []byte(edited), 0o644); err != nil {
		t.Fatal(err)
	}
	_ = c.cmd.Process.Signal(syscall.SIGHUP)
	code := c.wait(t, 60*time.Second)
	if code != 0 {
		t.Fatalf("exit %d\n%s", code, c.errOut.String())
	}
	var s pipeline.Summary
	lines := strings.Split(strings.TrimSpace(c.out.String()), "\n")
	if err := json.Unmarshal([]byte(lines[len(lines)-1]), &s); err != nil {
		t.Fatalf("summary: %v\n%s", err, c.out.String())
	}
	if s.Rules["gate"] != s.Truth["gate"] || s.Rules["gate"].In == 0 {
		t.Errorf("unchanged gate across the reload: counted %+v, truth %+v", s.Rules["gate"], s.Truth["gate"])
	}
	if !strings.Contains(c.errOut.String(), "kept 2, changed 0, added 1, removed 0") {
		t.Errorf("no reload report in the log:\n%s", c.errOut.String())
	}
	b, _ := os.ReadFile(filepath.Join(dir, "events.jsonl"))
	if !strings.Contains(string(b), `"type":"`+events.TypeRuleReset+`"`) || !strings.Contains(string(b), `"reason":"rule_new"`) {
		t.Error("no reset event for the new rule in the events file")
	}
	if _, ok := s.Rules["berth"]; !ok {
		t.Errorf("the new rule is not in the summary: %v", s.Rules)
	}
}

// TestReadyFollowsBroker: /readyz of a running daemon goes not ready when
// its NATS server stops, and ready again when it is back.
func TestReadyFollowsBroker(t *testing.T) {
	srv := testkit.StartNATSServer(t, true)
	dir := t.TempDir()
	site := filepath.Join(dir, "site.yaml")
	body := strings.Replace(httpSite, "output:\n  jsonl: events.jsonl\n", fmt.Sprintf("output:\n  nats:\n    url: %s\n", srv.URL()), 1)
	if err := os.WriteFile(site, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	c := startChild(t, "run", "-c", site)
	base := httpAddr(t, c)
	var r struct {
		Ready    bool     `json:"ready"`
		Problems []string `json:"problems"`
	}
	ready := func(want bool) func() bool {
		return func() bool {
			r.Problems = nil
			code, err := getJSON(base+"/readyz", &r)
			return err == nil && r.Ready == want && (code == 200) == want
		}
	}
	testkit.WaitFor(t, 20*time.Second, "ready", ready(true))
	srv.Stop()
	testkit.WaitFor(t, 20*time.Second, "not ready with the broker stopped", ready(false))
	if len(r.Problems) != 1 || !strings.Contains(r.Problems[0], "nats: not connected") {
		t.Errorf("problems %q", r.Problems)
	}
	srv.Start()
	testkit.WaitFor(t, 30*time.Second, "ready again", ready(true))
	if code, _ := c.stop(t, syscall.SIGTERM); code != 0 {
		t.Errorf("exit %d\n%s", code, c.errOut.String())
	}
}

// TestProgressBar: no bar when stderr is not a terminal (auto), a bar with
// frames and a rate when asked for; a snapshot file is written where asked.
func TestProgressBar(t *testing.T) {
	dir := t.TempDir()
	site := filepath.Join(dir, "site.yaml")
	body := strings.Replace(httpSite, "duration: 10m, crossings: 100, visitors: 20", "duration: 60s, crossings: 10, visitors: 3", 1)
	body = strings.Replace(body, "http:\n  listen: 127.0.0.1:0\n", "", 1)
	if err := os.WriteFile(site, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		mode string
		bar  bool
	}{{"auto", false}, {"off", false}, {"on", true}} {
		out, errOut, code := cli(t, "replay", "-c", site, "--progress", c.mode)
		if code != 0 {
			t.Fatalf("--progress %s: exit %d\n%s", c.mode, code, errOut)
		}
		if got := strings.Contains(errOut, "replay") && strings.Contains(errOut, "frames"); got != c.bar {
			t.Errorf("--progress %s: bar shown %v, want %v\n%q", c.mode, got, c.bar, errOut)
		}
		_ = out
	}
	png := filepath.Join(dir, "at12.png")
	out, errOut, code := cli(t, "snapshot", "-c", site, "--out", png, "--at", "12s")
	if code != 0 || !strings.Contains(out, "at 12s (frame 120)") {
		t.Fatalf("snapshot: exit %d\n%s\n%s", code, out, errOut)
	}
	if b, err := os.ReadFile(png); err != nil || len(b) < 8 || string(b[1:4]) != "PNG" {
		t.Errorf("%s is not a PNG: %v", png, err)
	}
	for _, bad := range [][]string{
		{"snapshot", "-c", site, "--out", png, "--at", "2h"},
		{"snapshot", "-c", site, "--out", filepath.Join(dir, "x.gif")},
		{"snapshot", "-c", site, "--source", "quay", "--out", png},
	} {
		if _, errOut, code := cli(t, bad...); code != exitBadInput {
			t.Errorf("%v: exit %d, want %d\n%s", bad, code, exitBadInput, errOut)
		}
	}
}
