package onnx

import (
	"fmt"
	"strings"
)

// yoloxStrides are the strides of YOLOX's three output levels (Ge et al.,
// "YOLOX: Exceeding YOLO Series in 2021", arXiv:2107.08430; the shared
// model's README).
var yoloxStrides = []int{8, 16, 32}

// gridCells is the number of YOLOX grid rows for an inW x inH input, or -1
// when the size is not a multiple of the largest stride.
func gridCells(inW, inH int) int {
	if inW%32 != 0 || inH%32 != 0 {
		return -1
	}
	n := 0
	for _, s := range yoloxStrides {
		n += (inW / s) * (inH / s)
	}
	return n
}

// maxE2EClasses bounds class indices of an end-to-end model whose class
// names are not given: rows naming a class beyond it are dropped.
const maxE2EClasses = 1000

// e2eMaxRows is the most rows auto picks the e2e layout for when an output
// is [B, K, 6] (final detections are few; decoded rows are thousands).
const e2eMaxRows = 1000

// layoutPlan is the chosen layout with what the decoders need from the shapes.
type layoutPlan struct {
	Layout  Layout
	Classes int // number of class scores per row (0 when the model does not say: e2e)
	Boxes   int // output index of the boxes (boxes-scores) or of the single output
	Scores  int // output index of the scores (boxes-scores)
	// Heads are the raw anchor heads (anchor-heads layouts), finest first.
	Heads   []rawHead
	Sigmoid bool // raw heads hold sigmoid outputs already
}

// layoutHelp lists the supported layouts for error messages.
const layoutHelp = "yolox-grid [B,N,5+C] (N = grid cells at strides 8/16/32), rows-obj [B,N,5+C], " +
	"rows-noobj-chw [B,4+C,N], boxes-scores [B,N,1,4] + [B,N,C], e2e [B,K,6], " +
	"anchor-heads 1-3 x [B,A*(5+C),H,W], anchor-heads-last 1-3 x [B,H,W,A*(5+C)]"

// ChooseLayout picks or checks the layout of a model's outputs for an
// inW x inH input. want is LayoutAuto or the configured layout; names is the
// number of class names known (0 when unknown), used to tell rows with and
// without objectness apart and to catch a names file for another model.
//
// Auto rules, in order: two outputs shaped [B,N,1,4] or [B,N,4] and [B,N,C]
// are boxes-scores; one output [B,K,6] with K not a grid count and at most
// 1000 is e2e; one output [B,A,D] with A >= D is yolox-grid when A is the
// grid count for the input size, else rows-obj; with A < D it is
// rows-noobj-chw. One to three outputs [B,A*(5+C),H,W] (or channels last)
// whose grids divide the input by whole strides are raw anchor heads: those
// need anchors, which the shapes do not give (New plans them with the
// configured anchors, rawHeadPlan), so auto asks for them.
func ChooseLayout(outputs []TensorInfo, inW, inH int, want Layout, names int) (layoutPlan, error) {
	for _, o := range outputs {
		if o.ElemType != elemFloat {
			return layoutPlan{}, fmt.Errorf("output %s has element type %d, want float32 (1)", o, o.ElemType)
		}
	}
	if isRawLayout(want) {
		plan, err := rawPlan(outputs, inW, inH, want, names, nil)
		if err != nil {
			return layoutPlan{}, fmt.Errorf("output shapes %s do not fit layout %s: %v (supported: %s)", shapes(outputs), want, err, layoutHelp)
		}
		return plan, nil
	}
	if want == "" || want == LayoutAuto {
		if l, ok := rawByShape(outputs, inW, inH); ok {
			return layoutPlan{}, fmt.Errorf("output shapes %s are raw anchor heads (layout %s): %s", shapes(outputs), l, headsHelp)
		}
		plan, ok := autoLayout(outputs, inW, inH)
		if !ok {
			return layoutPlan{}, fmt.Errorf("output shapes %s fit none of the supported layouts: %s", shapes(outputs), layoutHelp)
		}
		if names > 0 && plan.Classes > 0 && plan.Classes != names {
			return layoutPlan{}, fmt.Errorf("output shapes %s read as layout %s give %d classes, but %d class names are known; set layout or check the names",
				shapes(outputs), plan.Layout, plan.Classes, names)
		}
		return plan, nil
	}
	plan, reason := fitLayout(outputs, inW, inH, want)
	if reason != "" {
		return layoutPlan{}, fmt.Errorf("output shapes %s do not fit layout %s: %s (supported: %s)", shapes(outputs), want, reason, layoutHelp)
	}
	if names > 0 && plan.Classes > 0 && plan.Classes != names {
		return layoutPlan{}, fmt.Errorf("layout %s of output shapes %s gives %d classes, but %d class names are known",
			want, shapes(outputs), plan.Classes, names)
	}
	return plan, nil
}

