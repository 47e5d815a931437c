package capture

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"strings"
	"sync"
	"testing"
	"time"

	"gocv.io/x/gocv"

	"tallyd/internal/testkit"
)

func TestBackoffSteps(t *testing.T) {
	b := Backoff{}.withDefaults()
	var got []time.Duration
	d := time.Duration(0)
	for range 9 {
		d = b.next(d)
		got = append(got, d)
	}
	want := "[500ms 1s 2s 4s 8s 16s 30s 30s 30s]"
	if fmt.Sprint(got) != want {
		t.Errorf("steps %v, want %s", got, want)
	}
	for range 1000 {
		if j := b.jitter(time.Second); j < 800*time.Millisecond || j > 1200*time.Millisecond {
			t.Fatalf("jitter of 1s gave %v, want within ±20%%", j)
		}
	}
}

// script is a fake source: each open takes the next outcome.
type script struct {
	mu     sync.Mutex
	opens  int
	plan   []error // nil: success
	frames int     // frames each successful connection delivers before it breaks
}

func (s *script) open(SourceSpec, *slog.Logger) (Reader, Info, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	i := s.opens
	s.opens++
	if i < len(s.plan) && s.plan[i] != nil {
		return nil, Info{}, &SourceError{Source: "cam", Op: "open", Target: "rtsp://cam", Err: s.plan[i]}
	}
	return &fakeConn{left: s.frames}, Info{Width: 8, Height: 8, Live: true}, nil
}

type fakeConn struct {
	left   int
	closed bool
}

func (f *fakeConn) Read(*gocv.Mat) (time.Duration, error) {
	if f.left == 0 {
		return 0, fmt.Errorf("read rtsp://cam: stream ended or broke off: %w", ErrDisconnected)
	}
	f.left--
	return 0, nil
}

func (f *fakeConn) Close() error { f.closed = true; return nil }

func newScripted(s *script, bo Backoff, log *slog.Logger) *Reconnecting {
	r := NewReconnecting(SourceSpec{ID: "cam", URL: "rtsp://cam"}, bo, log)
	r.open = s.open
	return r
}

var errRefused = reasonf(ErrUnreachable, "cannot connect to cam:554: connection refused")

func TestReconnectingStates(t *testing.T) {
	s := &script{plan: []error{errRefused, errRefused, errRefused}, frames: 2}
	r := newScripted(s, Backoff{Min: time.Millisecond, Max: 4 * time.Millisecond}, nil)
	defer r.Close()
	if l := r.Link(); l.State != StateConnecting || l.Conn != 0 {
		t.Fatalf("initial link %+v", l)
	}
	if _, err := r.Connect(); !errors.Is(err, ErrUnreachable) {
		t.Fatalf("connect: %v", err)
	}
	l := r.Link()
	if l.State != StateBackingOff || l.Failures != 1 || l.NextTry.IsZero() ||
		l.Reason != "source cam: open rtsp://cam: cannot connect to cam:554: connection refused" {
		t.Fatalf("after a failed connect: %+v", l)
	}
	m := gocv.NewMat()
	defer m.Close()
	ctx := context.Background()
	pts1, err := r.ReadContext(ctx, &m)
	if err != nil {
		t.Fatal(err)
	}
	if l := r.Link(); l.State != StateUp || l.Conn != 1 || l.Failures != 3 || l.Reason != "" {
		t.Fatalf("after reconnecting: %+v", l)
	}
	if r.step != 4*time.Millisecond {
		t.Errorf("step after 3 failures = %v, want the 4ms cap", r.step)
	}
	pts2, _ := r.ReadContext(ctx, &m)
	if pts2 <= pts1 {
		t.Errorf("timestamps not increasing: %v then %v", pts1, pts2)
	}
	_, err = r.ReadContext(ctx, &m)
	if !errors.Is(err, ErrDisconnected) {
		t.Fatalf("third read: %v, want the loss", err)
	}
	if l := r.Link(); l.State != StateBackingOff || l.Conn != 1 || !strings.Contains(l.Reason, "broke off") {
		t.Fatalf("after the loss: %+v", l)
	}
	pts3, err := r.ReadContext(ctx, &m)
	if err != nil || r.Link().Conn != 2 || pts3 <= pts2 {
		t.Fatalf("after the loss: err %v, link %+v, pts %v after %v", err, r.Link(), pts3, pts2)
	}
}

