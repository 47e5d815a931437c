package capture

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"testing"
	"time"

	"gocv.io/x/gocv"
)

// frameSource is a recorded source of n small frames.
type frameSource struct{ n, i int }

func (s *frameSource) Read(dst *gocv.Mat) (time.Duration, error) {
	if s.i == s.n {
		return 0, fmt.Errorf("read frames: %w", ErrEndOfStream)
	}
	s.i++
	_ = dst.Close()
	*dst = gocv.NewMatWithSize(8, 8, gocv.MatTypeCV8UC3)
	return time.Duration(s.i) * 40 * time.Millisecond, nil
}

func (s *frameSource) Close() error { return nil }

// TestWorkerSumsPrepareErrors: a detector that cannot prepare any frame is
// reported at once, then summed, and the rest is logged when the worker
// stops; every frame is counted as dropped.
func TestWorkerSumsPrepareErrors(t *testing.T) {
	log, logs := testLogger()
	w := NewWorker("cam", &frameSource{n: 200}, Info{Width: 8, Height: 8, FPS: 25, Frames: 200}, PaceMax, 0, log)
	n := 0
	w.Prepare = func(*Frame) error {
		n++
		return fmt.Errorf("letterbox: input %d is 8x8, want 416x416", n)
	}
	c := consume(w)
	start := time.Now()
	if err := w.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	elapsed := time.Since(start)
	<-c.done
	st := w.Stats()
	if st.DroppedPrep != 200 || st.Dropped() != 200 || st.Read != 200 || st.State != StateEnded || st.Err != "" {
		t.Errorf("stats %+v", st)
	}
	text := logs.String()
	lines := strings.Count(text, `msg="preparing frames failed; frames dropped"`)
	if maxLines := int(elapsed/time.Second) + 2; lines < 2 || lines > maxLines {
		t.Errorf("%d lines in %v, want 2..%d:\n%s", lines, elapsed, maxLines, text)
	}
	for _, want := range []string{
		`level=ERROR msg="preparing frames failed; frames dropped" source=cam count=1 total=1 err="letterbox: input 1 is 8x8, want 416x416" seq=0`,
		`total=200 err="letterbox: input 200 is 8x8, want 416x416"`,
	} {
		if !strings.Contains(text, want) {
			t.Errorf("log lacks %s:\n%s", want, text)
		}
	}
}

// TestWorkerFailedState: a read that fails ends the worker as failed with
// the error in Stats; a stopped worker has no error.
func TestWorkerFailedState(t *testing.T) {
	w := NewWorker("cam", failing{}, Info{}, PaceMax, 0, nil)
	if err := w.Run(context.Background()); err == nil {
		t.Fatal("run succeeded")
	}
	if st := w.Stats(); st.State != StateFailed || st.Err != "read cam: broken" {
		t.Errorf("stats %+v", st)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	w = NewWorker("cam", &frameSource{n: 5}, Info{}, PaceMax, 0, nil)
	if err := w.Run(ctx); err != nil {
		t.Fatal(err)
	}
	if st := w.Stats(); st.State != StateStopped || st.Err != "" {
		t.Errorf("stats %+v", st)
	}
}

type failing struct{}

func (failing) Read(*gocv.Mat) (time.Duration, error) { return 0, errors.New("read cam: broken") }
func (failing) Close() error                          { return nil }
