package apeval

import (
	"fmt"
	"math"
	"testing"

	"tallyd/detect"
)

func xyxy(x1, y1, x2, y2 float64) detect.Box { return detect.Box{X1: x1, Y1: y1, X2: x2, Y2: y2} }

func near(a, b, tol float64) bool { return math.Abs(a-b) <= tol }

// TestHandWorked works COCO's definition (cocoeval's accumulate: monotone
// precision read at the 101 recall points 0, 0.01, ..., 1, the first point
// whose recall reaches each) by hand on small cases.
func TestHandWorked(t *testing.T) {
	gt := func(im int, b detect.Box) Truth { return Truth{Image: im, Class: "person", Box: b} }
	dt := func(im int, b detect.Box, s float64) Detection {
		return Detection{Image: im, Class: "person", Box: b, Score: s}
	}
	a, b := xyxy(0, 0, 10, 10), xyxy(20, 0, 30, 10)
	tests := []struct {
		name       string
		dets       []Detection
		truth      []Truth
		ap50, ap95 float64
	}{
		// TP 0.9, FP 0.8, TP 0.7 on 2 truths: recall 0.5, 0.5, 1; precision
		// 1, 0.5, 0.667 -> monotone 1, 0.667, 0.667. Recall points 0..0.50
		// (51) read 1, 0.51..1 (50) read 2/3: AP = (51 + 50*2/3) / 101.
		{"tp fp tp", []Detection{dt(1, a, 0.9), dt(1, xyxy(50, 50, 60, 60), 0.8), dt(1, b, 0.7)},
			[]Truth{gt(1, a), gt(1, b)}, (51 + 50*2.0/3) / 101, (51 + 50*2.0/3) / 101},
		// One truth found of two: recall reaches 0.5 only: 51 of 101 points
		// read precision 1 (the "missing prediction" case of torchmetrics'
		// tests, whose comment says about 0.5).
		{"missed truth", []Detection{dt(1, a, 0.9)}, []Truth{gt(1, a), gt(2, a)}, 51.0 / 101, 51.0 / 101},
		// A false positive scoring above the true one, on an image without
		// truth: precision 0, then 0.5 at recall 1 -> 0.5 at every point.
		{"false positive first", []Detection{dt(2, a, 0.95), dt(1, a, 0.9)}, []Truth{gt(1, a)}, 0.5, 0.5},
		// IoU 50/80 = 0.625: a match at 0.50, 0.55, 0.60, not from 0.65 on:
		// AP50 1, AP50:95 3/10.
		{"iou 0.625", []Detection{dt(1, xyxy(0, 0, 10, 5), 0.9)}, []Truth{gt(1, xyxy(0, 0, 10, 8))}, 1, 0.3},
		// Two detections of one truth: the better-scoring one matches, the
		// other is a false positive after full recall: AP 1.
		{"duplicate", []Detection{dt(1, a, 0.9), dt(1, a, 0.8)}, []Truth{gt(1, a)}, 1, 1},
		// No detections: AP 0.
		{"nothing found", nil, []Truth{gt(1, a)}, 0, 0},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			r := Evaluate(tt.dets, tt.truth, 0)
			if !near(r.AP50, tt.ap50, 1e-12) || !near(r.AP5095, tt.ap95, 1e-12) {
				t.Fatalf("AP50 %v AP50:95 %v, want %v %v", r.AP50, r.AP5095, tt.ap50, tt.ap95)
			}
		})
	}
	// No truth at all: no class to average.
	if r := Evaluate([]Detection{dt(1, a, 0.5)}, nil, 0); !math.IsNaN(r.AP50) || len(r.Classes) != 0 {
		t.Fatalf("no truth: %+v", r)
	}
}

