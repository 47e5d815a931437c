package pipeline

import (
	"context"
	"fmt"
	"strings"
	"sync"
	"testing"
	"time"

	"tallyd/capture"
	"tallyd/detect"
)

// poolDetector stands for a detector with a pool of sessions: it serves
// Sessions() calls at once, each taking cost, and records what the scheduler
// must guarantee: a source in one call at a time, its frames in order.
type poolDetector struct {
	sessions int
	cost     time.Duration

	mu       sync.Mutex
	inFlight map[string]int   // calls under way per source
	last     map[string]int64 // last frame number seen per source
	now, top int              // calls under way, most at once
	problems []string
}

func newPoolDetector(sessions int, cost time.Duration) *poolDetector {
	return &poolDetector{sessions: sessions, cost: cost, inFlight: map[string]int{}, last: map[string]int64{}}
}

func (d *poolDetector) Sessions() int { return d.sessions }
func (d *poolDetector) Close() error  { return nil }

func (d *poolDetector) Detect(_ context.Context, b []*capture.Frame) ([][]detect.Detection, error) {
	d.mu.Lock()
	d.now++
	d.top = max(d.top, d.now)
	for _, f := range b {
		d.inFlight[f.Source]++
		if n := d.inFlight[f.Source]; n > 1 {
			d.problems = append(d.problems, fmt.Sprintf("%s in %d calls at once", f.Source, n))
		}
		if last, ok := d.last[f.Source]; ok && f.Seq <= last {
			d.problems = append(d.problems, fmt.Sprintf("%s: frame %d after frame %d", f.Source, f.Seq, last))
		}
		d.last[f.Source] = f.Seq
	}
	d.mu.Unlock()
	time.Sleep(d.cost)
	d.mu.Lock()
	d.now--
	for _, f := range b {
		d.inFlight[f.Source]--
	}
	d.mu.Unlock()
	return make([][]detect.Detection, len(b)), nil
}

// TestPoolWorkers: six sources in front of a detector with a pool of
// sessions that serves about half of what they deliver. The pipeline starts
// one detect worker per session (or Options.Workers), the workers infer at
// once, no source is ever in two of them at once, every source's frames
// arrive in order, and the sources are served alike (within 10% of the mean).
func TestPoolWorkers(t *testing.T) {
	for _, tc := range []struct {
		name     string
		sessions int
		workers  int // Options.Workers
		want     int // workers expected
	}{
		{"one worker per session", 3, 0, 3},
		{"workers set", 3, 2, 2},
		{"one session", 1, 0, 1},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var b strings.Builder
			b.WriteString("site: s\nsources:\n")
			for i := range 6 {
				fmt.Fprintf(&b, "  - id: cam%d\n    scene: {seed: %d, fps: 25, width: 320, height: 180}\n", i, i+1)
			}
			b.WriteString("output:\n  nats:\n    embedded: {port: 0}\nlog: {level: warn}\n")
			cfg := siteFile(t, b.String())
			// 6 x 25 = 150 frames/s offered; each worker serves 1/cost.
			cost := time.Duration(tc.want) * 12 * time.Millisecond // ~83 frames/s whatever the workers
			det := newPoolDetector(tc.sessions, cost)
			p, err := Build(cfg, Options{Pace: capture.PaceRealtime, Detector: det, Workers: tc.workers})
			if err != nil {
				t.Fatal(err)
			}
			defer p.Close()
			if got := p.workers(); got != tc.want {
				t.Fatalf("%d detect workers, want %d", got, tc.want)
			}
			ctx, cancel := context.WithTimeout(context.Background(), 3*time.Second)
			defer cancel()
			if err := p.Run(ctx); err != nil {
				t.Fatal(err)
			}
			det.mu.Lock()
			defer det.mu.Unlock()
			for _, pr := range det.problems {
				t.Error(pr)
			}
			if det.top != tc.want {
				t.Errorf("at most %d calls at once, want %d (one per worker)", det.top, tc.want)
			}
			var sum float64
			st := p.Status()
			for _, s := range st {
				sum += float64(s.Processed)
			}
			mean := sum / float64(len(st))
			for _, s := range st {
				if s.Processed == 0 || float64(s.Processed) < 0.9*mean || float64(s.Processed) > 1.1*mean {
					t.Errorf("%s processed %d frames; mean %.1f: not within 10%%", s.ID, s.Processed, mean)
				}
			}
			t.Logf("%d workers: %.0f frames per source, %d calls at most at once", tc.want, mean, det.top)
		})
	}
}
