package capture

import (
	"log/slog"
	"strings"
	"testing"
	"time"

	"tallyd/capture/scene"
)

// testScene is a short, small generated scene (sizes a multiple of 8 for RTP/JPEG).
func testScene(t testing.TB) *scene.Scene {
	t.Helper()
	sc, err := scene.New(scene.Config{Seed: 3, Width: 320, Height: 240, FPS: 25, Duration: 30 * time.Second,
		Crossings: 3, Visitors: 1}.WithDefaults())
	if err != nil {
		t.Fatal(err)
	}
	return sc
}

// waitFor polls cond until it holds or the deadline passes.
func waitFor(t testing.TB, d time.Duration, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(d)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("timed out after %v waiting for %s", d, what)
		}
		time.Sleep(10 * time.Millisecond)
	}
}

// testLog logs to the test's output only when it fails (-v shows it always).
func testLog(t testing.TB) *slog.Logger {
	return slog.New(slog.NewTextHandler(tWriter{t}, &slog.HandlerOptions{Level: slog.LevelDebug}))
}

type tWriter struct{ t testing.TB }

func (w tWriter) Write(p []byte) (int, error) {
	w.t.Log(strings.TrimRight(string(p), "\n"))
	return len(p), nil
}
