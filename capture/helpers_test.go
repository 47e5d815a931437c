package capture

import (
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
