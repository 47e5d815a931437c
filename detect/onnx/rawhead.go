package onnx

import (
	"fmt"
	"math"
	"slices"
	"strings"
)

// Raw anchor heads (YOLOv3, YOLOv4 and their exports): each head is a grid
// of H x W cells; every cell holds A anchors of tx, ty, tw, th, objectness
// and C class scores. The box of anchor a in cell (cx, cy) of a head with
// stride (sx, sy) is, in input pixels,
//
//	bx = (sigmoid(tx)*s - (s-1)/2 + cx) * sx     (YOLOv4's scale_x_y = s)
//	by = (sigmoid(ty)*s - (s-1)/2 + cy) * sy
//	bw = anchor_w * exp(tw),  bh = anchor_h * exp(th)
//	score = sigmoid(objectness) * sigmoid(class)
//
// YOLOv3 (Redmon & Farhadi, "YOLOv3: An Incremental Improvement", 2018,
// section 2.1) is s = 1; YOLOv4 (Bochkovskiy, Wang, Liao, "YOLOv4: Optimal
// Speed and Accuracy of Object Detection", 2020, section 3.3, "eliminate
// grid sensitivity") multiplies the sigmoid by s > 1. The stride of a head
// is the input size divided by its grid size.

// maxHeads bounds the number of raw heads (YOLOv3/v4 have 3, the tiny
// variants 2).
const maxHeads = 3

// maxAnchors bounds the anchors of one head.
const maxAnchors = 9

// rawHead is one raw anchor head of a layout plan.
type rawHead struct {
	Out     int          // output index
	H, W    int          // grid size
	A       int          // anchors
	Anchors [][2]float64 // width, height in input pixels; nil until known
	Scale   float64      // scale_x_y
}

// HeadSpec is what decoding raw anchor heads needs beyond the shapes:
// anchors per head from the finest (smallest stride) to the coarsest,
// scale_x_y per head, and whether sigmoid is applied already.
type HeadSpec struct {
	Anchors        [][][2]float64
	ScaleXY        []float64
	SigmoidApplied bool
	From           string // where the anchors came from, for messages ("anchors" or a cfg path)
	// Strides, when known (from a Darknet cfg), are the heads' strides, which
	// the model's heads must have too.
	Strides []int
}

// isRawLayout reports whether l is one of the raw anchor-head layouts.
func isRawLayout(l Layout) bool { return l == LayoutAnchorHeads || l == LayoutAnchorHeadsLast }

// headGrid reads an output as a raw head for an inW x inH input: its grid
// size and channel count, channels first or last. ok is false when the
// shape is no such head (the grid must divide the input by the same whole
// stride along both axes).
func headGrid(t TensorInfo, inW, inH int, last bool) (h, w, ch int, ok bool) {
	d := t.Dims
	switch {
	case len(d) == 4 && !last:
		ch, h, w = int(d[1]), int(d[2]), int(d[3])
	case len(d) == 4 && last:
		h, w, ch = int(d[1]), int(d[2]), int(d[3])
	case len(d) == 5 && last: // [B, H, W, A, 5+C]
		h, w, ch = int(d[1]), int(d[2]), int(d[3]*d[4])
		if d[3] < 0 || d[4] < 0 {
			ch = -1
		}
	default:
		return 0, 0, 0, false
	}
	if h < 1 || w < 1 || ch < 6 || inW%w != 0 || inH%h != 0 || inW/w != inH/h || inW/w < 2 {
		return 0, 0, 0, false
	}
	return h, w, ch, true
}

// rawByShape reads 1..3 outputs as raw heads, channels first or (when that
// fails) channels last; ok is false when they are not.
func rawByShape(outputs []TensorInfo, inW, inH int) (Layout, bool) {
	if len(outputs) < 1 || len(outputs) > maxHeads {
		return "", false
	}
	for _, l := range []Layout{LayoutAnchorHeads, LayoutAnchorHeadsLast} {
		ok := true
		for _, o := range outputs {
			if _, _, _, fits := headGrid(o, inW, inH, l == LayoutAnchorHeadsLast); !fits {
				ok = false
				break
			}
		}
		if ok {
			return l, true
		}
	}
	return "", false
}

