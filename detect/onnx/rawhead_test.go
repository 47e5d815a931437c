package onnx

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strings"
	"testing"

	"tallyd/capture"
	"tallyd/detect"
)

// The box formulas checked below:
//
//	YOLOv3 (Redmon & Farhadi, "YOLOv3: An Incremental Improvement", 2018,
//	section 2.1, figure 2): bx = sigmoid(tx) + cx, by = sigmoid(ty) + cy (in
//	cells), bw = pw * exp(tw), bh = ph * exp(th) (pw, ph: the anchor).
//	YOLOv4 (Bochkovskiy, Wang, Liao, "YOLOv4: Optimal Speed and Accuracy of
//	Object Detection", 2020, section 3.3 "eliminate grid sensitivity"): the
//	sigmoid is multiplied by scale_x_y > 1; the form sigmoid(t)*s - (s-1)/2
//	is the one Darknet's yolo layer uses (from memory; the same form as
//	OpenCV's region layer, which TestDarknetMatchesOpenCVRegion checks
//	against number by number).

// rawTensor builds one head of A anchors x (5+C) values on an h x w grid,
// channels first or last, from values given per (anchor, channel, cell).
func rawTensor(a, k, h, w int, last bool, set map[[3]int]float32, fill func(ch int) float32) tensor {
	data := make([]float32, a*k*h*w)
	for ai := 0; ai < a; ai++ {
		for ch := 0; ch < k; ch++ {
			for cell := 0; cell < h*w; cell++ {
				v := fill(ch)
				if s, ok := set[[3]int{ai, ch, cell}]; ok {
					v = s
				}
				if last {
					data[(cell*a+ai)*k+ch] = v
				} else {
					data[(ai*k+ch)*h*w+cell] = v
				}
			}
		}
	}
	if last {
		return tensor{dims: []int{1, h, w, a * k}, data: data}
	}
	return tensor{dims: []int{1, a * k, h, w}, data: data}
}

func logit(p float64) float32 { return float32(math.Log(p / (1 - p))) }

// TestRawHeadDecodeHandWorked decodes one head of a 64x64 input (2x2
// cells, stride 32), 1 anchor of 20x10 px, 2 classes, for YOLOv3 (s = 1)
// and YOLOv4 (s = 2), logits and sigmoid already applied, channels first
// and last. Cell (1,0) holds sigmoid(tx) = 0.25, sigmoid(ty) = 0.75, tw =
// ln 3, th = 0, objectness 0.8, class 1 at 0.5.
func TestRawHeadDecodeHandWorked(t *testing.T) {
	const inW, inH = 64, 64
	tests := []struct {
		scale          float64
		wantCX, wantCY float64
	}{
		// YOLOv3: bx = (0.25 + 1) * 32 = 40, by = (0.75 + 0) * 32 = 24.
		{1, 40, 24},
		// YOLOv4, s = 2: bx = (0.25*2 - 0.5 + 1) * 32 = 32 (the cell's left
		// edge, which YOLOv3's sigmoid reaches only at -inf);
		// by = (0.75*2 - 0.5 + 0) * 32 = 32 (the cell's bottom edge).
		{2, 32, 32},
	}
	for _, tt := range tests {
		for _, last := range []bool{false, true} {
			for _, applied := range []bool{false, true} {
				t.Run(fmt.Sprintf("s=%g/last=%v/sigmoid=%v", tt.scale, last, applied), func(t *testing.T) {
					p := func(v float64) float32 { // a probability as the model gives it
						if applied {
							return float32(v)
						}
						return logit(v)
					}
					set := map[[3]int]float32{
						{0, 0, 1}: p(0.25), {0, 1, 1}: p(0.75), {0, 2, 1}: float32(math.Log(3)), {0, 3, 1}: 0,
						{0, 4, 1}: p(0.8), {0, 5, 1}: p(0.1), {0, 6, 1}: p(0.5),
					}
					fill := func(ch int) float32 {
						if ch == 4 {
							return p(0.001)
						}
						return 0
					}
					l := LayoutAnchorHeads
					if last {
						l = LayoutAnchorHeadsLast
					}
					tn := rawTensor(1, 7, 2, 2, last, set, fill)
					info := []TensorInfo{{Name: "head", ElemType: elemFloat, Dims: []int64{1, 7, 2, 2}}}
					if last {
						info[0].Dims = []int64{1, 2, 2, 7}
					}
					spec := &HeadSpec{Anchors: [][][2]float64{{{20, 10}}}, ScaleXY: []float64{tt.scale}, SigmoidApplied: applied, From: "anchors"}
					plan, err := rawPlan(info, inW, inH, l, 0, spec)
					if err != nil {
						t.Fatal(err)
					}
					if plan.Classes != 2 || plan.Heads[0].A != 1 {
						t.Fatalf("plan %+v, want 2 classes, 1 anchor", plan)
					}
					d := newDecoder(plan, inW, inH, 2, []float64{0.1, 0.1})
					got, err := d.decode([]tensor{tn}, 0, nil)
					if err != nil {
						t.Fatal(err)
					}
					// w = 20 * exp(ln 3) = 60, h = 10 * exp(0) = 10; score 0.8 * 0.5 = 0.4.
					want := candidate{tt.wantCX - 30, tt.wantCY - 5, tt.wantCX + 30, tt.wantCY + 5, 0.4, 1}
					if len(got) != 1 || !closeCand(got[0], want, 1e-5) {
						t.Fatalf("got %+v, want [%+v]", got, want)
					}
				})
			}
		}
	}
}

