package pipeline

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"runtime"
	"syscall"
	"time"

	"gocv.io/x/gocv"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/internal/config"
)

// How many sources of the configured rates and resolutions this machine can
// hold, from a short measurement: the CPU time one detection costs (prepare,
// inference, post-processing, on the configured detector) and the CPU time
// decoding one frame of each source costs. A source decodes every frame its
// camera or file delivers and detects at its target rate, so it needs
//
//	rate × decode + min(fps, rate) × detect   CPU ms per second,
//
// and the machine offers cores × 1000 ms per second, of which capacityShare
// is counted on (the rest goes to tracking, rules, publishing and the OS).
// `tallyd check` measures both costs; `run` measures the detection and the
// decoding of recorded files, and estimates live sources' decoding from
// their resolution (liveDecodeMsPerMP).

// capacityShare is the part of the CPU counted on for decoding and detection.
const capacityShare = 0.9

// liveDecodeMsPerMP is the CPU time decoding one megapixel of H.264 costs,
// for live sources `run` does not open twice: 2.5–3.0 ms per 768x576 frame
// (0.44 MP) and 11.3–12.3 ms per 1920x1080 frame (2.07 MP) measured for
// issue 13 on the 2-core development machine (OpenCV 4.6 with Debian's
// FFmpeg, colour conversion included); the higher of both per megapixel.
// `tallyd check` measured 4.0–5.8 ms per megapixel there; Motion-JPEG costs
// about a third of it.
const liveDecodeMsPerMP = 6.8

// Limits of a capacity measurement.
const (
	capacityDecodeFrames = 15              // frames decoded per source
	capacityDecodeWait   = 2 * time.Second // at most, per source
	capacityDetectWarmup = 5               // untimed detections first (the engine's first runs allocate)
	capacityDetectRuns   = 15              // detections timed per frame size
)

// Capacity is what a capacity measurement found.
type Capacity struct {
	Cores   int
	Workers int // detect workers (inferences at once)
	// BudgetMs is the CPU time per second counted on: cores × 1000 × 0.9.
	BudgetMs float64
	Sources  []SourceCapacity
	// DemandMs is what every source together needs, CPU ms per second.
	DemandMs float64
}

// SourceCapacity is one source's measured cost.
type SourceCapacity struct {
	ID            string
	Width, Height int
	FPS           float64 // frames the source delivers per second (decoded)
	DetectFPS     float64 // frames detected per second (target rate, at most FPS)
	DecodeMs      float64 // CPU ms to decode one frame
	// DecodeMeasured is false when DecodeMs is estimated from the
	// resolution (live sources in `run`) or unknown (no frame yet).
	DecodeMeasured bool
	DetectMs       float64 // CPU ms to detect in one frame: prepare, inference, post-processing
	DemandMs       float64 // CPU ms per second this source needs
	// Holds is how many sources like this one the machine serves alone.
	Holds int
}

// Load is the configured demand as a share of the CPU counted on; above 1
// the configuration exceeds the estimate.
func (c Capacity) Load() float64 {
	if c.BudgetMs <= 0 {
		return 0
	}
	return c.DemandMs / c.BudgetMs
}

// Exceeded says whether the sources together need more than the CPU counted on.
func (c Capacity) Exceeded() bool { return c.DemandMs > c.BudgetMs }

// EstimateCapacity measures, before Run, what the configured sources cost on
// this machine: detection on a frame of each source's size, the decoding of
// recorded sources (opened a second time), and live sources' decoding
// estimated from their resolution. It takes well under a second per frame
// size (20 detections) and per recorded source (16 frames decoded).
func (p *Pipeline) EstimateCapacity(ctx context.Context) (Capacity, error) {
	c := newCapacity(p.workers())
	for i, sr := range p.sources {
		sc := p.cfg.Sources[i]
		s := sourceCapacity(sc, sr.info)
		if sr.set.live {
			if s.Width > 0 && s.Height > 0 {
				s.DecodeMs = liveDecodeMsPerMP * float64(s.Width*s.Height) / 1e6
			}
		} else if err := measureDecode(ctx, p.cfg, sc, &s, nil); err != nil {
			return c, err
		}
		c.Sources = append(c.Sources, s)
	}
	if err := measureDetect(ctx, p.det, c.Sources, nil); err != nil {
		return c, err
	}
	c.finish()
	return c, nil
}

// measureCapacity is the dry run's measurement: every source opened once
// more and decoded for a moment, detection on its last decoded frame.
func measureCapacity(ctx context.Context, cfg *config.Config, det Detector, sources []CheckedSource, workers int) (Capacity, error) {
	c := newCapacity(workers)
	samples := make([]*gocv.Mat, len(sources))
	defer func() {
		for _, m := range samples {
			if m != nil {
				_ = m.Close()
			}
		}
	}()
	for i, cs := range sources {
		sc := cfg.Sources[i]
		s := sourceCapacity(sc, cs.Info)
		m := gocv.NewMat()
		samples[i] = &m
		if err := measureDecode(ctx, cfg, sc, &s, &m); err != nil {
			return c, err
		}
		c.Sources = append(c.Sources, s)
	}
	if err := measureDetect(ctx, det, c.Sources, samples); err != nil {
		return c, err
	}
	c.finish()
	return c, nil
}

func newCapacity(workers int) Capacity {
	n := runtime.NumCPU()
	return Capacity{Cores: n, Workers: workers, BudgetMs: float64(n) * 1000 * capacityShare}
}

