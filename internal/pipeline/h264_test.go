package pipeline

import (
	"context"
	"fmt"
	"sync"
	"testing"
	"time"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/capture/testsrv"
	"tallyd/capture/testsrv/h264enc"
	"tallyd/events"
	"tallyd/internal/testkit"
)

// TestH264CameraCounts: the walkway coded as H.264, served by an RTSP camera
// on loopback with the media interleaved in the RTSP connection or over
// UDP. Mid-run the camera drops every connection and comes back at once;
// the source reconnects into the middle of a group of pictures and the
// decoder waits for the next key frame. No picture is invented: the source
// decodes no more pictures than the camera sent outside the outage. The
// count equals the scene's truth less at most the crossings during the
// measured outage (from the picture where the camera stopped to the key
// frame where decoding resumed, plus the time the background model and the
// tracker take to pick people up again); the outage is placed where no one
// is near the line, so in practice the count equals the truth.
func TestH264CameraCounts(t *testing.T) {
	if testing.Short() {
		t.Skip("real-time stream runs")
	}
	const (
		fps = 50 // stream rate: the 10 fps scene five times faster than life
		gop = 25 // a key frame every 2.5 s of scene time (half a second of stream)
	)
	scfg := scene.Config{Seed: 1, Duration: 60 * time.Second, Crossings: 3}.WithDefaults()
	scfg.Visitors = 0
	sc, err := scene.New(scfg)
	if err != nil {
		t.Fatal(err)
	}
	// One second more than the scene: the decoder holds a few pictures
	// back, and after the last the camera falls silent.
	aus, err := h264enc.Scene(sc, fps, gop, fps)
	if err != nil {
		t.Fatal(err)
	}
	// Where the camera stops: a quiet stretch long enough for the longest
	// outage, a whole group of pictures and the pick-up time.
	stopAt := quietFrame(t, sc, 100, gop+pickUp)
	t.Run("transports", func(t *testing.T) { // returns when both are done
		for _, transport := range []string{"tcp", "udp"} {
			t.Run(transport, func(t *testing.T) {
				t.Parallel()
				h264Outage(t, sc, aus, transport, fps, gop, stopAt)
			})
		}
	})
}

// pickUp is how many pictures after decoding resumes a crossing may go
// uncounted: the motion detector's background and the fresh tracker need a
// few pictures to see and confirm a person again.
const pickUp = 40

func h264Outage(t *testing.T, sc *scene.Scene, aus [][]byte, transport string, fps, gop, stopAt int) {
	srv := testsrv.StartRTSPH264(t, testsrv.H264Options{AccessUnits: aus, FPS: float64(fps), Path: "/quay"})
	cfg := siteFile(t, fmt.Sprintf(`site: s
sources:
  - {id: cam, url: %q, transport: %s, read_timeout: 1s}
detector:
  motion: {min_area: 200}
rules:
  - {name: gate, source: cam, line: [[0.15, 0.55], [0.85, 0.55]]}
output:
  nats:
    embedded: {port: 0}
log: {level: warn}
`, srv.URL(), transport))
	p, err := Build(cfg, Options{Pace: capture.PaceRealtime, Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	var (
		wg     sync.WaitGroup
		runErr error
	)
	wg.Add(1)
	go func() { defer wg.Done(); runErr = p.Run(ctx) }()

	testkit.WaitFor(t, 30*time.Second, fmt.Sprintf("the camera to send picture %d", stopAt),
		func() bool { return srv.FramesSent() >= stopAt })
	srv.Stop()
	resumeAt := srv.FramesSent() // the first picture of the next connection
	testkit.WaitFor(t, 10*time.Second, "the source to notice the outage", func() bool { return statusOf(p, "cam").State != capture.StateUp })
	srv.Restart()
	testkit.WaitFor(t, 30*time.Second, "the camera to reconnect", func() bool { return statusOf(p, "cam").State == capture.StateUp })
	testkit.WaitFor(t, 30*time.Second, "the whole scene to be sent", func() bool { return srv.FramesSent() >= sc.Frames()+fps/2 })
	time.Sleep(300 * time.Millisecond)
	sent := srv.FramesSent()
	cancel()
	wg.Wait()
	if runErr != nil {
		t.Fatal(runErr)
	}
	defer p.Close()

	// H.264 decodes from an IDR picture on (ITU-T H.264 section 8.2.1: it
	// resets every reference), so the pictures from resumeAt to the next
	// key frame cannot be shown.
	key := (resumeAt + gop - 1) / gop * gop
	cam := statusOf(p, "cam")
	decodable := int64(resumeAt + sent - key)
	t.Logf("%s: camera stopped at picture %d, decoding resumed at key frame %d; sent %d, %d decodable; "+
		"read %d, processed %d, dropped %+v", transport, resumeAt, key, sent, decodable, cam.Read, cam.Processed, cam.Dropped)
	if cam.Read > decodable || cam.Read < decodable*9/10 {
		t.Errorf("read %d pictures; %d could be decoded", cam.Read, decodable)
	}
	lines, zones := RulesFor(cfg, "cam", 640, 360)
	truth := SceneTruth(sc, lines, zones)["gate"]
	// The outage as measured, widened by a few pictures in flight when the
	// camera stopped and the pick-up time after the key frame.
	from, to := resumeAt-5, key+pickUp
	least := truthWithout(sc, lines, zones, from, to)["gate"]
	got := p.Summary().Rules["gate"]
	t.Logf("counted %+v; truth %+v, %+v without pictures %d-%d", got, truth, least, from, to)
	if got.In < least.In || got.In > truth.In || got.Out < least.Out || got.Out > truth.Out {
		t.Errorf("counted %+v over H.264/%s with an outage from picture %d to %d; truth %+v, %+v without the outage",
			got, transport, from, to, truth, least)
	}
}

// truthWithout is the scene's truth with pictures from..to-1 taken out: what
// a perfect counter that starts afresh after them would count.
func truthWithout(sc *scene.Scene, lines []events.LineRule, zones []events.ZoneRule, from, to int) map[string]events.Totals {
	part := func(a, b int) map[string]events.Totals {
		var frames []events.TruthFrame
		for i := max(a, 0); i < min(b, sc.Frames()); i++ {
			tf := events.TruthFrame{TS: time.Duration(float64(i) / sc.FPS() * float64(time.Second))}
			for _, o := range sc.Truth(i) {
				tf.Objects = append(tf.Objects, events.TruthObject{ID: o.ID, Class: o.Class, Box: o.Box})
			}
			frames = append(frames, tf)
		}
		return events.TruthTotals(lines, zones, frames)
	}
	before, after := part(0, from), part(to, sc.Frames())
	out := map[string]events.Totals{}
	for name, t := range before {
		a := after[name]
		t.In, t.Out = t.In+a.In, t.Out+a.Out
		out[name] = t
	}
	return out
}
