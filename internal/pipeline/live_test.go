package pipeline

import (
	"context"
	"fmt"
	"runtime"
	"sync"
	"testing"
	"time"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/capture/testsrv"
)

// statusOf returns one source's status.
func statusOf(p *Pipeline, id string) SourceStatus {
	for _, s := range p.Status() {
		if s.ID == id {
			return s
		}
	}
	return SourceStatus{}
}

// TestRTSPSourceSurvivesOutage: a camera served over RTSP on loopback (the
// generated walkway as Motion-JPEG) next to a second, generated source. The
// RTSP server stops mid-run and comes back: the source reconnects, counting
// goes on and matches the scene's truth, the other source never stalls, and
// no goroutine is left behind.
func TestRTSPSourceSurvivesOutage(t *testing.T) {
	if testing.Short() {
		t.Skip("real-time RTSP run")
	}
	goroutines := runtime.NumGoroutine()
	scfg := scene.Config{Seed: 1, Duration: 60 * time.Second, Crossings: 3}.WithDefaults()
	scfg.Visitors = 0
	sc, err := scene.New(scfg)
	if err != nil {
		t.Fatal(err)
	}
	srv := testsrv.StartRTSP(t, testsrv.RTSPOptions{Frames: testsrv.SceneFrames(sc, 90), FPS: 40, Path: "/walkway"})
	cfg := siteFile(t, fmt.Sprintf(`site: s
sources:
  - id: cam
    url: %s
    read_timeout: 1s
  - id: other
    scene: {seed: 2, duration: 60s, crossings: 5, visitors: 1}
detector:
  motion: {min_area: 200}
rules:
  - {name: gate, source: cam, line: [[0.15, 0.55], [0.85, 0.55]]}
output:
  nats:
    embedded: {port: 0}
log: {level: warn}
`, srv.URL()))
	p, err := Build(cfg, Options{Pace: capture.PaceRealtime, Workers: 2})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	var wg sync.WaitGroup
	wg.Add(1)
	var runErr error
	go func() { defer wg.Done(); runErr = p.Run(ctx) }()

	// A reconnecting stream arrives in a burst (FFmpeg buffers about a second
	// while it opens), and newest-wins drops most of that burst by design. So
	// the outage is placed where nobody is near the line for the next few
	// seconds of the scene: what is under test is that the source comes
	// back and counting goes on, not seeing through dropped frames.
	k := quietFrame(t, sc, 100, 30)
	waitFor(t, 30*time.Second, fmt.Sprintf("the server to send frame %d", k), func() bool { return srv.FramesSent() >= k })
	srv.Stop()
	waitFor(t, 10*time.Second, "the source to notice the outage", func() bool { return statusOf(p, "cam").State != "up" })
	other := statusOf(p, "other").Processed
	waitFor(t, 5*time.Second, "the other source to go on", func() bool { return statusOf(p, "other").Processed >= other+20 })
	t.Logf("outage: cam state %q (%s)", statusOf(p, "cam").State, statusOf(p, "cam").Err)
	srv.Restart()
	waitFor(t, 30*time.Second, "the camera to reconnect", func() bool { return statusOf(p, "cam").State == "up" })
	waitFor(t, 40*time.Second, "the whole scene to be served", func() bool { return srv.FramesSent() >= sc.Frames()+10 })
	time.Sleep(500 * time.Millisecond)
	cancel()
	wg.Wait()
	if runErr != nil {
		t.Fatal(runErr)
	}
	s := p.Summary()
	cam := statusOf(p, "cam")
	lines, zones := RulesFor(cfg, "cam", 640, 360)
	truth := SceneTruth(sc, lines, zones)
	t.Logf("cam: read %d processed %d dropped(mailbox) %d; gate %+v, truth %+v", cam.Read, cam.Processed, cam.DroppedMailbox,
		s.Rules["gate"], truth["gate"])
	if got, want := s.Rules["gate"], truth["gate"]; got != want {
		t.Errorf("counted %+v over RTSP with an outage, truth %+v", got, want)
	}
	if err := p.Close(); err != nil {
		t.Fatal(err)
	}
	srv.Close()
	waitFor(t, 10*time.Second, "goroutines to settle", func() bool { return runtime.NumGoroutine() <= goroutines+2 })
}

// quietFrame finds a frame at or after from such that for the next n frames
// no walker's feet are within 80 px of the gate line (y = 0.55 of 360).
func quietFrame(t *testing.T, sc *scene.Scene, from, n int) int {
	const line, margin = 0.55 * 360, 80
	for k := from; k+n < sc.Frames(); k++ {
		quiet := true
		for i := k; i < k+n && quiet; i++ {
			for _, o := range sc.Truth(i) {
				if o.Box.Y2 > line-margin && o.Box.Y2 < line+margin {
					quiet = false
					break
				}
			}
		}
		if quiet {
			return k
		}
	}
	t.Fatal("no quiet stretch in the scene for the outage")
	return 0
}