func closeCand(a, b candidate, tol float64) bool {
	return a.class == b.class && math.Abs(a.x1-b.x1) <= tol && math.Abs(a.y1-b.y1) <= tol &&
		math.Abs(a.x2-b.x2) <= tol && math.Abs(a.y2-b.y2) <= tol && math.Abs(a.score-b.score) <= tol
}

// fixtureAnchors pair with the heads of testdata/onnx/anchor-heads*.onnx
// (scripts/gen-rawhead-fixtures.py): finest head (stride 16) first.
var fixtureAnchors = [][]float64{{8, 12, 20, 24}, {30, 20, 50, 40}}

// TestRawHeadFixtures runs the generated raw-head models through both
// engines (frames 128x128: source = 2 x input pixels). Worked by hand from
// the values the generator sets (its docstring):
//
//	stride 16, anchor 1 (20x24), cell (2,1): bx = (0.5 + 2)*16 = 40,
//	by = (0.5 + 1)*16 = 24, w = 20*e^0 = 20, h = 24*e^(ln 2) = 48,
//	score = sigmoid(ln 3)^2 = 0.75*0.75 = 0.5625, car
//	-> input box 30,0 - 50,48 -> source 60,0 - 100,96.
//	stride 32, anchor 0 (30x20), cell (1,0): sigmoid(ln 3) = 0.75,
//	s = 1: bx = (0.75 + 1)*32 = 56; s = 1.2: bx = (0.75*1.2 - 0.1 + 1)*32
//	= 57.6; by = (0.5 + 0)*32 = 16 for any s; w = 30*2 = 60, h = 20;
//	score = 0.5*0.75 = 0.375, person -> source x 2*(bx-30) .. 128 (clipped),
//	y 12..52.
func TestRawHeadFixtures(t *testing.T) {
	car := det("car", 0.5625, 60, 0, 100, 96)
	for _, eng := range engines(t) {
		for _, model := range []string{"anchor-heads.onnx", "anchor-heads-last.onnx"} {
			for _, scale := range []float64{1, 1.2} {
				t.Run(fmt.Sprintf("%s/%s/s=%g", eng, model, scale), func(t *testing.T) {
					cfg := testConfig(t, fixture(model), eng)
					cfg.Names, cfg.ScoreThreshold = fixture("fixture.names"), 0.1
					cfg.Anchors, cfg.ScaleXY = fixtureAnchors, []float64{1, scale}
					d, err := New(cfg)
					if err != nil {
						t.Fatal(err)
					}
					defer d.Close()
					wantLayout := LayoutAnchorHeads
					if strings.Contains(model, "last") {
						wantLayout = LayoutAnchorHeadsLast
					}
					if got := d.Info().Layout; got != wantLayout {
						t.Fatalf("layout %s, want %s", got, wantLayout)
					}
					bx := 56.0
					if scale == 1.2 {
						bx = 57.6
					}
					person := det("person", 0.375, 2*(bx-30), 12, 128, 52)
					f := uniformFrame(128, 128, 0)
					defer f.Close()
					got, err := d.Detect(context.Background(), []*capture.Frame{f})
					if err != nil {
						t.Fatal(err)
					}
					checkDetsTol(t, got[0], []detect.Detection{car, person}, 1e-4)
				})
			}
		}
	}
}

func checkDetsTol(t *testing.T, got, want []detect.Detection, tol float64) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("got %d detections %+v, want %d %+v", len(got), got, len(want), want)
	}
	for i := range got {
		g, w := got[i], want[i]
		if g.Class != w.Class || math.Abs(g.Score-w.Score) > tol || math.Abs(g.Box.X1-w.Box.X1) > tol ||
			math.Abs(g.Box.Y1-w.Box.Y1) > tol || math.Abs(g.Box.X2-w.Box.X2) > tol || math.Abs(g.Box.Y2-w.Box.Y2) > tol {
			t.Errorf("detection %d: got %+v, want %+v", i, g, w)
		}
	}
}

// TestRawHeadClassCountFromAnchors: without names, the anchors decide the
// class count (16 channels / 2 anchors - 5 = 3 classes), not New's guess.
func TestRawHeadClassCountFromAnchors(t *testing.T) {
	cfg := testConfig(t, fixture("anchor-heads.onnx"), EngineOpenCV)
	cfg.Anchors = fixtureAnchors
	d, err := New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	if got := d.Info().Classes; len(got) != 3 || got[2] != "class2" {
		t.Fatalf("classes %v, want class0..class2", got)
	}
	if h := d.Heads(); !strings.Contains(h, "grid 4x4: 2 anchors 8x12 20x24, scale_x_y 1") {
		t.Fatalf("heads %q", h)
	}
}

