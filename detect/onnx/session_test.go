package onnx

import (
	"context"
	"errors"
	"fmt"
	"math"
	"runtime"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"tallyd/capture"
	"tallyd/internal/testkit"
)

// fakeEngine counts closes; it never infers.
type fakeEngine struct{ closed *atomic.Int32 }

func (fakeEngine) run([]float32, int) ([]tensor, error) { return nil, nil }
func (fakeEngine) version() string                      { return "fake" }
func (e fakeEngine) close() error                       { e.closed.Add(1); return nil }

// TestPoolHandsOutEachSessionOnce: a pool of two sessions gives each to one
// caller at a time; a third caller waits (here until its context ends);
// close waits for the session still in use, and nothing is handed out after.
func TestPoolHandsOutEachSessionOnce(t *testing.T) {
	var closed atomic.Int32
	ss, err := newSessions(2, func() (engine, error) { return fakeEngine{&closed}, nil })
	if err != nil {
		t.Fatal(err)
	}
	p := newPool(ss)
	ctx := context.Background()
	a, err := p.acquire(ctx)
	if err != nil {
		t.Fatal(err)
	}
	b, err := p.acquire(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if a == b {
		t.Fatal("one session handed out twice")
	}
	short, cancel := context.WithTimeout(ctx, 20*time.Millisecond)
	defer cancel()
	if _, err := p.acquire(short); !errors.Is(err, context.DeadlineExceeded) {
		t.Fatalf("third acquire: %v, want the context's deadline", err)
	}
	p.release(a)
	done := make(chan error, 1)
	go func() { done <- p.close() }()
	testkit.WaitFor(t, 2*time.Second, "the idle session to be closed", func() bool { return closed.Load() == 1 })
	select {
	case err := <-done:
		t.Fatalf("close returned (%v) while a session was in use", err)
	default:
	}
	p.release(b)
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	if closed.Load() != 2 {
		t.Errorf("%d engines closed, want 2", closed.Load())
	}
	if _, err := p.acquire(ctx); !errors.Is(err, errClosed) {
		t.Errorf("acquire after close: %v, want %v", err, errClosed)
	}
	if err := p.close(); err != nil || closed.Load() != 2 {
		t.Errorf("second close: %v, %d engines closed", err, closed.Load())
	}
}

// TestSessionCount: the default is one session per core divided by the
// intra-op threads (ONNX Runtime), one for OpenCV; Sessions overrides both.
func TestSessionCount(t *testing.T) {
	n := runtime.NumCPU()
	for _, tc := range []struct {
		name string
		cfg  Config
		want int
	}{
		{"defaults", Defaults(), n},
		{"two threads", Config{Engine: EngineORT, IntraThreads: 2}, max(1, n/2)},
		{"runtime chooses threads", Config{Engine: EngineORT}, 1},
		{"opencv", Config{Engine: EngineOpenCV, IntraThreads: 1}, 1},
		{"set", Config{Engine: EngineORT, IntraThreads: 4, Sessions: 3}, 3},
	} {
		if got := tc.cfg.SessionCount(); got != tc.want {
			t.Errorf("%s: %d sessions, want %d", tc.name, got, tc.want)
		}
	}
}

// TestSessionPoolDetects: a detector with three sessions serves six callers
// at once with the right results, reports three sessions, and fails cleanly
// once closed.
func TestSessionPoolDetects(t *testing.T) {
	for _, eng := range engines(t) {
		t.Run(string(eng), func(t *testing.T) {
			cfg := testConfig(t, fixture("e2e.onnx"), eng)
			cfg.ScoreThreshold, cfg.Sessions = 0.1, 3
			d := mustNew(t, cfg)
			if d.Sessions() != 3 {
				t.Fatalf("%d sessions, want 3", d.Sessions())
			}
			var wg sync.WaitGroup
			errs := make(chan error, 6)
			for g := range 6 {
				wg.Add(1)
				go func() {
					defer wg.Done()
					for i := range 20 {
						v := uint8(255 * ((g + i) % 2))
						f := uniformFrame(128, 96, v)
						got, err := d.Detect(context.Background(), []*capture.Frame{f})
						f.Close()
						if err != nil {
							errs <- err
							return
						}
						// The fixture reports 2 boxes on black and 3 on white
						// (scripts/onnx_fixtures.py, as TestConcurrentDetect).
						if want := 2 + int(v/255); len(got[0]) != want {
							errs <- fmt.Errorf("value %d: %d detections, want %d", v, len(got[0]), want)
							return
						}
					}
				}()
			}
			wg.Wait()
			close(errs)
			for err := range errs {
				t.Fatal(err)
			}
			if st := d.Stats(); st.Frames != 120 || st.Batches != 120 {
				t.Errorf("stats: %d frames, %d inferences; want 120, 120", st.Frames, st.Batches)
			}
			if err := d.Close(); err != nil {
				t.Fatal(err)
			}
			f := uniformFrame(128, 96, 0)
			defer f.Close()
			if _, err := d.Detect(context.Background(), []*capture.Frame{f}); err == nil || !strings.Contains(err.Error(), "closed") {
				t.Errorf("Detect after Close: %v, want a closed error", err)
			}
		})
	}
}

// TestSessionSettingErrors: bad session settings name the setting.
func TestSessionSettingErrors(t *testing.T) {
	for _, tc := range []struct {
		name string
		set  func(*Config)
		want string
	}{
		{"too many sessions", func(c *Config) { c.Sessions = 65 }, "sessions: must be within 1..64 (found 65)"},
		{"optimiser list in one name", func(c *Config) { c.DisableOptimizers = []string{"QuickGeluFusion,GeluFusion"} },
			`disable_optimizers[0]: want an optimiser name without commas or spaces (found "QuickGeluFusion,GeluFusion")`},
	} {
		t.Run(tc.name, func(t *testing.T) {
			cfg := testConfig(t, fixture("e2e.onnx"), EngineORT)
			tc.set(&cfg)
			_, err := New(cfg)
			var se *SetupError
			if !errors.As(err, &se) || se.Error() != tc.want || !errors.Is(err, ErrSetting) {
				t.Fatalf("error %v, want %q (a setting error)", err, tc.want)
			}
		})
	}
}

// TestQuickGeluFusionOffSameOutput: with ONNX Runtime's QuickGelu fusion
// disabled (the default) the shared YOLOX-Nano model gives the same output
// as with every optimiser on, within float rounding, and the same boxes, on
// frames across vtest.avi. The fusion only regroups x*sigmoid(x); the
// arithmetic is the same (SiLU, Elfwing et al. 2018; QuickGelu with alpha 1
// is the same function).
func TestQuickGeluFusionOffSameOutput(t *testing.T) {
	model := sharedFile(t, "models/yolox_nano_coco_416.onnx")
	on := testConfig(t, model, EngineORT)
	on.Names, on.Sessions, on.DisableOptimizers = sharedFile(t, "models/coco80.names"), 1, nil
	off := on
	off.DisableOptimizers = []string{"QuickGeluFusion"}
	dOn, dOff := mustNew(t, on), mustNew(t, off)
	want := []int{0, 100, 200, 300, 400, 500, 600, 700}
	frames := readFrames(t, want...)
	for i, m := range frames {
		defer m.Close()
		buf := make([]float32, dOn.pre.size())
		g, err := dOn.pre.fill(m, buf)
		if err != nil {
			t.Fatal(err)
		}
		a, err := dOn.eng.run(buf, 1)
		if err != nil {
			t.Fatal(err)
		}
		da := finishFor(t, dOn, a, g) // before the next run reuses the outputs
		maxA := slicesMaxAbs(a[0].data)
		aData := append([]float32(nil), a[0].data...)
		b, err := dOff.eng.run(buf, 1)
		if err != nil {
			t.Fatal(err)
		}
		maxDiff := 0.0
		for k := range aData {
			maxDiff = math.Max(maxDiff, math.Abs(float64(aData[k]-b[0].data[k])))
		}
		if maxDiff > 1e-3*math.Max(1, maxA) {
			t.Errorf("frame %d: outputs differ by up to %g", want[i], maxDiff)
		}
		db := finishFor(t, dOff, b, g)
		matchBoxes(t, da, db)
		matchBoxes(t, db, da)
		t.Logf("frame %d: max difference %.2g, %d detections", want[i], maxDiff, len(da))
	}
}

func slicesMaxAbs(v []float32) float64 {
	m := 0.0
	for _, x := range v {
		m = math.Max(m, math.Abs(float64(x)))
	}
	return m
}
