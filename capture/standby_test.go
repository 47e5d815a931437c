package capture

import (
	"context"
	"errors"
	"testing"
	"time"

	"gocv.io/x/gocv"

	"tallyd/capture/scene"
)

// TestStandby: a switched-off source opens nothing and waits; each on-period
// opens the source once, its frames carry a connection of their own that
// Tag traces to the period's tag; switching off (or to another tag) closes
// the source and reports the end of the connection once; Off with a stale
// tag leaves a newer period on.
func TestStandby(t *testing.T) {
	sc, err := scene.New(scene.Config{Seed: 3, Width: 320, Height: 180, FPS: 10, Duration: 30 * time.Second})
	if err != nil {
		t.Fatal(err)
	}
	start := time.Now().Add(-5 * time.Second) // the scene has been "on air" for 5 s
	opens := 0
	sb := NewStandby(func() (LiveReader, error) { opens++; return NewWallScene(sc, start), nil }, nil)
	defer sb.Close()
	m := gocv.NewMat()
	defer m.Close()

	if l := sb.Link(); l.State != StateStandby {
		t.Fatalf("off: link %+v, want standby", l)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 200*time.Millisecond)
	if _, err := sb.ReadContext(ctx, &m); !errors.Is(err, context.DeadlineExceeded) || opens != 0 {
		t.Fatalf("a read while off: %v, %d opens; want to wait without opening", err, opens)
	}
	cancel()

	read := func() (time.Duration, int64) {
		t.Helper()
		pts, err := sb.ReadContext(context.Background(), &m)
		if err != nil {
			t.Fatal(err)
		}
		return pts, sb.Link().Conn
	}
	sb.On("first")
	pts, c1 := read()
	// The wall-clock scene starts at the frame due now, about 5 s in.
	if pts < 4500*time.Millisecond || pts > 6*time.Second || m.Cols() != 320 {
		t.Errorf("first frame at %v (%dx%d), want about 5 s into the scene", pts, m.Cols(), m.Rows())
	}
	pts2, c := read()
	if c != c1 || pts2-pts != 100*time.Millisecond {
		t.Errorf("next frame: conn %d (want %d), step %v (want 100ms)", c, c1, pts2-pts)
	}
	if sb.Tag(c1) != "first" {
		t.Errorf("Tag(%d) = %v", c1, sb.Tag(c1))
	}
	sb.On("second") // another period: the first one's connection ends once
	if _, err := sb.ReadContext(context.Background(), &m); !errors.Is(err, ErrDisconnected) || !errors.Is(err, ErrHoldEnded) || sb.Link().Conn != c1 {
		t.Fatalf("switching tags: %v (conn %d); want the end of connection %d", err, sb.Link().Conn, c1)
	}
	_, c2 := read()
	if c2 != c1+1 || sb.Tag(c2) != "second" || opens != 2 {
		t.Errorf("second period: conn %d tag %v opens %d; want %d, second, 2", c2, sb.Tag(c2), opens, c1+1)
	}
	sb.Off("first") // stale: the second period stays on
	if _, c := read(); c != c2 {
		t.Errorf("Off with a stale tag switched the source: conn %d", c)
	}
	sb.Off("second")
	if _, err := sb.ReadContext(context.Background(), &m); !errors.Is(err, ErrDisconnected) {
		t.Fatalf("off: %v, want the end of the connection", err)
	}
	ctx, cancel = context.WithTimeout(context.Background(), 200*time.Millisecond)
	defer cancel()
	if _, err := sb.ReadContext(ctx, &m); !errors.Is(err, context.DeadlineExceeded) {
		t.Fatalf("off again: %v, want to wait", err)
	}
	if l := sb.Link(); l.State != StateStandby || l.Conn != c2 {
		t.Errorf("off: link %+v", l)
	}
}
