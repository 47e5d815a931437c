package config

import (
	"fmt"
	"math"
	"os"
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
	Library      string      `yaml:"library"`
	Threads      ONNXThreads `yaml:"threads"`
	Optimization string      `yaml:"optimization"` // disabled, basic, extended, all
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
}

// ONNXThreads sizes ONNX Runtime's thread pools; 0 lets it choose.
type ONNXThreads struct {
	Intra int `yaml:"intra"`
	Inter int `yaml:"inter"`
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
	if o.Model == "" {
		v.fail(p+"model", "is required")
	} else {
		v.file(p+"model", o.Model, "an ONNX model")
	}
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
