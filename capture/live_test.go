package capture

import (
	"context"
	"errors"
	"log/slog"
	"os"
	"runtime"
	"strings"
	"sync"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"tallyd/capture/testsrv"

	"tallyd/internal/testkit"
)

func testLogger() (*slog.Logger, *testkit.Buffer) {
	var buf testkit.Buffer
	return slog.New(slog.NewTextHandler(&buf, &slog.HandlerOptions{Level: slog.LevelDebug})), &buf
}

// captureStderr sends file descriptor 2 (where FFmpeg and OpenCV print) to a
// file until the test ends; the returned func reads what was printed.
func captureStderr(t *testing.T) func() string {
	t.Helper()
	f, err := os.CreateTemp(t.TempDir(), "stderr")
	if err != nil {
		t.Fatal(err)
	}
	saved, err := syscall.Dup(2)
	if err != nil {
		t.Fatal(err)
	}
	if err := syscall.Dup3(int(f.Fd()), 2, 0); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		_ = syscall.Dup3(saved, 2, 0)
		_ = syscall.Close(saved)
		_ = f.Close()
	})
	return func() string {
		b, _ := os.ReadFile(f.Name())
		return string(b)
	}
}

// consumer takes a worker's frames and keeps what the test checks.
type consumer struct {
	mu     sync.Mutex
	byConn map[int64]int
	seqs   []int64
	lost   []Lost
	done   chan struct{}
}

func consume(w *Worker) *consumer {
	c := &consumer{byConn: map[int64]int{}, done: make(chan struct{})}
	w.OnLost = func(l Lost) {
		c.mu.Lock()
		defer c.mu.Unlock()
		c.lost = append(c.lost, l)
	}
	go func() {
		defer close(c.done)
		for {
			f, err := w.Out.Get(context.Background())
			if err != nil {
				return
			}
			c.mu.Lock()
			c.byConn[f.Conn]++
			c.seqs = append(c.seqs, f.Seq)
			c.mu.Unlock()
			f.Close()
		}
	}()
	return c
}

func (c *consumer) frames(conn int64) int {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.byConn[conn]
}

func (c *consumer) losses() []Lost {
	c.mu.Lock()
	defer c.mu.Unlock()
	return append([]Lost(nil), c.lost...)
}