// rawPlan checks the outputs against a raw layout and orders the heads from
// the finest grid (smallest stride) to the coarsest. With a spec, the
// anchors decide the class count and must match the heads; without one the
// class count comes from the names (names > 0) or, failing that, from a
// guess of 3 anchors per head (common practice for YOLOv3/v4) that the
// caller replaces once anchors are known.
func rawPlan(outputs []TensorInfo, inW, inH int, l Layout, names int, spec *HeadSpec) (layoutPlan, error) {
	if len(outputs) < 1 || len(outputs) > maxHeads {
		return layoutPlan{}, fmt.Errorf("want 1 to %d head outputs, found %d", maxHeads, len(outputs))
	}
	last := l == LayoutAnchorHeadsLast
	form := "[B,A*(5+C),H,W]"
	if last {
		form = "[B,H,W,A*(5+C)] or [B,H,W,A,5+C]"
	}
	heads := make([]rawHead, len(outputs))
	chans := make([]int, len(outputs))
	for i, o := range outputs {
		h, w, ch, ok := headGrid(o, inW, inH, last)
		if !ok {
			return layoutPlan{}, fmt.Errorf("output %s is no %s head %s whose H and W divide the %dx%d input by one whole stride",
				o, l, form, inW, inH)
		}
		heads[i] = rawHead{Out: i, H: h, W: w}
		chans[i] = ch
	}
	order := make([]int, len(heads))
	for i := range order {
		order[i] = i
	}
	slices.SortStableFunc(order, func(a, b int) int { return heads[b].W - heads[a].W }) // finest grid first
	sorted := make([]rawHead, len(heads))
	sortedCh := make([]int, len(heads))
	for k, i := range order {
		sorted[k], sortedCh[k] = heads[i], chans[i]
	}
	for k := 1; k < len(sorted); k++ {
		if sorted[k].W == sorted[k-1].W {
			return layoutPlan{}, fmt.Errorf("outputs %s and %s have the same grid %dx%d; each head must have its own stride",
				outputs[sorted[k-1].Out], outputs[sorted[k].Out], sorted[k].W, sorted[k].H)
		}
	}
	classes := 0
	for k := range sorted {
		hd, ch, o := &sorted[k], sortedCh[k], outputs[sorted[k].Out]
		var a int
		switch {
		case spec != nil:
			if len(spec.Anchors) != len(sorted) {
				return layoutPlan{}, fmt.Errorf("%s gives %d anchor groups for %d heads (%s); want one group per head, finest first",
					spec.From, len(spec.Anchors), len(sorted), shapes(outputs))
			}
			a = len(spec.Anchors[k])
			if k < len(spec.Strides) && spec.Strides[k] != inW/hd.W {
				return layoutPlan{}, fmt.Errorf("output %s (head %d of %d) has stride %d, but head %d of %s has stride %d",
					o, k+1, len(sorted), inW/hd.W, k+1, spec.From, spec.Strides[k])
			}
			if ch%a != 0 || ch/a < 6 {
				return layoutPlan{}, fmt.Errorf("output %s (head %d of %d, stride %d): %d channels fit no class count with the %d anchors %s gives it (want %d*(5+C))",
					o, k+1, len(sorted), inW/hd.W, ch, a, spec.From, a)
			}
		case names > 0:
			if ch%(5+names) != 0 {
				return layoutPlan{}, fmt.Errorf("output %s: %d channels fit no anchor count for %d classes (want A*(5+%d))", o, ch, names, names)
			}
			a = ch / (5 + names)
		default:
			a = 3
			for ch%a != 0 || ch/a < 6 {
				a--
			}
		}
		c := ch/a - 5
		if classes != 0 && c != classes {
			return layoutPlan{}, fmt.Errorf("output %s gives %d classes, the finer heads %d", o, c, classes)
		}
		if names > 0 && c != names {
			return layoutPlan{}, fmt.Errorf("output %s gives %d classes with %d anchors, but %d class names are known", o, c, a, names)
		}
		classes = c
		hd.A = a
		hd.Scale = 1
		if spec != nil {
			hd.Anchors = spec.Anchors[k]
			if len(spec.ScaleXY) == 1 {
				hd.Scale = spec.ScaleXY[0]
			} else if len(spec.ScaleXY) > k {
				hd.Scale = spec.ScaleXY[k]
			}
		}
	}
	if spec != nil && len(spec.ScaleXY) > 1 && len(spec.ScaleXY) != len(sorted) {
		return layoutPlan{}, fmt.Errorf("%s gives %d scale_x_y values for %d heads; want one per head or one for all", spec.From, len(spec.ScaleXY), len(sorted))
	}
	p := layoutPlan{Layout: l, Classes: classes, Heads: sorted}
	if spec != nil {
		p.Sigmoid = spec.SigmoidApplied
	}
	return p, nil
}

