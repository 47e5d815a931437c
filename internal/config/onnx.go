package config

import (
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"

	"tallyd/detect/onnx"
)

// orList joins names as "a, b or c".
func orList(names []string) string {
	if len(names) < 2 {
		return strings.Join(names, "")
	}
	return strings.Join(names[:len(names)-1], ", ") + " or " + names[len(names)-1]
}

// ONNX configures the ONNX detector (detector.kind: onnx): a YOLO-family
// model run on the CPU by ONNX Runtime or OpenCV's DNN module. Paths are
// relative to the site file's folder. The README's "ONNX detectors" section
// explains each key.
type ONNX struct {
	Model  string      `yaml:"model"`  // .onnx file
	Names  string      `yaml:"names"`  // class names, one per line; empty: model metadata, else class0, class1, ...
	Engine onnx.Engine `yaml:"engine"` // ort or opencv
	// Library is the ONNX Runtime 1.24.1 shared library; empty looks at
	// $TALLYD_ORT_LIB, then .cache/onnxruntime/1.24.1/ (make setup).
	Library string      `yaml:"library"`
	Threads ONNXThreads `yaml:"threads"`
	// Sessions is how many inferences run at once, each on its own ONNX
	// Runtime session; 0 = one per core divided by threads.intra.
	Sessions int `yaml:"sessions"`
	// DisableOptimizers names ONNX Runtime graph optimisers to skip;
	// default [QuickGeluFusion] (README, "Sessions and threads").
	DisableOptimizers []string `yaml:"disable_optimizers"`
	Optimization      string   `yaml:"optimization"` // disabled, basic, extended, all
	// Input sets the input size of a model whose size is dynamic.
	Input     ONNXInput     `yaml:"input"`
	Channels  string        `yaml:"channels"` // bgr or rgb
	Scale     float64       `yaml:"scale"`    // value of a full-intensity pixel: 255 or 1
	Mean      []float64     `yaml:"mean"`     // per input channel, subtracted after scaling
	Std       []float64     `yaml:"std"`      // per input channel, divided by after the mean
	Letterbox ONNXLetterbox `yaml:"letterbox"`
	// Layout is auto or one of yolox-grid, rows-obj, rows-noobj-chw,
	// boxes-scores, e2e.
	Layout          onnx.Layout        `yaml:"layout"`
	ScoreThreshold  float64            `yaml:"score_threshold"`
	ClassThresholds map[string]float64 `yaml:"class_thresholds"` // per class name, overrides score_threshold
	Classes         []string           `yaml:"classes"`          // allow-list by name; empty keeps all
	NMS             ONNXNMS            `yaml:"nms"`
	MaxDetections   int                `yaml:"max_detections"` // per frame, after NMS
	MinBox          float64            `yaml:"min_box"`        // smallest width and height kept, source pixels
	// Raw anchor heads (layouts anchor-heads, anchor-heads-last): anchors per
	// head from the finest (smallest stride) to the coarsest, each a list of
	// width,height pairs in input pixels; or cfg, the Darknet .cfg the ONNX
	// model was converted from. A Darknet model (model: x.cfg with x.weights
	// beside it, engine opencv) needs neither.
	Anchors        [][]float64 `yaml:"anchors"`
	ScaleXY        []float64   `yaml:"scale_x_y"`       // per head or one for all; empty = 1 (YOLOv3)
	SigmoidApplied bool        `yaml:"sigmoid_applied"` // the heads hold sigmoid outputs already
	Cfg            string      `yaml:"cfg"`
}

// ONNXThreads sizes each ONNX Runtime session's thread pools (0 lets it
// choose) and says whether idle pool threads spin-wait for work.
type ONNXThreads struct {
	Intra int  `yaml:"intra"`
	Inter int  `yaml:"inter"`
	Spin  bool `yaml:"spin"`
}

// ONNXInput is the input size for models whose input size is dynamic.
type ONNXInput struct {
	Width  int `yaml:"width"`
	Height int `yaml:"height"`
}

// ONNXLetterbox says how a frame is fitted into the model's input.
type ONNXLetterbox struct {
	Pad   int            `yaml:"pad"`   // fill value 0..255
	Place onnx.Placement `yaml:"place"` // top-left or center
}

// ONNXNMS configures duplicate suppression.
type ONNXNMS struct {
	Kind       onnx.NMSKind `yaml:"kind"` // greedy, diou or none
	IoU        float64      `yaml:"iou"`
	ClassAware bool         `yaml:"class_aware"`
}