func TestReconnectingResetAfterGoodRun(t *testing.T) {
	s := &script{frames: 1}
	r := newScripted(s, Backoff{Min: time.Millisecond, Max: time.Second, ResetAfter: 30 * time.Millisecond}, nil)
	defer r.Close()
	m := gocv.NewMat()
	defer m.Close()
	ctx := context.Background()
	// Connections that break at once: the step doubles.
	for range 4 {
		_, _ = r.ReadContext(ctx, &m) // frame
		_, _ = r.ReadContext(ctx, &m) // loss
	}
	if r.step != 8*time.Millisecond {
		t.Fatalf("step after 4 quick losses = %v, want 8ms", r.step)
	}
	// A connection that stayed up longer than ResetAfter starts over.
	_, _ = r.ReadContext(ctx, &m)
	time.Sleep(40 * time.Millisecond)
	_, _ = r.ReadContext(ctx, &m)
	if r.step != time.Millisecond {
		t.Fatalf("step after a good run = %v, want 1ms", r.step)
	}
}

func TestReconnectingGivesUpOnUnsupported(t *testing.T) {
	bad := reasonf(ErrUnsupported, `unsupported URL scheme "ftp"`)
	s := &script{plan: []error{bad}}
	log, logs := testLogger()
	r := newScripted(s, Backoff{}, log)
	w := NewWorker("cam", r, Info{Live: true}, PaceRealtime, 0, log)
	err := w.Run(context.Background())
	if !errors.Is(err, ErrUnsupported) {
		t.Fatalf("run: %v", err)
	}
	st := w.Stats()
	if st.State != StateFailed || st.Link.State != StateFailed || !strings.Contains(st.Err, "unsupported URL scheme") {
		t.Errorf("stats %+v", st)
	}
	if s.opens != 1 {
		t.Errorf("%d opens, want 1", s.opens)
	}
	if !strings.Contains(logs.String(), `level=ERROR msg="source failed"`) {
		t.Errorf("log:\n%s", logs)
	}
}

func TestReconnectingStopsWaiting(t *testing.T) {
	long := Backoff{Min: time.Hour, Max: time.Hour}
	t.Run("context", func(t *testing.T) {
		r := newScripted(&script{plan: []error{errRefused}}, long, nil)
		defer r.Close()
		_, _ = r.Connect()
		ctx, cancel := context.WithTimeout(context.Background(), 50*time.Millisecond)
		defer cancel()
		m := gocv.NewMat()
		defer m.Close()
		start := time.Now()
		if _, err := r.ReadContext(ctx, &m); !errors.Is(err, context.DeadlineExceeded) {
			t.Fatalf("read: %v", err)
		}
		if d := time.Since(start); d > time.Second {
			t.Errorf("took %v", d)
		}
	})
	t.Run("close", func(t *testing.T) {
		r := newScripted(&script{plan: []error{errRefused}}, long, nil)
		_, _ = r.Connect()
		done := make(chan error, 1)
		go func() {
			m := gocv.NewMat()
			defer m.Close()
			_, err := r.Read(&m)
			done <- err
		}()
		time.Sleep(20 * time.Millisecond)
		_ = r.Close()
		_ = r.Close()
		select {
		case err := <-done:
			if err == nil {
				t.Fatal("read after close succeeded")
			}
		case <-time.After(2 * time.Second):
			t.Fatal("Close did not end the back-off wait")
		}
	})
	t.Run("worker", func(t *testing.T) {
		r := newScripted(&script{plan: []error{errRefused}}, long, nil)
		w := NewWorker("cam", r, Info{Live: true}, PaceRealtime, 0, slog.New(slog.DiscardHandler))
		ctx, cancel := context.WithCancel(context.Background())
		done := make(chan error, 1)
		go func() { done <- w.Run(ctx) }()
		testkit.WaitFor(t, 2*time.Second, "backing off", func() bool { return w.Stats().State == StateBackingOff })
		cancel()
		select {
		case err := <-done:
			if err != nil || w.Stats().State != StateStopped {
				t.Fatalf("run: %v, stats %+v", err, w.Stats())
			}
		case <-time.After(2 * time.Second):
			t.Fatal("worker did not stop while backing off")
		}
	})
}

// TestReconnectingSumsFailures: many failed attempts in a short time are
// logged at most once a second, with their count and the last error.
func TestReconnectingSumsFailures(t *testing.T) {
	plan := make([]error, 100)
	for i := range plan {
		plan[i] = errRefused
	}
	s := &script{plan: plan, frames: 1}
	log, logs := testLogger()
	r := newScripted(s, Backoff{Min: time.Millisecond, Max: 2 * time.Millisecond}, log)
	defer r.Close()
	m := gocv.NewMat()
	defer m.Close()
	start := time.Now()
	if _, err := r.ReadContext(context.Background(), &m); err != nil {
		t.Fatal(err)
	}
	elapsed := time.Since(start)
	lines := strings.Count(logs.String(), `msg="source unavailable; retrying"`)
	if maxLines := int(elapsed/time.Second) + 2; lines > maxLines || lines < 1 {
		t.Errorf("%d retry lines in %v, want 1..%d:\n%s", lines, elapsed, maxLines, logs)
	}
	if !strings.Contains(logs.String(), "failed_attempts=100") {
		t.Errorf("up line does not sum the failures:\n%s", logs)
	}
}