func autoLayout(outputs []TensorInfo, inW, inH int) (layoutPlan, bool) {
	if len(outputs) == 2 {
		p, reason := fitLayout(outputs, inW, inH, LayoutBoxesScores)
		return p, reason == ""
	}
	if len(outputs) != 1 || len(outputs[0].Dims) != 3 {
		return layoutPlan{}, false
	}
	a, d := outputs[0].Dims[1], outputs[0].Dims[2]
	grid := int64(gridCells(inW, inH))
	switch {
	case d == 6 && a != grid && (a < 0 || a <= e2eMaxRows):
		return layoutPlan{Layout: LayoutE2E}, true
	case d < 0 || (a >= 0 && a < d): // channels first: [B, 4+C, N]
		if a < 5 {
			return layoutPlan{}, false
		}
		return layoutPlan{Layout: LayoutRowsNoObjCHW, Classes: int(a - 4)}, true
	case d < 6:
		return layoutPlan{}, false
	case a == grid:
		return layoutPlan{Layout: LayoutYOLOXGrid, Classes: int(d - 5)}, true
	default:
		return layoutPlan{Layout: LayoutRowsObj, Classes: int(d - 5)}, true
	}
}

// fitLayout checks the outputs against one layout; reason says why not.
func fitLayout(outputs []TensorInfo, inW, inH int, l Layout) (layoutPlan, string) {
	if l == LayoutBoxesScores {
		if len(outputs) != 2 {
			return layoutPlan{}, fmt.Sprintf("want 2 outputs, found %d", len(outputs))
		}
		for bi := 0; bi < 2; bi++ {
			b, s := outputs[bi].Dims, outputs[1-bi].Dims
			boxesOK := (len(b) == 4 && b[2] == 1 && b[3] == 4) || (len(b) == 3 && b[2] == 4)
			if !boxesOK || len(s) != 3 || s[2] < 1 || !sameOrDynamic(b[1], s[1]) {
				continue
			}
			return layoutPlan{Layout: l, Classes: int(s[2]), Boxes: bi, Scores: 1 - bi}, ""
		}
		return layoutPlan{}, "want boxes [B,N,1,4] or [B,N,4] and scores [B,N,C] with the same N"
	}
	if len(outputs) != 1 {
		return layoutPlan{}, fmt.Sprintf("want 1 output, found %d", len(outputs))
	}
	dims := outputs[0].Dims
	if len(dims) != 3 {
		return layoutPlan{}, fmt.Sprintf("want rank 3, found rank %d", len(dims))
	}
	a, d := dims[1], dims[2]
	switch l {
	case LayoutYOLOXGrid:
		grid := gridCells(inW, inH)
		switch {
		case grid < 0:
			return layoutPlan{}, fmt.Sprintf("the input size %dx%d is not a multiple of 32", inW, inH)
		case a != int64(grid):
			return layoutPlan{}, fmt.Sprintf("want N = %d grid cells for a %dx%d input, found %s", grid, inW, inH, dimStr(a))
		case d < 6:
			return layoutPlan{}, fmt.Sprintf("want rows of 5+C >= 6 values, found %s", dimStr(d))
		}
		return layoutPlan{Layout: l, Classes: int(d - 5)}, ""
	case LayoutRowsObj:
		if d < 6 {
			return layoutPlan{}, fmt.Sprintf("want rows of 5+C >= 6 values, found %s", dimStr(d))
		}
		return layoutPlan{Layout: l, Classes: int(d - 5)}, ""
	case LayoutRowsNoObjCHW:
		if a < 5 {
			return layoutPlan{}, fmt.Sprintf("want 4+C >= 5 channels first, found %s", dimStr(a))
		}
		return layoutPlan{Layout: l, Classes: int(a - 4)}, ""
	case LayoutE2E:
		if d != 6 {
			return layoutPlan{}, fmt.Sprintf("want rows of 6 values (x1,y1,x2,y2,score,class), found %s", dimStr(d))
		}
		return layoutPlan{Layout: l}, ""
	}
	return layoutPlan{}, fmt.Sprintf("unknown layout %q", l)
}

func sameOrDynamic(a, b int64) bool { return a < 0 || b < 0 || a == b }

func dimStr(d int64) string {
	if d < 0 {
		return "a dynamic size"
	}
	return fmt.Sprint(d)
}

func shapes(ts []TensorInfo) string {
	parts := make([]string, len(ts))
	for i, t := range ts {
		parts[i] = t.String()
	}
	return strings.Join(parts, ", ")
}