func (v *validator) onnx() {
	o := v.c.Detector.ONNX
	p := "detector.onnx."
	darknet := strings.EqualFold(filepath.Ext(o.Model), ".cfg")
	switch {
	case o.Model == "":
		v.fail(p+"model", "is required")
	case darknet:
		v.file(p+"model", o.Model, "a Darknet cfg")
		w := v.c.Resolve(strings.TrimSuffix(o.Model, filepath.Ext(o.Model)) + ".weights")
		if st, err := os.Stat(w); err != nil {
			v.fail(p+"model", "a Darknet cfg needs its weights beside it: cannot open %q: %v", w, unwrapPathErr(err))
		} else if st.IsDir() {
			v.fail(p+"model", "a Darknet cfg needs its weights beside it: %q is a folder", w)
		}
		if o.Engine != onnx.EngineOpenCV {
			v.fail(p+"engine", "a Darknet model runs on opencv (found %q)", o.Engine)
		}
	default:
		v.file(p+"model", o.Model, "an ONNX model")
	}
	v.rawHeads(p, o, darknet)
	if o.Names != "" {
		v.file(p+"names", o.Names, "a class names file")
	}
	switch o.Engine {
	case onnx.EngineORT:
		if o.Library != "" {
			v.file(p+"library", o.Library, "the ONNX Runtime shared library")
		}
	case onnx.EngineOpenCV:
	default:
		v.fail(p+"engine", "want ort or opencv (found %q)", o.Engine)
	}
	if o.Threads.Intra < 0 || o.Threads.Intra > 256 {
		v.fail(p+"threads.intra", "must be within 0..256, 0 lets ONNX Runtime choose (found %d)", o.Threads.Intra)
	}
	if o.Threads.Inter < 0 || o.Threads.Inter > 256 {
		v.fail(p+"threads.inter", "must be within 0..256, 0 lets ONNX Runtime choose (found %d)", o.Threads.Inter)
	}
	if o.Sessions < 0 || o.Sessions > MaxONNXSessions {
		v.fail(p+"sessions", "must be within 0..%d, 0 = one per core divided by threads.intra (found %d)", MaxONNXSessions, o.Sessions)
	}
	if len(o.DisableOptimizers) > MaxDisabledOptimizers {
		v.fail(p+"disable_optimizers", "at most %d names (found %d)", MaxDisabledOptimizers, len(o.DisableOptimizers))
	}
	for i, n := range o.DisableOptimizers {
		key := fmt.Sprintf("%sdisable_optimizers[%d]", p, i)
		switch {
		case n == "" || strings.ContainsAny(n, ", \t"):
			v.fail(key, "want an ONNX Runtime optimiser name without commas or spaces, e.g. QuickGeluFusion (found %q)", n)
		case len(n) > MaxTokenLen:
			v.fail(key, "at most %d characters (found %d)", MaxTokenLen, len(n))
		}
	}
	switch o.Optimization {
	case "disabled", "basic", "extended", "all":
	default:
		v.fail(p+"optimization", "want disabled, basic, extended or all (found %q)", o.Optimization)
	}
	in := o.Input
	if (in.Width == 0) != (in.Height == 0) {
		v.fail(p+"input", "set both width and height, or neither to take them from the model (found %dx%d)", in.Width, in.Height)
	}
	if in.Width < 0 || in.Width > 8192 || in.Height < 0 || in.Height > 8192 {
		v.fail(p+"input", "width and height must be within 0..8192 pixels (found %dx%d)", in.Width, in.Height)
	}
	if o.Channels != "bgr" && o.Channels != "rgb" {
		v.fail(p+"channels", "want bgr or rgb (found %q)", o.Channels)
	}
	if o.Scale != 255 && o.Scale != 1 {
		v.fail(p+"scale", "want 255 (pixels 0..255) or 1 (pixels 0..1) (found %v)", o.Scale)
	}
	if len(o.Mean) != 0 && len(o.Mean) != 3 {
		v.fail(p+"mean", "want 3 values, one per input channel (found %d)", len(o.Mean))
	}
	for i, m := range o.Mean {
		if math.IsNaN(m) || math.IsInf(m, 0) {
			v.fail(fmt.Sprintf("%smean[%d]", p, i), "must be a finite number (found %v)", m)
		}
	}
	if len(o.Std) != 0 && len(o.Std) != 3 {
		v.fail(p+"std", "want 3 values, one per input channel (found %d)", len(o.Std))
	}
	for i, s := range o.Std {
		if !(s > 0) || math.IsInf(s, 0) {
			v.fail(fmt.Sprintf("%sstd[%d]", p, i), "must be positive (found %v)", s)
		}
	}
	if o.Letterbox.Pad < 0 || o.Letterbox.Pad > 255 {
		v.fail(p+"letterbox.pad", "must be a pixel value within 0..255 (found %d)", o.Letterbox.Pad)
	}
	if o.Letterbox.Place != onnx.PlaceTopLeft && o.Letterbox.Place != onnx.PlaceCenter {
		v.fail(p+"letterbox.place", "want top-left or center (found %q)", o.Letterbox.Place)
	}
	if o.Layout != onnx.LayoutAuto && !slices.Contains(onnx.Layouts, o.Layout) {
		names := []string{string(onnx.LayoutAuto)}
		for _, l := range onnx.Layouts {
			names = append(names, string(l))
		}
		v.fail(p+"layout", "want %s (found %q)", orList(names), o.Layout)
	}
	if !(o.ScoreThreshold >= 0 && o.ScoreThreshold <= 1) {
		v.fail(p+"score_threshold", "must be within 0..1 (found %v)", o.ScoreThreshold)
	}
	names := make([]string, 0, len(o.ClassThresholds))
	for n := range o.ClassThresholds {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		if t := o.ClassThresholds[n]; !(t >= 0 && t <= 1) {
			v.fail(p+"class_thresholds."+n, "must be within 0..1 (found %v)", t)
		}
	}
	for i, cl := range o.Classes {
		v.name(fmt.Sprintf("%sclasses[%d]", p, i), cl)
	}
	switch o.NMS.Kind {
	case onnx.NMSGreedy, onnx.NMSDIoU, onnx.NMSNone:
	default:
		v.fail(p+"nms.kind", "want greedy, diou or none (found %q)", o.NMS.Kind)
	}
	if !(o.NMS.IoU >= 0 && o.NMS.IoU <= 1) {
		v.fail(p+"nms.iou", "must be within 0..1 (found %v)", o.NMS.IoU)
	}
	if o.MaxDetections < 1 {
		v.fail(p+"max_detections", "must be at least 1 (found %d)", o.MaxDetections)
	}
	if !(o.MinBox >= 0) || math.IsInf(o.MinBox, 0) {
		v.fail(p+"min_box", "must not be negative (found %v)", o.MinBox)
	}
}