// TestTorchmetricsFixture: the bounding-box example of torchmetrics'
// MeanAveragePrecision tests, whose expected values are "official
// pycocotools results calculated from a subset of
// https://github.com/cocodataset/cocoapi/tree/master/results" (the
// docstring of _compare_fn), printed to three decimals.
// Source: github.com/Lightning-AI/torchmetrics, tests/detection/test_map.py
// at commit e013ff136e80f3a778417966971eab392cb762a7 (_inputs and
// _compare_fn): map 0.706, map_50 0.901, map_75 0.846, map_per_class
// [0.725, 0.800, 0.454, -1 (no truth), 0.650, 0.900].
func TestTorchmetricsFixture(t *testing.T) {
	type img struct {
		boxes  [][4]float64
		scores []float64
		labels []int
	}
	preds := []img{
		{[][4]float64{{258.15, 41.29, 606.41, 285.07}}, []float64{0.236}, []int{4}},                                         // coco image id 42
		{[][4]float64{{61.00, 22.75, 565.00, 632.42}, {12.66, 3.32, 281.26, 275.23}}, []float64{0.318, 0.726}, []int{3, 2}}, // 73
		{[][4]float64{
			{87.87, 276.25, 384.29, 379.43}, {0.00, 3.66, 142.15, 316.06}, {296.55, 93.96, 314.97, 152.79},
			{328.94, 97.05, 342.49, 122.98}, {356.62, 95.47, 372.33, 147.55}, {464.08, 105.09, 495.74, 146.99},
			{276.11, 103.84, 291.44, 150.72},
		}, []float64{0.546, 0.3, 0.407, 0.611, 0.335, 0.805, 0.953}, []int{4, 1, 0, 0, 0, 0, 0}}, // 74
		{[][4]float64{{0.00, 2.87, 601.00, 421.52}}, []float64{0.699}, []int{5}}, // 133
	}
	target := []img{
		{[][4]float64{{214.1500, 41.2900, 562.4100, 285.0700}}, nil, []int{4}},
		{[][4]float64{{13.00, 22.75, 548.98, 632.42}, {1.66, 3.32, 270.26, 275.23}}, nil, []int{2, 2}},
		{[][4]float64{
			{61.87, 276.25, 358.29, 379.43}, {2.75, 3.66, 162.15, 316.06}, {295.55, 93.96, 313.97, 152.79},
			{326.94, 97.05, 340.49, 122.98}, {356.62, 95.47, 372.33, 147.55}, {462.08, 105.09, 493.74, 146.99},
			{277.11, 103.84, 292.44, 150.72},
		}, nil, []int{4, 1, 0, 0, 0, 0, 0}},
		{[][4]float64{{13.99, 2.87, 640.00, 421.52}}, nil, []int{5}},
	}
	var dets []Detection
	var truth []Truth
	for im, p := range preds {
		for k, b := range p.boxes {
			dets = append(dets, Detection{Image: im, Class: fmt.Sprint(p.labels[k]), Box: xyxy(b[0], b[1], b[2], b[3]), Score: p.scores[k]})
		}
	}
	for im, g := range target {
		for k, b := range g.boxes {
			truth = append(truth, Truth{Image: im, Class: fmt.Sprint(g.labels[k]), Box: xyxy(b[0], b[1], b[2], b[3])})
		}
	}
	r := Evaluate(dets, truth, 100)
	t.Logf("AP50:95 %.5f AP50 %.5f AP75 %.5f", r.AP5095, r.AP50, r.AP75)
	const tol = 0.0005 // the reference prints three decimals
	if !near(r.AP5095, 0.706, tol) || !near(r.AP50, 0.901, tol) || !near(r.AP75, 0.846, tol) {
		t.Errorf("AP50:95 %.4f AP50 %.4f AP75 %.4f, want 0.706 0.901 0.846", r.AP5095, r.AP50, r.AP75)
	}
	want := map[string]float64{"0": 0.725, "1": 0.800, "2": 0.454, "4": 0.650, "5": 0.900}
	if len(r.Classes) != len(want) {
		t.Fatalf("%d classes, want %d (class 3 has no truth and is left out)", len(r.Classes), len(want))
	}
	for _, c := range r.Classes {
		if !near(c.AP5095, want[c.Class], tol) {
			t.Errorf("class %s: AP50:95 %.4f, want %.3f", c.Class, c.AP5095, want[c.Class])
		}
	}
}

func BenchmarkEvaluate(b *testing.B) {
	var dets []Detection
	var truth []Truth
	for im := 0; im < 100; im++ {
		for k := 0; k < 20; k++ {
			x := float64(k * 30)
			truth = append(truth, Truth{Image: im, Class: "person", Box: xyxy(x, 0, x+20, 50)})
			dets = append(dets, Detection{Image: im, Class: "person", Box: xyxy(x+2, 1, x+21, 52), Score: float64(k%7) / 7})
		}
	}
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		Evaluate(dets, truth, 0)
	}
}