// TestRTSPReconnect reads a generated scene from an RTSP server on loopback,
// stops the server mid-run and restarts it on the same port: the source is
// reported lost once, reconnects, and frames continue on connection 2. No
// goroutine outlives the test and the password appears nowhere.
func TestRTSPReconnect(t *testing.T) {
	for _, transport := range []string{"tcp", "udp"} {
		t.Run(transport, func(t *testing.T) {
			stderr := captureStderr(t)
			before := runtime.NumGoroutine()
			sc := testScene(t)
			srv := testsrv.StartRTSP(t, testsrv.RTSPOptions{Frames: testsrv.SceneFrames(sc, 80), FPS: 25,
				Username: "counter", Password: secret})
			log, logs := testLogger()
			spec := SourceSpec{ID: "gate", URL: srv.URL(), Username: "counter", Password: secret, Transport: transport,
				OpenTimeout: 5 * time.Second, ReadTimeout: 3 * time.Second} // generous: CI runs packages side by side
			r := NewReconnecting(spec, Backoff{Min: 50 * time.Millisecond, Max: 100 * time.Millisecond}, log)
			info, err := r.Connect()
			if err != nil {
				t.Fatal(err)
			}
			if info.Width != 320 || info.Height != 240 || !info.Live {
				t.Fatalf("info = %+v", info)
			}
			if got := srv.LastTransport(); got != transport {
				t.Fatalf("server saw transport %q, want %q", got, transport)
			}
			w := NewWorker("gate", r, info, PaceRealtime, 0, log)
			c := consume(w)
			ctx, cancel := context.WithCancel(context.Background())
			defer cancel()
			runErr := make(chan error, 1)
			go func() { runErr <- w.Run(ctx) }()

			testkit.WaitFor(t, 10*time.Second, "frames on connection 1", func() bool { return c.frames(1) >= 10 })
			if st := w.Stats(); st.State != StateUp || st.Link.Conn != 1 {
				t.Fatalf("stats while up: %+v", st)
			}
			srv.Stop()
			testkit.WaitFor(t, 10*time.Second, "the loss to be reported", func() bool { return len(c.losses()) == 1 })
			testkit.WaitFor(t, 10*time.Second, "two failed reconnect attempts", func() bool { return w.Stats().Link.Failures >= 3 })
			st := w.Stats()
			if st.State != StateBackingOff && st.State != StateConnecting {
				t.Errorf("state while the server is down = %q", st.State)
			}
			if !strings.Contains(st.Err, "cannot connect to "+srv.Addr()+": connection refused") {
				t.Errorf("reason while down = %q", st.Err)
			}
			l := c.losses()[0]
			if l.Conn != 1 || l.Source != "gate" || !errors.Is(l.Err, ErrDisconnected) || l.LastSeq < 9 {
				t.Errorf("lost = %+v", l)
			}
			srv.Restart()
			testkit.WaitFor(t, 15*time.Second, "frames on connection 2", func() bool { return c.frames(2) >= 10 })
			if st := w.Stats(); st.State != StateUp || st.Link.Conn != 2 || st.Err != "" {
				t.Errorf("stats after reconnect: %+v", st)
			}
			if n := len(c.losses()); n != 1 {
				t.Errorf("%d losses reported, want 1", n)
			}
			cancel()
			select {
			case err := <-runErr:
				if err != nil {
					t.Fatal(err)
				}
			case <-time.After(5 * time.Second):
				t.Fatal("worker did not stop")
			}
			<-c.done
			if st := w.Stats(); st.State != StateStopped {
				t.Errorf("final state %q", st.State)
			}
			c.mu.Lock()
			for i := 1; i < len(c.seqs); i++ {
				if c.seqs[i] <= c.seqs[i-1] {
					t.Errorf("frame order: seq %d after %d", c.seqs[i], c.seqs[i-1])
					break
				}
			}
			c.mu.Unlock()
			srv.Close()
			testkit.WaitFor(t, 5*time.Second, "goroutines to settle", func() bool { return runtime.NumGoroutine() <= before })

			text := logs.String()
			for _, want := range []string{`msg="source up"`, `msg="source lost"`, `msg="source unavailable; retrying"`, "conn=2"} {
				if !strings.Contains(text, want) {
					t.Errorf("log lacks %s:\n%s", want, text)
				}
			}
			for what, s := range map[string]string{"log": text, "stderr": stderr(), "state": st.Err, "lost": l.Err.Error()} {
				if strings.Contains(s, secret) {
					t.Errorf("password in %s:\n%s", what, s)
				}
			}
			if t.Failed() {
				t.Logf("log:\n%s\nstderr:\n%s", text, stderr())
			}
		})
	}
}

