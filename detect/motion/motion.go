// Package motion is the weight-free default detector: background subtraction
// (OpenCV MOG2), morphology and contours turn moving regions into boxes. It
// needs no model file and runs on any CPU.
package motion

import (
	"context"
	"fmt"
	"image"
	"sync"

	"gocv.io/x/gocv"

	"tallyd/capture"
	"tallyd/detect"
)

// Config tunes the detector; the site file's detector.motion block.
type Config struct {
	History      int     // frames the background model remembers
	VarThreshold float64 // squared Mahalanobis distance to call a pixel foreground
	LearningRate float64 // model update rate after warm-up
	WarmupFrames int     // first frames learned at OpenCV's automatic rate
	MinArea      float64 // smallest box area kept (px²)
	OpenKernel   int     // opening kernel (px), 0 = none
	CloseKernel  int     // closing kernel (px), 0 = none
	Class        string  // class name given to every box
}

// Detector keeps one background model per source. It is safe for concurrent
// use by different sources; frames of one source must come in order.
type Detector struct {
	cfg         Config
	open, close gocv.Mat

	mu      sync.Mutex
	sources map[string]*state
}

type state struct {
	mu     sync.Mutex
	bg     *mog2
	frames int
	fg     gocv.Mat
}

// New makes a detector. Close it to release the OpenCV objects.
func New(cfg Config) *Detector {
	d := &Detector{cfg: cfg, sources: map[string]*state{}}
	if cfg.OpenKernel > 0 {
		d.open = gocv.GetStructuringElement(gocv.MorphEllipse, image.Pt(cfg.OpenKernel, cfg.OpenKernel))
	}
	if cfg.CloseKernel > 0 {
		d.close = gocv.GetStructuringElement(gocv.MorphEllipse, image.Pt(cfg.CloseKernel, cfg.CloseKernel))
	}
	return d
}

// Detect finds moving regions in each frame of the batch. An error OpenCV
// raises in the background model is returned, naming the frame. Frames
// should be within capture.DefaultMaxFramePixels: OpenCV errors in the
// morphology and contour steps (gocv) cannot be caught and end the process.
func (d *Detector) Detect(ctx context.Context, batch []*capture.Frame) ([][]detect.Detection, error) {
	out := make([][]detect.Detection, len(batch))
	for i, f := range batch {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		dets, err := d.detectOne(f)
		if err != nil {
			return nil, err
		}
		out[i] = dets
	}
	return out, nil
}

func (d *Detector) stateFor(source string) (*state, error) {
	d.mu.Lock()
	defer d.mu.Unlock()
	s, ok := d.sources[source]
	if !ok {
		bg, err := newMOG2(d.cfg.History, d.cfg.VarThreshold, true)
		if err != nil {
			return nil, fmt.Errorf("motion detector: source %s: %w", source, err)
		}
		s = &state{bg: bg, fg: gocv.NewMat()}
		d.sources[source] = s
	}
	return s, nil
}

func (d *Detector) detectOne(f *capture.Frame) ([]detect.Detection, error) {
	if f.Mat.Empty() || f.Mat.Type() != gocv.MatTypeCV8UC3 {
		return nil, fmt.Errorf("motion detector: frame %d of %s is empty or not 8-bit BGR", f.Seq, f.Source)
	}
	s, err := d.stateFor(f.Source)
	if err != nil {
		return nil, err
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	rate := d.cfg.LearningRate
	if s.frames < d.cfg.WarmupFrames {
		rate = -1
	}
	s.frames++
	if err := s.bg.apply(f.Mat, &s.fg, rate); err != nil {
		return nil, fmt.Errorf("motion detector: frame %d of %s: %w", f.Seq, f.Source, err)
	}
	// Shadows are marked 127 by MOG2; keep only confident foreground.
	gocv.Threshold(s.fg, &s.fg, 200, 255, gocv.ThresholdBinary)
	if d.cfg.OpenKernel > 0 {
		gocv.MorphologyEx(s.fg, &s.fg, gocv.MorphOpen, d.open)
	}
	if d.cfg.CloseKernel > 0 {
		gocv.MorphologyEx(s.fg, &s.fg, gocv.MorphClose, d.close)
	}
	contours := gocv.FindContours(s.fg, gocv.RetrievalExternal, gocv.ChainApproxSimple)
	defer contours.Close()
	var dets []detect.Detection
	for i := 0; i < contours.Size(); i++ {
		r := gocv.BoundingRect(contours.At(i))
		b := detect.Box{X1: float64(r.Min.X), Y1: float64(r.Min.Y), X2: float64(r.Max.X), Y2: float64(r.Max.Y)}
		if b.Area() < d.cfg.MinArea {
			continue
		}
		dets = append(dets, detect.Detection{Box: b, Score: 1, Class: d.cfg.Class})
	}
	return dets, nil
}

// Forget drops a source's background model (e.g. after it reconnects).
func (d *Detector) Forget(source string) {
	d.mu.Lock()
	s, ok := d.sources[source]
	delete(d.sources, source)
	d.mu.Unlock()
	if ok {
		s.mu.Lock()
		_ = s.bg.close()
		_ = s.fg.Close()
		s.mu.Unlock()
	}
}

// Close releases every background model; safe to call twice.
func (d *Detector) Close() error {
	d.mu.Lock()
	ids := make([]string, 0, len(d.sources))
	for id := range d.sources {
		ids = append(ids, id)
	}
	d.mu.Unlock()
	for _, id := range ids {
		d.Forget(id)
	}
	if d.open.Ptr() != nil {
		_ = d.open.Close()
	}
	if d.close.Ptr() != nil {
		_ = d.close.Close()
	}
	return nil
}