// headSpecOf builds the head spec from the configured anchors, or from the
// Darknet cfg (Config.DarknetCfg, or the model when it is a .cfg). nil
// means none is known.
func headSpecOf(cfg Config) (*HeadSpec, error) {
	switch {
	case len(cfg.Anchors) > 0:
		spec := &HeadSpec{ScaleXY: cfg.ScaleXY, SigmoidApplied: cfg.SigmoidApplied, From: "anchors"}
		if len(cfg.Anchors) > maxHeads {
			return nil, settingErr("anchors", fmt.Sprintf("want 1 to %d groups, one per head (found %d)", maxHeads, len(cfg.Anchors)))
		}
		for i, g := range cfg.Anchors {
			if len(g) < 2 || len(g)%2 != 0 || len(g) > 2*maxAnchors {
				return nil, settingErr(fmt.Sprintf("anchors[%d]", i), fmt.Sprintf("want 1 to %d width,height pairs (found %d values)", maxAnchors, len(g)))
			}
			var pairs [][2]float64
			for j := 0; j < len(g); j += 2 {
				if !(g[j] > 0 && g[j+1] > 0) || math.IsInf(g[j], 0) || math.IsInf(g[j+1], 0) {
					return nil, settingErr(fmt.Sprintf("anchors[%d]", i), fmt.Sprintf("width and height must be positive input pixels (found %v,%v)", g[j], g[j+1]))
				}
				pairs = append(pairs, [2]float64{g[j], g[j+1]})
			}
			spec.Anchors = append(spec.Anchors, pairs)
		}
		for i, s := range cfg.ScaleXY {
			if !(s >= 1 && s <= 4) {
				return nil, settingErr(fmt.Sprintf("scale_x_y[%d]", i), fmt.Sprintf("must be within 1..4 (found %v)", s))
			}
		}
		return spec, nil
	case cfg.DarknetCfg != "" || isDarknetPath(cfg.Model):
		path, key := cfg.DarknetCfg, "cfg"
		if path == "" {
			path, key = cfg.Model, "model"
		}
		dc, err := readDarknetCfg(path)
		if err != nil {
			return nil, modelErr(key, err.Error())
		}
		spec := dc.headSpec()
		spec.SigmoidApplied = cfg.SigmoidApplied
		return spec, nil
	}
	return nil, nil
}

// headsHelp says how to give anchors, for errors about missing ones.
const headsHelp = "set anchors (one group of width,height pairs in input pixels per head, finest head first) and scale_x_y, or cfg (the Darknet .cfg the model came from)"

