package pipeline

import (
	"context"
	"fmt"
	"strings"
	"testing"
	"time"

	"tallyd/capture"
)

// TestFairShare: four sources in front of one detector that serves only half
// of what they deliver. Every source is served at about the same rate (within
// 10% of the mean) and none starves.
func TestFairShare(t *testing.T) {
	var b strings.Builder
	b.WriteString("site: s\nsources:\n")
	for i := range 4 {
		fmt.Fprintf(&b, "  - id: cam%d\n    scene: {seed: %d, fps: 25, width: 320, height: 180}\n", i, i+1)
	}
	b.WriteString("output:\n  nats:\n    embedded: {port: 0}\nlog: {level: warn}\n")
	cfg := siteFile(t, b.String())
	// 4 x 25 fps = 100 frames/s offered; 20 ms per call serves 50.
	p, err := Build(cfg, Options{Pace: capture.PaceRealtime, Detector: slowDetector{20 * time.Millisecond}})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 4*time.Second)
	defer cancel()
	if err := p.Run(ctx); err != nil {
		t.Fatal(err)
	}
	st := p.Status()
	var sum float64
	for _, s := range st {
		sum += float64(s.Processed)
	}
	mean := sum / float64(len(st))
	for _, s := range st {
		t.Logf("%s: read %d processed %d dropped(mailbox) %d", s.ID, s.Read, s.Processed, s.Dropped.Mailbox)
		if s.Processed == 0 || float64(s.Processed) < 0.9*mean || float64(s.Processed) > 1.1*mean {
			t.Errorf("%s processed %d frames; mean %.1f: not within 10%%", s.ID, s.Processed, mean)
		}
		if s.Dropped.Mailbox == 0 {
			t.Errorf("%s dropped nothing although the detector is overloaded", s.ID)
		}
	}
}

// TestMaxAge: frames that waited longer than max_age for a slow detector are
// dropped as too old and counted.
func TestMaxAge(t *testing.T) {
	cfg := siteFile(t, "site: s\nsources:\n"+
		"  - {id: a, max_age: 10ms, scene: {seed: 1, fps: 50, width: 320, height: 180}}\n"+
		"  - {id: b, max_age: 10ms, scene: {seed: 2, fps: 50, width: 320, height: 180}}\n"+
		"output:\n  nats:\n    embedded: {port: 0}\nlog: {level: warn}\n")
	p, err := Build(cfg, Options{Pace: capture.PaceRealtime, Detector: slowDetector{30 * time.Millisecond}})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
	defer cancel()
	if err := p.Run(ctx); err != nil {
		t.Fatal(err)
	}
	s := p.Summary()
	old := int64(0)
	for _, st := range p.Status() {
		old += st.Dropped.TooOld
	}
	if old == 0 {
		t.Error("no frame dropped for age")
	}
	if s.FramesRead != s.FramesProcessed+s.FramesDropped {
		t.Errorf("read %d != processed %d + dropped %d", s.FramesRead, s.FramesProcessed, s.FramesDropped)
	}
}

// TestMotionGating: a quiet walkway with a few short bursts of walkers. The
// gate spares at least 5x the detector calls and the crossing counts still
// equal the truth, whether it looks for change anywhere or only near the rules.
func TestMotionGating(t *testing.T) {
	if testing.Short() {
		t.Skip("long generated scenes")
	}
	for _, tc := range []struct{ where, duration string }{{"rules", "600s"}, {"anywhere", "600s"}} {
		t.Run(tc.where, func(t *testing.T) {
			t.Parallel()
			cfg := siteFile(t, "site: s\nsources:\n  - id: walkway\n    gate: {where: "+tc.where+"}\n"+
				"    scene: {seed: 3, duration: "+tc.duration+", crossings: 3, visitors: 0}\n"+sceneRules+
				"output:\n  nats:\n    embedded: {port: 0}\n")
			p, err := Build(cfg, Options{Pace: capture.PaceMax})
			if err != nil {
				t.Fatal(err)
			}
			defer p.Close()
			if err := p.Run(context.Background()); err != nil {
				t.Fatal(err)
			}
			s := p.Summary()
			calls := p.DetectCalls()
			truth := p.Truth()
			t.Logf("frames %d, detector calls %d (%.1fx fewer), gate counts %+v truth %+v",
				s.FramesRead, calls, float64(s.FramesRead)/float64(calls), s.Rules["gate"], truth["gate"])
			if calls*5 > s.FramesRead {
				t.Errorf("detector ran on %d of %d frames: less than 5x saved", calls, s.FramesRead)
			}
			if s.Rules["gate"] != truth["gate"] {
				t.Errorf("crossings with gating %+v, truth %+v", s.Rules["gate"], truth["gate"])
			}
		})
	}
}