// TestRawHeadErrors: each bad input names what is wrong and where.
func TestRawHeadErrors(t *testing.T) {
	tests := []struct {
		name    string
		model   string
		mod     func(*Config)
		key     string
		kind    error
		wantErr string
	}{
		{"auto without anchors", "anchor-heads.onnx", func(c *Config) {}, "anchors", ErrSetting,
			`anchors: "../../testdata/onnx/anchor-heads.onnx": output shapes out32 [batch,16,2,2], out16 [batch,16,4,4] are raw anchor heads (layout anchor-heads): ` + headsHelp},
		{"anchors for 3 heads, model has 2", "anchor-heads.onnx", func(c *Config) {
			c.Anchors = [][]float64{{1, 2}, {3, 4}, {5, 6}}
		}, "anchors", ErrSetting,
			`anchors: "../../testdata/onnx/anchor-heads.onnx": anchors gives 3 anchor groups for 2 heads (out32 [batch,16,2,2], out16 [batch,16,4,4]); want one group per head, finest first`},
		{"anchors that fit no class count", "anchor-heads.onnx", func(c *Config) {
			c.Anchors = [][]float64{{1, 2, 3, 4, 5, 6}, {1, 2}}
		}, "anchors", ErrSetting,
			`anchors: "../../testdata/onnx/anchor-heads.onnx": output out16 [batch,16,4,4] (head 1 of 2, stride 16): 16 channels fit no class count with the 3 anchors anchors gives it (want 3*(5+C))`},
		{"17 channels", "anchor-heads-bad.onnx", func(c *Config) { c.Anchors = [][]float64{{1, 2, 3, 4}} }, "anchors", ErrSetting,
			`anchors: "../../testdata/onnx/anchor-heads-bad.onnx": output out16 [batch,17,4,4] (head 1 of 1, stride 16): 17 channels fit no class count with the 2 anchors anchors gives it (want 2*(5+C))`},
		{"odd anchor values", "anchor-heads.onnx", func(c *Config) { c.Anchors = [][]float64{{1, 2, 3}, {1, 2}} }, "anchors[0]", ErrSetting,
			`anchors[0]: want 1 to 9 width,height pairs (found 3 values)`},
		{"negative anchor", "anchor-heads.onnx", func(c *Config) { c.Anchors = [][]float64{{1, 2}, {-1, 2}} }, "anchors[1]", ErrSetting,
			`anchors[1]: width and height must be positive input pixels (found -1,2)`},
		{"scale_x_y out of range", "anchor-heads.onnx", func(c *Config) { c.Anchors, c.ScaleXY = fixtureAnchors, []float64{1, 0.5} }, "scale_x_y[1]", ErrSetting,
			`scale_x_y[1]: must be within 1..4 (found 0.5)`},
		{"scale_x_y count", "anchor-heads.onnx", func(c *Config) { c.Anchors, c.ScaleXY = fixtureAnchors, []float64{1, 1.1, 1.2} }, "anchors", ErrSetting,
			`anchors: "../../testdata/onnx/anchor-heads.onnx": anchors gives 3 scale_x_y values for 2 heads; want one per head or one for all`},
		{"names for another class count", "anchor-heads.onnx", func(c *Config) {
			c.Anchors, c.Names = [][]float64{{1, 2}, {1, 2}}, fixture("fixture.names")
		}, "anchors", ErrSetting,
			`anchors: "../../testdata/onnx/anchor-heads.onnx": output out16 [batch,16,4,4] gives 11 classes with 1 anchors, but 3 class names are known`},
		{"layout forced on a decoded model", "rows-obj.onnx", func(c *Config) {
			c.Anchors, c.Layout, c.Width, c.Height = fixtureAnchors, LayoutAnchorHeads, 64, 48
		}, "anchors", ErrSetting,
			`anchors: "../../testdata/onnx/rows-obj.onnx": output output [batch,10,8] is no anchor-heads head [B,A*(5+C),H,W] whose H and W divide the 64x48 input by one whole stride`},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			cfg := testConfig(t, fixture(tt.model), EngineOpenCV)
			tt.mod(&cfg)
			d, err := New(cfg)
			if err == nil {
				_ = d.Close()
				t.Fatal("no error")
			}
			var se *SetupError
			if !errors.As(err, &se) || se.Key != tt.key || !errors.Is(err, tt.kind) || err.Error() != tt.wantErr {
				t.Fatalf("error\n got: %v (%#v)\nwant: %s (key %s, %v)", err, se, tt.wantErr, tt.key, tt.kind)
			}
		})
	}
	// New alone (no anchors) asks for them too.
	cfg := testConfig(t, fixture("anchor-heads.onnx"), EngineOpenCV)
	if _, err := New(cfg); err == nil || !strings.Contains(err.Error(), "are raw anchor heads (layout anchor-heads): set anchors") {
		t.Fatalf("New: %v", err)
	}
}
