package onnx

import (
	"errors"

	"tallyd/internal/config"
)

// FromSite converts a site file's detector.onnx block into a Config, with
// paths resolved against the site file's folder.
func FromSite(cfg *config.Config) Config {
	o := cfg.Detector.ONNX
	c := Config{
		Model: cfg.Resolve(o.Model), Names: cfg.Resolve(o.Names), Engine: Engine(o.Engine),
		Library: cfg.Resolve(o.Library), IntraThreads: o.Threads.Intra, InterThreads: o.Threads.Inter,
		Optimization: o.Optimization, Width: o.Input.Width, Height: o.Input.Height,
		RGB: o.Channels == "rgb", Scale: o.Scale, Std: [3]float64{1, 1, 1},
		Pad: uint8(min(max(o.Letterbox.Pad, 0), 255)), Place: Placement(o.Letterbox.Place),
		Layout: Layout(o.Layout), ScoreThreshold: o.ScoreThreshold, ClassThresholds: o.ClassThresholds,
		Classes: o.Classes, NMS: NMSKind(o.NMS.Kind), IoU: o.NMS.IoU, ClassAware: o.NMS.ClassAware,
		MaxDetections: o.MaxDetections, MinBox: o.MinBox,
	}
	copy(c.Mean[:], o.Mean)
	if len(o.Std) == 3 {
		copy(c.Std[:], o.Std)
	}
	return c
}

// SiteError locates a New error in the site file: a *SetupError becomes a
// config.FieldError on its detector.onnx key (so it wraps config.ErrInvalid
// and names the file and line); other errors are returned as they are.
func SiteError(cfg *config.Config, err error) error {
	var se *SetupError
	if errors.As(err, &se) {
		return cfg.Errorf("detector.onnx."+se.Key, "%s", se.Msg)
	}
	return err
}
