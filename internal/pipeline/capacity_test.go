package pipeline

import (
	"context"
	"math"
	"os"
	"path/filepath"
	"testing"

	"tallyd/capture"
)

// TestCapacityArithmetic: a source needs rate × decode + detected rate ×
// detect CPU ms per second, and holds as many like it as fit into 90% of
// the cores (values worked by hand).
func TestCapacityArithmetic(t *testing.T) {
	c := Capacity{Cores: 2, BudgetMs: 1800, Sources: []SourceCapacity{
		// 25 fps camera detected at 10 fps: 25 × 2.8 + 10 × 12.5 = 70 + 125 = 195 ms/s; 1800/195 = 9.2.
		{ID: "h264", FPS: 25, DetectFPS: 10, DecodeMs: 2.8, DetectMs: 12.5},
		// 10 fps, every frame detected: 10 × 0.8 + 10 × 12.5 = 133 ms/s; 1800/133 = 13.5.
		{ID: "mjpeg", FPS: 10, DetectFPS: 10, DecodeMs: 0.8, DetectMs: 12.5},
	}}
	c.finish()
	for i, want := range []struct {
		demand float64
		holds  int
	}{{195, 9}, {133, 13}} {
		s := c.Sources[i]
		if math.Abs(s.DemandMs-want.demand) > 1e-9 || s.Holds != want.holds {
			t.Errorf("%s: demand %.3f ms/s holds %d, want %.0f and %d", s.ID, s.DemandMs, s.Holds, want.demand, want.holds)
		}
	}
	if math.Abs(c.DemandMs-328) > 1e-9 || c.Exceeded() || math.Abs(c.Load()-328.0/1800) > 1e-12 {
		t.Errorf("total %.3f ms/s load %.3f exceeded %v; want 328, 0.182, false", c.DemandMs, c.Load(), c.Exceeded())
	}
	c.Sources = append(c.Sources, SourceCapacity{ID: "4k", FPS: 30, DetectFPS: 30, DecodeMs: 50, DetectMs: 14})
	c.finish()
	if !c.Exceeded() {
		t.Errorf("demand %.0f of %.0f ms/s not reported as exceeded", c.DemandMs, c.BudgetMs)
	}
}

// TestSourceRates: a target rate below the source's detects fewer frames
// than are decoded; an unknown source rate counts the target.
func TestSourceRates(t *testing.T) {
	cfg := siteFile(t, "site: s\nsources:\n"+
		"  - {id: a, fps: 5, scene: {seed: 1, fps: 25, width: 320, height: 180}}\n"+
		"  - {id: b, scene: {seed: 2, fps: 10, width: 320, height: 180}}\n"+
		"output:\n  nats:\n    embedded: {port: 0}\n")
	for i, want := range [][2]float64{{25, 5}, {10, 10}} {
		s := sourceCapacity(cfg.Sources[i], capture.Info{FPS: want[0]})
		if s.FPS != want[0] || s.DetectFPS != want[1] {
			t.Errorf("%s: %v decoded, %v detected per second; want %v", s.ID, s.FPS, s.DetectFPS, want)
		}
	}
	if s := sourceCapacity(cfg.Sources[0], capture.Info{}); s.FPS != 5 || s.DetectFPS != 5 {
		t.Errorf("unknown rate: %v decoded, %v detected; want the target 5 and 5", s.FPS, s.DetectFPS)
	}
}

// TestCheckMeasuresCapacity: the dry run decodes every source for a moment
// and times the detector (here the motion detector) on its frames; run's
// estimate measures the same recorded sources.
func TestCheckMeasuresCapacity(t *testing.T) {
	body := "site: s\nsources:\n  - id: walkway\n    scene: {seed: 1, fps: 10, width: 320, height: 180}\n"
	vtest, _ := filepath.Abs("../../../shared/footage/vtest.avi")
	if _, err := os.Stat(vtest); err == nil {
		body += "  - {id: plaza, file: " + vtest + ", fps: 5}\n"
	} else {
		t.Logf("vtest.avi absent (%v): generated source only", err)
	}
	body += "output:\n  nats:\n    embedded: {port: 0}\nlog: {level: warn}\n"
	cfg := siteFile(t, body)
	rep, err := Check(cfg)
	if err != nil {
		t.Fatal(err)
	}
	if rep.CapacityErr != nil || rep.Capacity == nil {
		t.Fatalf("capacity not measured: %v", rep.CapacityErr)
	}
	p, err := Build(cfg, Options{Pace: capture.PaceMax})
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	est, err := p.EstimateCapacity(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []Capacity{*rep.Capacity, est} {
		if len(c.Sources) != len(cfg.Sources) || c.Workers != 1 || c.BudgetMs != float64(c.Cores)*900 {
			t.Fatalf("capacity %+v", c)
		}
		for _, s := range c.Sources {
			t.Logf("%s %dx%d: %.4g/%.4g fps, decode %.2f ms, detect %.2f ms, %.0f CPU ms/s, holds %d",
				s.ID, s.Width, s.Height, s.DetectFPS, s.FPS, s.DecodeMs, s.DetectMs, s.DemandMs, s.Holds)
			if !s.DecodeMeasured || !(s.DecodeMs > 0) || !(s.DetectMs > 0) || s.Holds < 1 || s.Width == 0 {
				t.Errorf("%s: %+v", s.ID, s)
			}
		}
	}
	if s := rep.Capacity.Sources[len(rep.Capacity.Sources)-1]; s.ID == "plaza" && (s.FPS != 10 || s.DetectFPS != 5) {
		t.Errorf("plaza: %v/%v fps, want 5 detected of 10 decoded", s.DetectFPS, s.FPS)
	}
}
