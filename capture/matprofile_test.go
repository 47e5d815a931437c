//go:build matprofile

package capture

import (
	"context"
	"image/color"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"gocv.io/x/gocv"

	"tallyd/capture/testsrv"
)

// TestNoMatLeak runs an image folder and a reconnecting RTSP source (server
// stopped and restarted mid-run) through workers and checks that every
// OpenCV Mat they made was closed. Run with `go test -tags matprofile`.
func TestNoMatLeak(t *testing.T) {
	before := gocv.MatProfile.Count()

	dir := t.TempDir()
	for i, name := range []string{"a1.png", "a2.png", "a3.png"} {
		writePNG(t, filepath.Join(dir, name), 32, 24, color.RGBA{uint8(i), 0, 0, 255})
	}
	writePNG(t, filepath.Join(dir, "a4.png"), 40, 24, color.RGBA{9, 0, 0, 255}) // skipped: other size
	rd, info, err := Open(SourceSpec{ID: "stills", Folder: dir}, nil)
	if err != nil {
		t.Fatal(err)
	}
	w := NewWorker("stills", rd, info, PaceMax, 0, testLog(t))
	c := consume(w)
	if err := w.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	<-c.done

	srv := testsrv.StartRTSP(t, testsrv.RTSPOptions{Frames: testsrv.SceneFrames(testScene(t), 80)})
	r := NewReconnecting(SourceSpec{ID: "gate", URL: srv.URL(), ReadTimeout: 3 * time.Second},
		Backoff{Min: 50 * time.Millisecond, Max: 100 * time.Millisecond}, testLog(t))
	w = NewWorker("gate", r, Info{Live: true}, PaceRealtime, 5, testLog(t))
	c = consume(w)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- w.Run(ctx) }()
	waitFor(t, 10*time.Second, "frames", func() bool { return c.frames(1) >= 5 })
	srv.Stop()
	waitFor(t, 10*time.Second, "the loss", func() bool { return len(c.losses()) == 1 })
	srv.Restart()
	waitFor(t, 10*time.Second, "frames after reconnecting", func() bool { return c.frames(2) >= 5 })
	cancel()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	<-c.done
	w.Out.Discard()

	if n := gocv.MatProfile.Count() - before; n != 0 {
		var b strings.Builder
		_ = gocv.MatProfile.WriteTo(&b, 1)
		t.Fatalf("%d Mats left open:\n%s", n, b.String())
	}
}