// sourceCapacity is a source's size and rates as configured and opened.
func sourceCapacity(sc config.Source, in capture.Info) SourceCapacity {
	s := SourceCapacity{ID: sc.ID, Width: in.Width, Height: in.Height, FPS: in.FPS}
	if s.FPS <= 0 {
		s.FPS = sc.FPS // unknown source rate: count the target
	}
	s.DetectFPS = s.FPS
	if sc.FPS > 0 && (s.FPS <= 0 || sc.FPS < s.FPS) {
		s.DetectFPS = sc.FPS
	}
	return s
}

// finish computes each source's demand and the totals.
func (c *Capacity) finish() {
	c.DemandMs = 0
	for i := range c.Sources {
		s := &c.Sources[i]
		s.DemandMs = s.FPS*s.DecodeMs + s.DetectFPS*s.DetectMs
		c.DemandMs += s.DemandMs
		if s.DemandMs > 0 {
			s.Holds = int(math.Floor(c.BudgetMs / s.DemandMs))
		}
	}
}

// measureDecode opens the source once more and decodes up to
// capacityDecodeFrames frames (at most capacityDecodeWait), measuring the
// process's CPU time; the last frame is kept in last when given.
func measureDecode(ctx context.Context, cfg *config.Config, sc config.Source, s *SourceCapacity, last *gocv.Mat) error {
	var rd capture.Reader
	if sc.Scene != nil {
		sn, err := scene.New(SceneConfig(*sc.Scene))
		if err != nil {
			return fmt.Errorf("capacity: source %s: %w", sc.ID, err)
		}
		rd = capture.NewGenerated(sn)
	} else {
		r, _, err := capture.Open(sourceSpec(cfg, sc), slog.New(slog.DiscardHandler))
		if err != nil {
			return fmt.Errorf("capacity: source %s: %w", sc.ID, err)
		}
		rd = r
	}
	defer rd.Close()
	m := gocv.NewMat()
	defer m.Close()
	// The first frame is not timed: opening a stream decodes ahead.
	if _, err := rd.Read(&m); err != nil {
		return fmt.Errorf("capacity: source %s: first frame: %w", sc.ID, err)
	}
	deadline := time.Now().Add(capacityDecodeWait)
	cpu0 := processCPUTime()
	n := 0
	for n < capacityDecodeFrames && time.Now().Before(deadline) && ctx.Err() == nil {
		if _, err := rd.Read(&m); err != nil {
			if errors.Is(err, capture.ErrEndOfStream) {
				break
			}
			return fmt.Errorf("capacity: source %s: %w", sc.ID, err)
		}
		n++
	}
	if n > 0 {
		s.DecodeMs = ms(processCPUTime()-cpu0) / float64(n)
		s.DecodeMeasured = true
	}
	if s.Width == 0 || s.Height == 0 {
		s.Width, s.Height = m.Cols(), m.Rows()
	}
	if last != nil && !m.Empty() {
		m.CopyTo(last)
	}
	return nil
}

// probeSource names the frames a capacity measurement detects in.
const probeSource = "capacity-probe"

// measureDetect times the detector on one frame per distinct source size
// (the source's sample frame when given, else a mid-grey one), one
// detection at a time; every source of that size gets the result.
func measureDetect(ctx context.Context, det Detector, sources []SourceCapacity, samples []*gocv.Mat) error {
	if _, ok := det.(*fileDetector); ok {
		return nil // reads boxes from a file: nothing to measure
	}
	if f, ok := det.(Forgetter); ok {
		defer f.Forget(probeSource)
	}
	bySize := map[[2]int]float64{}
	for i := range sources {
		s := &sources[i]
		if s.Width <= 0 || s.Height <= 0 {
			continue
		}
		key := [2]int{s.Width, s.Height}
		if v, ok := bySize[key]; ok {
			s.DetectMs = v
			continue
		}
		var mat gocv.Mat
		if i < len(samples) && samples[i] != nil && !samples[i].Empty() {
			mat = samples[i].Clone()
		} else {
			mat = gocv.NewMatWithSizeFromScalar(gocv.NewScalar(128, 128, 128, 0), s.Height, s.Width, gocv.MatTypeCV8UC3)
		}
		v, err := timeDetect(ctx, det, mat)
		_ = mat.Close()
		if err != nil {
			return err
		}
		bySize[key] = v
		s.DetectMs = v
	}
	return nil
}

// timeDetect is the process CPU ms one Detect call on m costs, its frame
// prepared inside the call.
func timeDetect(ctx context.Context, det Detector, m gocv.Mat) (float64, error) {
	run := func(seq int64) error {
		f := &capture.Frame{Source: probeSource, Seq: seq, Mat: m}
		_, err := det.Detect(ctx, []*capture.Frame{f})
		if f.Prep != nil {
			_ = f.Prep.Close()
		}
		if err != nil {
			return fmt.Errorf("capacity: detect in a %dx%d frame: %w", m.Cols(), m.Rows(), err)
		}
		return nil
	}
	for i := range capacityDetectWarmup {
		if err := run(int64(i)); err != nil {
			return 0, err
		}
	}
	cpu0 := processCPUTime()
	for i := range capacityDetectRuns {
		if err := run(int64(capacityDetectWarmup + i)); err != nil {
			return 0, err
		}
	}
	return ms(processCPUTime()-cpu0) / capacityDetectRuns, nil
}

func ms(d time.Duration) float64 { return float64(d) / float64(time.Millisecond) }

// processCPUTime is the CPU time (user + system) every thread of the
// process has used.
func processCPUTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
