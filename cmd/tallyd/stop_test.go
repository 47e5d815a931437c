package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"tallyd/capture/scene"
	"tallyd/capture/testsrv"
	"tallyd/events/bus"
	"tallyd/internal/pipeline"
	"tallyd/internal/testkit"
)

// TestMain lets a test run tallyd as a real child process (its own signal
// handling, exit code and output): with TALLYD_TEST_MAIN set, the test
// binary is tallyd, its arguments taken from TALLYD_TEST_ARGS (one a line).
func TestMain(m *testing.M) {
	if os.Getenv("TALLYD_TEST_MAIN") == "1" {
		os.Args = append([]string{"tallyd"}, strings.Split(os.Getenv("TALLYD_TEST_ARGS"), "\n")...)
		main()
		return
	}
	os.Exit(m.Run())
}

// child is tallyd running in its own process.
type child struct {
	cmd         *exec.Cmd
	out, errOut testkit.Buffer
}

func startChild(t *testing.T, args ...string) *child {
	t.Helper()
	c := &child{cmd: exec.Command(os.Args[0])}
	c.cmd.Env = append(os.Environ(), "TALLYD_TEST_MAIN=1", "TALLYD_TEST_ARGS="+strings.Join(args, "\n"))
	c.cmd.Stdout, c.cmd.Stderr = &c.out, &c.errOut
	if err := c.cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = c.cmd.Process.Kill() })
	return c
}

// stop sends sig and waits for the exit; it returns the exit code and how
// long the process took to exit after the signal.
func (c *child) stop(t *testing.T, sig syscall.Signal) (int, time.Duration) {
	t.Helper()
	start := time.Now()
	if err := c.cmd.Process.Signal(sig); err != nil {
		t.Fatal(err)
	}
	done := make(chan struct{})
	go func() { _ = c.cmd.Wait(); close(done) }()
	select {
	case <-done:
	case <-time.After(20 * time.Second):
		t.Fatalf("still running 20 s after %v\nstderr:\n%s", sig, c.errOut.String())
	}
	return c.cmd.ProcessState.ExitCode(), time.Since(start)
}

// stillImages writes n small JPEG images: an image folder that ends after
// n / folder_fps seconds.
func stillImages(t *testing.T, dir string, n int) {
	t.Helper()
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	const w, h = 320, 240
	for i := range n {
		img := bytes.Repeat([]byte{byte(40 * i), 90, 160}, w*h)
		if err := os.WriteFile(filepath.Join(dir, fmt.Sprintf("f%02d.jpg", i)), testsrv.EncodeBGR(img, w, h, 80), 0o644); err != nil {
			t.Fatal(err)
		}
	}
}

// TestRunStopsInEveryState: `tallyd run` stopped by SIGTERM while its sources
// are in every state at once — a camera that never came up (backing off), a
// camera that is up, a generated scene running, an image folder that ended —
// exits 0 within a second or so, after printing every rule's totals (zero
// for the camera that never delivered a frame).
func TestRunStopsInEveryState(t *testing.T) {
	dir := t.TempDir()
	stillImages(t, filepath.Join(dir, "stills"), 3)
	sc, err := scene.New(scene.Config{Seed: 3, Width: 320, Height: 240, Duration: 30 * time.Second, Crossings: 3, Visitors: 1}.WithDefaults())
	if err != nil {
		t.Fatal(err)
	}
	cam := testsrv.StartMJPEG(t, testsrv.MJPEGOptions{Frames: testsrv.SceneFrames(sc, 80), FPS: 10})
	site := filepath.Join(dir, "site.yaml")
	y := fmt.Sprintf(`site: s
sources:
  - {id: down, url: "http://%s/video.mjpg", open_timeout: 1s}
  - {id: up, url: "%s"}
  - {id: walkway, scene: {seed: 1, width: 320, height: 180}}
  - {id: stills, folder: stills}
rules:
  - {name: down-gate, source: down, line: [[0.1, 0.5], [0.9, 0.5]]}
  - {name: down-zone, source: down, zone: [[0.1, 0.1], [0.5, 0.1], [0.5, 0.5]]}
  - {name: up-gate, source: up, line: [[0.1, 0.5], [0.9, 0.5]]}
  - {name: walkway-gate, source: walkway, line: [[0.1, 0.5], [0.9, 0.5]]}
  - {name: stills-gate, source: stills, line: [[0.1, 0.5], [0.9, 0.5]]}
output: {nats: {embedded: {port: 0}}}
`, testsrv.ClosedAddr(t), cam.URL())
	if err := os.WriteFile(site, []byte(y), 0o644); err != nil {
		t.Fatal(err)
	}
	c := startChild(t, "run", "-c", site, "--status-every", "300ms")
	testkit.WaitFor(t, 30*time.Second, "status lines with up, backing_off and ended", func() bool {
		s := c.errOut.String()
		return strings.Contains(s, "source=up state=up") && strings.Contains(s, "source=down state=backing_off") &&
			strings.Contains(s, "source=stills state=ended") && strings.Contains(s, "source=walkway state=running")
	})
	code, took := c.stop(t, syscall.SIGTERM)
	t.Logf("exit %d, %v after SIGTERM", code, took)
	if code != 0 {
		t.Fatalf("exit %d, want 0\nstderr:\n%s", code, c.errOut.String())
	}
	if took > 3*time.Second {
		t.Errorf("took %v to stop; want about a second", took)
	}
	for _, want := range []string{"down-gate          in", "down-zone          enter", "up-gate", "walkway-gate", "stills-gate"} {
		if !strings.Contains(c.out.String(), want) {
			t.Errorf("totals lack %q:\n%s", want, c.out.String())
		}
	}
	if !strings.Contains(c.errOut.String(), "msg=stopped") || strings.Contains(c.errOut.String(), "panic") {
		t.Errorf("stderr:\n%s", c.errOut.String())
	}
}