// rawHeads decodes image i of raw anchor heads.
func (d *decoder) rawHeads(outs []tensor, i int, dst []candidate) ([]candidate, error) {
	last := d.plan.Layout == LayoutAnchorHeadsLast
	for _, hd := range d.plan.Heads {
		if hd.Anchors == nil {
			return dst, fmt.Errorf("%s: no anchors; %s (open the model with onnx.New and anchors)", d.plan.Layout, headsHelp)
		}
		if hd.Out >= len(outs) {
			return dst, fmt.Errorf("want %d outputs, got %d", hd.Out+1, len(outs))
		}
		data, dims, err := imageOf(outs[hd.Out], i)
		if err != nil {
			return dst, err
		}
		k := 5 + d.classes
		var h, w int
		switch {
		case !last && len(dims) == 3 && dims[0] == hd.A*k:
			h, w = dims[1], dims[2]
		case last && len(dims) == 3 && dims[2] == hd.A*k:
			h, w = dims[0], dims[1]
		case last && len(dims) == 4 && dims[2] == hd.A && dims[3] == k:
			h, w = dims[0], dims[1]
		default:
			return dst, fmt.Errorf("head output %d has shape %v, want %d*(5+%d) channels", hd.Out, dims, hd.A, d.classes)
		}
		if h < 1 || w < 1 {
			return dst, fmt.Errorf("head output %d has an empty grid %v", hd.Out, dims)
		}
		dst = d.rawHead(hd, data, h, w, last, dst)
	}
	return dst, nil
}

func sigmoid(t float64) float64 { return 1 / (1 + math.Exp(-t)) }

// rawHead decodes one head of h x w cells.
func (d *decoder) rawHead(hd rawHead, data []float32, h, w int, last bool, dst []candidate) []candidate {
	k := 5 + d.classes
	cells := h * w
	sx, sy := float64(d.inW)/float64(w), float64(d.inH)/float64(h)
	act := sigmoid
	if d.plan.Sigmoid {
		act = func(t float64) float64 { return t }
	}
	minThr := math.Inf(1)
	for _, t := range d.thr {
		minThr = min(minThr, t)
	}
	s := hd.Scale
	var at func(a, ch, cell int) float64
	if last {
		at = func(a, ch, cell int) float64 { return float64(data[(cell*hd.A+a)*k+ch]) }
	} else {
		at = func(a, ch, cell int) float64 { return float64(data[(a*k+ch)*cells+cell]) }
	}
	for a := 0; a < hd.A; a++ {
		aw, ah := hd.Anchors[a][0], hd.Anchors[a][1]
		for cell := 0; cell < cells; cell++ {
			obj := act(at(a, 4, cell))
			if !(obj >= minThr) {
				continue // the score obj * class <= obj cannot pass
			}
			c, best := -1, math.Inf(-1)
			for j := 0; j < d.classes; j++ {
				if v := at(a, 5+j, cell); v > best {
					c, best = j, v
				}
			}
			score := obj * act(best)
			if !d.keep(c, score) {
				continue
			}
			cx, cy := float64(cell%w), float64(cell/w)
			bx := (act(at(a, 0, cell))*s - (s-1)/2 + cx) * sx
			by := (act(at(a, 1, cell))*s - (s-1)/2 + cy) * sy
			bw := aw * math.Exp(at(a, 2, cell))
			bh := ah * math.Exp(at(a, 3, cell))
			dst = append(dst, candidate{bx - bw/2, by - bh/2, bx + bw/2, by + bh/2, score, c})
		}
	}
	return dst
}

// headsString describes the plan's heads for Info and errors, e.g.
// "stride 8: 3 anchors 10x13 16x30 33x23, scale_x_y 1.2".
func (p layoutPlan) headsString() string {
	var parts []string
	for _, h := range p.Heads {
		var as []string
		for _, a := range h.Anchors {
			as = append(as, fmt.Sprintf("%gx%g", a[0], a[1]))
		}
		parts = append(parts, fmt.Sprintf("grid %dx%d: %d anchors %s, scale_x_y %g", h.W, h.H, h.A, strings.Join(as, " "), h.Scale))
	}
	return strings.Join(parts, "; ")
}
