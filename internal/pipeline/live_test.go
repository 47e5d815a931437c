package pipeline

import (
	"context"
	"fmt"
	"runtime"
	"strings"
	"sync"
	"testing"
	"time"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/capture/testsrv"
	"tallyd/internal/testkit"
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

// liveServer is what the test needs of a test camera server.
type liveServer interface {
	URL() string
	FramesSent() int
	Close()
}

// TestLiveSourceSurvivesOutage: a camera on loopback (the generated walkway
// as Motion-JPEG, over RTSP or HTTP) next to a second, generated source. The
// RTSP server stops mid-run and comes back; the HTTP one stalls (accepts,
// sends nothing) and recovers. Either way the source notices (read timeout
// or refused connection), reconnects, counting goes on and matches the
// scene's truth, the other source never stalls, and no goroutine is left
// behind.
func TestLiveSourceSurvivesOutage(t *testing.T) {
	if testing.Short() {
		t.Skip("real-time stream runs")
	}
	scfg := scene.Config{Seed: 1, Duration: 60 * time.Second, Crossings: 3}.WithDefaults()
	scfg.Visitors = 0
	sc, err := scene.New(scfg)
	if err != nil {
		t.Fatal(err)
	}
	frames := testsrv.SceneFrames(sc, 90)
	cases := []outageCase{
		{"rtsp server stops and restarts",
			func(t *testing.T) liveServer {
				return testsrv.StartRTSP(t, testsrv.RTSPOptions{Frames: frames, FPS: 40, Path: "/walkway"})
			},
			func(s liveServer) { s.(*testsrv.RTSPServer).Stop() },
			func(s liveServer) { s.(*testsrv.RTSPServer).Restart() }},
		{"mjpeg server stalls",
			func(t *testing.T) liveServer {
				return testsrv.StartMJPEG(t, testsrv.MJPEGOptions{Frames: frames, FPS: 40})
			},
			func(s liveServer) { s.(*testsrv.MJPEGServer).Stall(true) },
			func(s liveServer) { s.(*testsrv.MJPEGServer).Stall(false) }},
	}
	goroutines := runtime.NumGoroutine()
	t.Run("cases", func(t *testing.T) { // returns when both parallel cases are done
		for _, tc := range cases {
			t.Run(tc.name, func(t *testing.T) {
				t.Parallel() // each case runs its own servers; both take ~15 s of stream time
				tc.run(t, sc)
			})
		}
	})
	testkit.WaitFor(t, 10*time.Second, "goroutines to settle", func() bool { return runtime.NumGoroutine() <= goroutines+2 })
}

// outageCase is one kind of camera outage.
type outageCase struct {
	name     string
	start    func(t *testing.T) liveServer
	down, up func(liveServer)
}

// run serves the scene from a camera server that goes down and comes back.
func (tc outageCase) run(t *testing.T, sc *scene.Scene) {
	srv := tc.start(t)
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

	// A reconnecting stream arrives in a burst (FFmpeg buffers about
	// a second while it opens), and newest-wins drops most of that
	// burst by design. So the outage is placed where nobody is near
	// the line for the next few seconds of the scene: what is under
	// test is that the source comes back and counting goes on, not
	// seeing through dropped frames.
	k := quietFrame(t, sc, 100, 30)
	testkit.WaitFor(t, 30*time.Second, fmt.Sprintf("the server to send frame %d", k), func() bool { return srv.FramesSent() >= k })
	tc.down(srv)
	testkit.WaitFor(t, 10*time.Second, "the source to notice the outage", func() bool { return statusOf(p, "cam").State != capture.StateUp })
	other := statusOf(p, "other").Processed
	testkit.WaitFor(t, 5*time.Second, "the other source to go on", func() bool { return statusOf(p, "other").Processed >= other+20 })
	t.Logf("outage: cam state %q (%s)", statusOf(p, "cam").State, statusOf(p, "cam").Err)
	tc.up(srv)
	testkit.WaitFor(t, 30*time.Second, "the camera to reconnect", func() bool { return statusOf(p, "cam").State == capture.StateUp })
	testkit.WaitFor(t, 40*time.Second, "the whole scene to be served", func() bool { return srv.FramesSent() >= sc.Frames()+10 })
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
	t.Logf("cam: read %d processed %d dropped(mailbox) %d; gate %+v, truth %+v", cam.Read, cam.Processed,
		cam.Dropped.Mailbox, s.Rules["gate"], truth["gate"])
	if got, want := s.Rules["gate"], truth["gate"]; got != want {
		t.Errorf("counted %+v with an outage, truth %+v", got, want)
	}
	if err := p.Close(); err != nil {
		t.Fatal(err)
	}
	srv.Close()
}

// TestUnreachableSourceDoesNotStopOthers: a camera that cannot be reached at
// start is kept (backing off, with the reason) while the other source runs.
func TestUnreachableSourceDoesNotStopOthers(t *testing.T) {
	closed := testsrv.ClosedAddr(t)
	cfg := siteFile(t, "site: s\nsources:\n  - {id: cam, url: \"rtsp://viewer:hunter2@"+closed+"/live\", open_timeout: 1s}\n"+
		"  - {id: other, scene: {seed: 2}}\noutput:\n  nats:\n    embedded: {port: 0}\nlog: {level: warn}\n")
	p, err := Build(cfg, Options{Pace: capture.PaceRealtime})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- p.Run(ctx) }()
	testkit.WaitFor(t, 10*time.Second, "the other source to run and the camera to report why it is down", func() bool {
		cam, other := statusOf(p, "cam"), statusOf(p, "other")
		return other.Processed >= 10 && cam.Err != ""
	})
	cam := statusOf(p, "cam")
	cancel()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	t.Logf("cam %q: %s", cam.State, cam.Err)
	if cam.Processed != 0 || (cam.State != capture.StateBackingOff && cam.State != capture.StateConnecting) || strings.Contains(cam.Err, "hunter2") {
		t.Errorf("unreachable camera: %+v (its reason must be shown, its password never)", cam)
	}
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
