//go:build matprofile

package capture

import (
	"context"
	"errors"
	"image/color"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"gocv.io/x/gocv"

	"tallyd/capture/testsrv"

	"tallyd/internal/testkit"
)

// TestNoMatLeak runs an image folder, a cut recording and a reconnecting
// RTSP source (server stopped and restarted mid-run) through workers, opens
// a video over the frame-size limit, and checks that every OpenCV Mat they
// made was closed. Run with `go test -tags matprofile`.
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
	w := NewWorker("stills", rd, info, PaceMax, 0, testkit.Log(t))
	c := consume(w)
	if err := w.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	<-c.done

	path := writeAVI(t, "cut.avi", 64, 48, 20)
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, data[:len(data)/2], 0o644); err != nil {
		t.Fatal(err)
	}
	if _, _, err := Open(SourceSpec{ID: "big", File: path, MaxFramePixels: 1000}, nil); !errors.Is(err, ErrTooLarge) {
		t.Fatalf("open over the limit: %v", err)
	}
	rd, info, err = Open(SourceSpec{ID: "cut", File: path}, nil)
	if err != nil {
		t.Fatal(err)
	}
	w = NewWorker("cut", rd, info, PaceMax, 0, testkit.Log(t))
	c = consume(w)
	if err := w.Run(context.Background()); err != nil || !w.Stats().EndedEarly {
		t.Fatalf("cut recording: %v, %+v", err, w.Stats())
	}
	<-c.done

	srv := testsrv.StartRTSP(t, testsrv.RTSPOptions{Frames: testsrv.SceneFrames(testScene(t), 80)})
	r := NewReconnecting(SourceSpec{ID: "gate", URL: srv.URL(), ReadTimeout: 3 * time.Second},
		Backoff{Min: 50 * time.Millisecond, Max: 100 * time.Millisecond}, testkit.Log(t))
	w = NewWorker("gate", r, Info{Live: true}, PaceRealtime, 5, testkit.Log(t))
	c = consume(w)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- w.Run(ctx) }()
	testkit.WaitFor(t, 10*time.Second, "frames", func() bool { return c.frames(1) >= 5 })
	srv.Stop()
	testkit.WaitFor(t, 10*time.Second, "the loss", func() bool { return len(c.losses()) == 1 })
	srv.Restart()
	testkit.WaitFor(t, 10*time.Second, "frames after reconnecting", func() bool { return c.frames(2) >= 5 })
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