// TestReplayInterrupted: a replay stopped by SIGINT says so in its summary
// and exits 3, within about a second.
func TestReplayInterrupted(t *testing.T) {
	dir := t.TempDir()
	site := sceneSite(t, dir, 1, "  kind: motion")
	c := startChild(t, "replay", "-c", site, "--pace", "realtime", "--summary", "json")
	time.Sleep(1500 * time.Millisecond)
	code, took := c.stop(t, syscall.SIGINT)
	t.Logf("exit %d, %v after SIGINT", code, took)
	if code != exitIncomplete {
		t.Fatalf("exit %d, want %d\nstderr:\n%s", code, exitIncomplete, c.errOut.String())
	}
	if took > 3*time.Second {
		t.Errorf("took %v to stop; want about a second", took)
	}
	var s pipeline.Summary
	lines := strings.Split(strings.TrimSpace(c.out.String()), "\n")
	if err := json.Unmarshal([]byte(lines[len(lines)-1]), &s); err != nil {
		t.Fatalf("no summary: %v\n%s", err, c.out.String())
	}
	if !s.Interrupted || s.FramesRead == 0 || s.FramesRead >= 1500 {
		t.Errorf("summary %+v: want interrupted after some of the 1500 frames", s)
	}
	if !strings.Contains(c.errOut.String(), "incomplete: stopped before the end of the input") {
		t.Errorf("stderr does not say the replay is incomplete:\n%s", c.errOut.String())
	}
}

// TestSignalsStopOtherCommands: listen, track and score stop on SIGTERM
// within about a second, even on big inputs.
func TestSignalsStopOtherCommands(t *testing.T) {
	srv, err := bus.StartEmbedded(bus.EmbeddedOptions{}, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer srv.Shutdown()
	dir := t.TempDir()
	// A large detections file: 200,000 frames of 20 boxes (4 million rows).
	big := filepath.Join(dir, "big.txt")
	f, err := os.Create(big)
	if err != nil {
		t.Fatal(err)
	}
	var b bytes.Buffer
	for fr := 1; fr <= 200_000; fr++ {
		for k := range 20 {
			fmt.Fprintf(&b, "%d,-1,%d,%d,20,40,0.9,-1,-1,-1\n", fr, 10+30*k, 100+fr%50)
		}
		if b.Len() > 1<<20 {
			_, _ = f.Write(b.Bytes())
			b.Reset()
		}
	}
	_, _ = f.Write(b.Bytes())
	f.Close()
	tests := []struct {
		name string
		args []string
	}{
		{"listen", []string{"listen", "--url", srv.URL()}},
		{"track", []string{"track", "--detections", big, "--out", filepath.Join(dir, "tracks.txt")}},
		{"score", []string{"score", "--truth", big, "--tracks", big}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			c := startChild(t, tt.args...)
			time.Sleep(700 * time.Millisecond)
			code, took := c.stop(t, syscall.SIGTERM)
			t.Logf("exit %d, %v after SIGTERM; stderr %q", code, took, c.errOut.String())
			if took > 3*time.Second {
				t.Errorf("took %v to stop; want about a second", took)
			}
			if code == 0 && tt.name != "listen" {
				t.Errorf("exit 0 for an interrupted %s", tt.name)
			}
		})
	}
}
