package onnx

// Engine names an inference engine.
type Engine string

// Inference engines.
const (
	// EngineORT is ONNX Runtime 1.24.1 through onnxruntime_go.
	EngineORT Engine = "ort"
	// EngineOpenCV is OpenCV's DNN module (4.6): the independent reference and
	// the fallback where the ONNX Runtime library is unavailable.
	EngineOpenCV Engine = "opencv"
)

// Layout names how a model's output tensors hold its detections.
type Layout string

// Output layouts (B = batch, N = candidate rows, C = classes).
const (
	// LayoutAuto picks the layout from the output shapes (see ChooseLayout).
	LayoutAuto Layout = "auto"
	// LayoutYOLOXGrid is one output [B, N, 5+C] of raw anchor-free grid
	// predictions at strides 8, 16, 32: tx, ty, tw, th, objectness, classes;
	// centre = (t + cell) * stride, size = exp(t) * stride.
	LayoutYOLOXGrid Layout = "yolox-grid"
	// LayoutRowsObj is one output [B, N, 5+C] of decoded rows: cx, cy, w, h
	// in input pixels, objectness, class scores.
	LayoutRowsObj Layout = "rows-obj"
	// LayoutRowsNoObjCHW is one output [B, 4+C, N], channels first: cx, cy,
	// w, h in input pixels, then class scores, no objectness.
	LayoutRowsNoObjCHW Layout = "rows-noobj-chw"
	// LayoutBoxesScores is two outputs: boxes [B, N, 1, 4] (or [B, N, 4]) as
	// x1, y1, x2, y2 fractions of the input size, and scores [B, N, C].
	LayoutBoxesScores Layout = "boxes-scores"
	// LayoutE2E is one output [B, K, 6] of final detections with the
	// model's own NMS: x1, y1, x2, y2 in input pixels, score, class index.
	LayoutE2E Layout = "e2e"
	// LayoutAnchorHeads is one to three raw anchor-based heads (YOLOv3/v4),
	// channels first: [B, A*(5+C), H, W] per head, A anchors of tx, ty, tw,
	// th, objectness, C classes; decoded with Config.Anchors (see rawhead.go).
	LayoutAnchorHeads Layout = "anchor-heads"
	// LayoutAnchorHeadsLast is the same heads channels last: [B, H, W,
	// A*(5+C)] (or [B, H, W, A, 5+C]).
	LayoutAnchorHeadsLast Layout = "anchor-heads-last"
)

// Layouts lists the concrete layouts in the order they are documented.
var Layouts = []Layout{LayoutYOLOXGrid, LayoutRowsObj, LayoutRowsNoObjCHW, LayoutBoxesScores, LayoutE2E,
	LayoutAnchorHeads, LayoutAnchorHeadsLast}

// Placement is where the resized image sits in the letterboxed input.
type Placement string

// Letterbox placements.
const (
	PlaceTopLeft Placement = "top-left"
	PlaceCenter  Placement = "center"
)

// NMSKind selects the suppression of duplicate boxes.
type NMSKind string

// Kinds of non-maximum suppression.
const (
	NMSGreedy NMSKind = "greedy" // IoU-based greedy NMS (detect.NMS)
	NMSDIoU   NMSKind = "diou"   // DIoU-NMS (Zheng et al., AAAI 2020; detect.DIoUNMS)
	NMSNone   NMSKind = "none"
)

// Config configures one ONNX detector. Paths are used as given.
type Config struct {
	Model  string // .onnx file
	Names  string // class names file, one per line; "" = model metadata, else class0, class1, ...
	Engine Engine
	// Library is the ONNX Runtime shared library; "" looks in the usual places
	// (see ResolveLibrary).
	Library string
	// IntraThreads and InterThreads size each ONNX Runtime session's thread
	// pools; 0 lets ONNX Runtime choose (every core). OpenCV's engine uses
	// OpenCV's own pool. Default 1: one thread per session, one session per
	// core (see Sessions).
	IntraThreads, InterThreads int
	// Sessions is how many inferences run at once, each on its own session
	// (a copy of the model); 0 = SessionCount's default: one per core divided
	// by IntraThreads for ONNX Runtime, one for OpenCV.
	Sessions int
	// Spin lets ONNX Runtime's pool threads spin-wait for work between
	// operators (ONNX Runtime's own default). Off by default: with more than
	// one intra-op thread the spinning threads take the cores from the other
	// sessions and the decoders. It does nothing with one intra-op thread.
	Spin bool
	// DisableOptimizers names ONNX Runtime graph optimisers to skip
	// (session config entry optimization.disable_specified_optimizers).
	// Default QuickGeluFusion: fusing x*sigmoid(x) into QuickGelu makes ONNX
	// Runtime reorder the blocked convolution layout around every activation
	// of a SiLU network; on graphs without the pattern it changes nothing.
	DisableOptimizers []string
	// Optimization is ONNX Runtime's graph optimisation level: disabled,
	// basic, extended or all.
	Optimization string
	// Width and Height set the input size when the model's is dynamic; 0 =
	// take it from the model.
	Width, Height int
	RGB           bool       // feed R,G,B planes instead of B,G,R
	Scale         float64    // value of a full-intensity pixel before mean/std: 255 or 1
	Mean, Std     [3]float64 // per input channel, in the model's channel order: (v - mean) / std
	Pad           uint8      // letterbox fill value (pixel scale, before Scale/mean/std)
	Place         Placement
	Layout        Layout
	// ScoreThreshold keeps detections scoring at least this much;
	// ClassThresholds overrides it per class name.
	ScoreThreshold  float64
	ClassThresholds map[string]float64
	Classes         []string // allow-list by name; empty keeps every class
	NMS             NMSKind
	IoU             float64 // NMS overlap threshold
	ClassAware      bool    // only boxes of the same class suppress each other
	MaxDetections   int     // per frame, after NMS; 0 = no limit
	MinBox          float64 // smallest width and height kept, in source pixels
	// Anchors are the anchor boxes of raw anchor heads: one group per head,
	// from the finest head (smallest stride) to the coarsest, each group
	// width, height pairs in input pixels. Empty: from DarknetCfg.
	Anchors [][]float64
	// ScaleXY is YOLOv4's scale_x_y per head (same order) or one value for
	// every head; empty means 1 (YOLOv3).
	ScaleXY []float64
	// SigmoidApplied says the raw heads already hold sigmoid outputs for x,
	// y, objectness and class scores (w and h stay logs).
	SigmoidApplied bool
	// DarknetCfg is the Darknet .cfg an ONNX model was converted from: its
	// [yolo] sections give the anchors and scale_x_y. Unused when Model is a
	// .cfg itself.
	DarknetCfg string
}

// Defaults is a Config for a YOLOX-style model: BGR 0..255, top-left
// letterbox padded with 114, automatic layout, greedy class-aware NMS.
func Defaults() Config {
	return Config{
		Engine: EngineORT, IntraThreads: 1, InterThreads: 1, DisableOptimizers: []string{"QuickGeluFusion"},
		Optimization: "all", Scale: 255, Std: [3]float64{1, 1, 1}, Pad: 114,
		Place: PlaceTopLeft, Layout: LayoutAuto, ScoreThreshold: 0.25, NMS: NMSGreedy, IoU: 0.45,
		ClassAware: true, MaxDetections: 100,
	}
}