// Limits of the ONNX detector's session settings.
const (
	MaxONNXSessions       = 64 // inference sessions (each holds a copy of the model)
	MaxDisabledOptimizers = 16
)

// rawHeads checks the anchors, scale_x_y and cfg of raw anchor heads
// (within the limits of detect/onnx: 1..3 heads, 1..9 anchors each).
func (v *validator) rawHeads(p string, o ONNX, darknet bool) {
	if len(o.Anchors) > 3 {
		v.fail(p+"anchors", "want 1 to 3 groups, one per head (found %d)", len(o.Anchors))
	}
	for i, g := range o.Anchors {
		if len(g) < 2 || len(g) > 18 || len(g)%2 != 0 {
			v.fail(fmt.Sprintf("%sanchors[%d]", p, i), "want 1 to 9 width,height pairs in input pixels (found %d values)", len(g))
			continue
		}
		for _, a := range g {
			if !(a > 0) || math.IsInf(a, 0) {
				v.fail(fmt.Sprintf("%sanchors[%d]", p, i), "width and height must be positive input pixels (found %v)", a)
				break
			}
		}
	}
	if len(o.ScaleXY) > 1 && len(o.Anchors) > 0 && len(o.ScaleXY) != len(o.Anchors) {
		v.fail(p+"scale_x_y", "want one value per anchors group or one for all (found %d for %d groups)", len(o.ScaleXY), len(o.Anchors))
	}
	for i, s := range o.ScaleXY {
		if !(s >= 1 && s <= 4) {
			v.fail(fmt.Sprintf("%sscale_x_y[%d]", p, i), "must be within 1..4 (found %v)", s)
		}
	}
	if o.Cfg != "" {
		switch {
		case darknet:
			v.fail(p+"cfg", "the model is a Darknet cfg already; cfg is for ONNX models converted from Darknet")
		case len(o.Anchors) > 0:
			v.fail(p+"cfg", "set anchors or cfg, not both")
		default:
			v.file(p+"cfg", o.Cfg, "a Darknet cfg")
		}
	}
}

// file checks that a path from the site file names a readable file.
func (v *validator) file(path, p, what string) {
	if !v.pathLen(path, p) {
		return
	}
	full := v.c.Resolve(p)
	if st, err := os.Stat(full); err != nil {
		v.fail(path, "cannot open %q: %v", full, unwrapPathErr(err))
	} else if st.IsDir() {
		v.fail(path, "%q is a folder, want %s", full, what)
	}
}