// TestMJPEGStall reads an HTTP Motion-JPEG server, then the server stalls:
// connections stay open but nothing comes. The read timeout ends the
// connection, reconnect attempts fail visibly, and frames resume after.
func TestMJPEGStall(t *testing.T) {
	before := runtime.NumGoroutine()
	sc := testScene(t)
	srv := testsrv.StartMJPEG(t, testsrv.MJPEGOptions{Frames: testsrv.SceneFrames(sc, 80), FPS: 25})
	log, logs := testLogger()
	spec := SourceSpec{ID: "door", URL: srv.URL(), OpenTimeout: 1500 * time.Millisecond, ReadTimeout: time.Second}
	r := NewReconnecting(spec, Backoff{Min: 50 * time.Millisecond, Max: 100 * time.Millisecond}, log)
	w := NewWorker("door", r, Info{Live: true}, PaceRealtime, 0, log)
	c := consume(w)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	runErr := make(chan error, 1)
	go func() { runErr <- w.Run(ctx) }()

	testkit.WaitFor(t, 10*time.Second, "frames", func() bool { return c.frames(1) >= 10 })
	stalled := time.Now()
	srv.Stall(true)
	testkit.WaitFor(t, 8*time.Second, "the stall to be noticed", func() bool { return len(c.losses()) == 1 })
	if took := time.Since(stalled); took > 4*time.Second {
		t.Errorf("stall noticed after %v with a 1s read timeout", took)
	}
	if l := c.losses()[0]; !strings.Contains(l.Err.Error(), "no frame within read_timeout 1s (stalled)") {
		t.Errorf("lost: %v", l.Err)
	}
	testkit.WaitFor(t, 20*time.Second, "a failed reconnect attempt", func() bool { return w.Stats().Link.Failures >= 2 })
	st := w.Stats()
	if st.State != StateBackingOff && st.State != StateConnecting {
		t.Errorf("state while stalled = %q", st.State)
	}
	if !strings.Contains(st.Err, "sent nothing") && !strings.Contains(st.Err, "no video") {
		t.Errorf("reason while stalled = %q", st.Err)
	}
	srv.Stall(false)
	testkit.WaitFor(t, 15*time.Second, "frames after the stall", func() bool { return c.frames(2) >= 10 })
	cancel()
	if err := <-runErr; err != nil {
		t.Fatal(err)
	}
	<-c.done
	srv.Close()
	testkit.WaitFor(t, 5*time.Second, "goroutines to settle", func() bool { return runtime.NumGoroutine() <= before })
	if !strings.Contains(logs.String(), "count=") {
		t.Errorf("repeated failures not summed in the log:\n%s", logs.String())
	}
}

// TestLiveFrameTooLarge: a camera that comes back from an outage with
// frames over the limit is refused at the reconnect: the worker fails with
// the same error as an over-large file.
func TestLiveFrameTooLarge(t *testing.T) {
	small := testsrv.EncodeBGR(make([]byte, 320*240*3), 320, 240, 80)
	large := testsrv.EncodeBGR(make([]byte, 640*480*3), 640, 480, 80)
	var grown atomic.Bool
	srv := testsrv.StartMJPEG(t, testsrv.MJPEGOptions{FPS: 25, Frames: func(int) []byte {
		if grown.Load() {
			return large
		}
		return small
	}})
	log, logs := testLogger()
	spec := SourceSpec{ID: "door", URL: srv.URL(), MaxFramePixels: 100_000, OpenTimeout: 5 * time.Second, ReadTimeout: 3 * time.Second}
	r := NewReconnecting(spec, Backoff{Min: 50 * time.Millisecond, Max: 100 * time.Millisecond}, log)
	info, err := r.Connect()
	if err != nil || info.Width != 320 {
		t.Fatalf("connect: %+v, %v", info, err)
	}
	w := NewWorker("door", r, info, PaceRealtime, 0, log)
	c := consume(w)
	runErr := make(chan error, 1)
	go func() { runErr <- w.Run(context.Background()) }()
	testkit.WaitFor(t, 10*time.Second, "frames", func() bool { return c.frames(1) >= 3 })
	srv.Stop()
	grown.Store(true)
	srv.Restart()

	var err2 error
	select {
	case err2 = <-runErr:
	case <-time.After(15 * time.Second):
		t.Fatalf("worker still running with frames over the limit; stats %+v\n%s", w.Stats(), logs)
	}
	<-c.done
	want := "source door: open " + srv.URL() + ": frame size 640x480 (0.3 megapixels) is over the limit of 0.1 megapixels (max_frame_pixels)"
	if err2 == nil || err2.Error() != want || !errors.Is(err2, ErrTooLarge) {
		t.Fatalf("run:\n got: %v\nwant: %s", err2, want)
	}
	if st := w.Stats(); st.State != StateFailed || st.Link.State != StateFailed || st.Err != want {
		t.Errorf("stats %+v", st)
	}
	if lost := c.losses(); len(lost) != 1 || lost[0].Conn != 1 {
		t.Errorf("losses %+v", lost)
	}
	if c.frames(2) != 0 {
		t.Errorf("%d frames handed on from the refused connection", c.frames(2))
	}
}
