package onnx

import (
	"fmt"
	"math"
)

// candidate is one detection before NMS, in input pixels.
type candidate struct {
	x1, y1, x2, y2 float64
	score          float64
	class          int
}

// gridCell is the cell offset and stride of one YOLOX output row.
type gridCell struct{ gx, gy, stride float32 }

// decoder turns one image's output tensors into candidates that pass the
// score thresholds and the class allow-list.
type decoder struct {
	plan     layoutPlan
	inW, inH int
	classes  int        // class scores per row; for e2e the number of valid class indices
	thr      []float64  // per class: lowest score kept; +Inf for classes not allowed
	grid     []gridCell // yolox-grid only
}

func newDecoder(plan layoutPlan, inW, inH, classes int, thr []float64) *decoder {
	d := &decoder{plan: plan, inW: inW, inH: inH, classes: classes, thr: thr}
	if plan.Layout == LayoutYOLOXGrid {
		for _, s := range yoloxStrides {
			for gy := 0; gy < inH/s; gy++ {
				for gx := 0; gx < inW/s; gx++ {
					d.grid = append(d.grid, gridCell{float32(gx), float32(gy), float32(s)})
				}
			}
		}
	}
	return d
}

// imageOf returns image i's slice of an output and its dimensions without the
// batch dimension, checking that the data is as long as the shape says.
func imageOf(t tensor, i int) ([]float32, []int, error) {
	if len(t.dims) < 2 || t.dims[0] <= i {
		return nil, nil, fmt.Errorf("output of shape %v has no image %d", t.dims, i)
	}
	per := 1
	for _, d := range t.dims[1:] {
		if d < 0 || (d > 0 && per > math.MaxInt32/d) {
			return nil, nil, fmt.Errorf("output shape %v is out of range", t.dims)
		}
		per *= d
	}
	if len(t.data) < (i+1)*per {
		return nil, nil, fmt.Errorf("output of shape %v holds only %d values", t.dims, len(t.data))
	}
	return t.data[i*per : (i+1)*per], t.dims[1:], nil
}

// decode appends image i's candidates to dst.
func (d *decoder) decode(outs []tensor, i int, dst []candidate) ([]candidate, error) {
	if isRawLayout(d.plan.Layout) {
		return d.rawHeads(outs, i, dst)
	}
	if d.plan.Boxes >= len(outs) || d.plan.Scores >= len(outs) {
		return dst, fmt.Errorf("want %d outputs, got %d", max(d.plan.Boxes, d.plan.Scores)+1, len(outs))
	}
	data, dims, err := imageOf(outs[d.plan.Boxes], i)
	if err != nil {
		return dst, err
	}
	switch d.plan.Layout {
	case LayoutYOLOXGrid, LayoutRowsObj:
		if len(dims) != 2 || dims[1] != 5+d.classes {
			return dst, fmt.Errorf("%s output has shape %v, want [N,%d]", d.plan.Layout, dims, 5+d.classes)
		}
		if d.plan.Layout == LayoutYOLOXGrid && dims[0] != len(d.grid) {
			return dst, fmt.Errorf("yolox-grid output has %d rows, want %d grid cells", dims[0], len(d.grid))
		}
		return d.rowsObj(data, dims[0], dst), nil
	case LayoutRowsNoObjCHW:
		if len(dims) != 2 || dims[0] != 4+d.classes {
			return dst, fmt.Errorf("rows-noobj-chw output has shape %v, want [%d,N]", dims, 4+d.classes)
		}
		return d.rowsNoObjCHW(data, dims[1], dst), nil
	case LayoutBoxesScores:
		scores, sdims, err := imageOf(outs[d.plan.Scores], i)
		if err != nil {
			return dst, err
		}
		n := dims[0]
		if (len(dims) != 3 && len(dims) != 2) || dims[len(dims)-1] != 4 || len(data) != 4*n {
			return dst, fmt.Errorf("boxes output has shape %v, want [N,1,4] or [N,4]", dims)
		}
		if len(sdims) != 2 || sdims[0] != n || sdims[1] != d.classes {
			return dst, fmt.Errorf("scores output has shape %v, want [%d,%d]", sdims, n, d.classes)
		}
		return d.boxesScores(data, scores, n, dst), nil
	case LayoutE2E:
		if len(dims) != 2 || dims[1] != 6 {
			return dst, fmt.Errorf("e2e output has shape %v, want [K,6]", dims)
		}
		return d.e2e(data, dims[0], dst), nil
	}
	return dst, fmt.Errorf("unknown layout %q", d.plan.Layout)
}

// best returns the class with the highest score (the first on ties; NaN
// scores never win) and that score.
func best(scores []float32) (int, float64) {
	c, s := -1, math.Inf(-1)
	for k, v := range scores {
		if float64(v) > s {
			c, s = k, float64(v)
		}
	}
	return c, s
}

// keep reports whether a class-c detection scoring s passes its threshold
// (false for NaN and infinite scores, and for classes not allowed).
func (d *decoder) keep(c int, s float64) bool {
	return c >= 0 && c < len(d.thr) && s >= d.thr[c] && !math.IsInf(s, 0)
}

// rowsObj decodes [N, 5+C] rows: YOLOX grid rows (raw tx, ty, tw, th) or
// decoded cx, cy, w, h. Score = objectness * best class score.
func (d *decoder) rowsObj(data []float32, n int, dst []candidate) []candidate {
	k := 5 + d.classes
	grid := d.plan.Layout == LayoutYOLOXGrid
	for r := 0; r < n; r++ {
		row := data[r*k : (r+1)*k]
		c, cs := best(row[5:])
		s := float64(row[4]) * cs
		if !d.keep(c, s) {
			continue
		}
		cx, cy, w, h := float64(row[0]), float64(row[1]), float64(row[2]), float64(row[3])
		if grid {
			g := d.grid[r]
			st := float64(g.stride)
			cx, cy = (cx+float64(g.gx))*st, (cy+float64(g.gy))*st
			w, h = math.Exp(w)*st, math.Exp(h)*st
		}
		dst = append(dst, candidate{cx - w/2, cy - h/2, cx + w/2, cy + h/2, s, c})
	}
	return dst
}

// rowsNoObjCHW decodes [4+C, N]: channel-first cx, cy, w, h and class scores.
func (d *decoder) rowsNoObjCHW(data []float32, n int, dst []candidate) []candidate {
	for r := 0; r < n; r++ {
		c, s := -1, math.Inf(-1)
		for k := 0; k < d.classes; k++ {
			if v := float64(data[(4+k)*n+r]); v > s {
				c, s = k, v
			}
		}
		if !d.keep(c, s) {
			continue
		}
		cx, cy := float64(data[r]), float64(data[n+r])
		w, h := float64(data[2*n+r]), float64(data[3*n+r])
		dst = append(dst, candidate{cx - w/2, cy - h/2, cx + w/2, cy + h/2, s, c})
	}
	return dst
}

// boxesScores decodes boxes [N, 4] (x1, y1, x2, y2 as fractions of the
// input) with scores [N, C].
func (d *decoder) boxesScores(boxes, scores []float32, n int, dst []candidate) []candidate {
	w, h := float64(d.inW), float64(d.inH)
	for r := 0; r < n; r++ {
		c, s := best(scores[r*d.classes : (r+1)*d.classes])
		if !d.keep(c, s) {
			continue
		}
		b := boxes[r*4 : r*4+4]
		dst = append(dst, candidate{float64(b[0]) * w, float64(b[1]) * h, float64(b[2]) * w, float64(b[3]) * h, s, c})
	}
	return dst
}

// e2e decodes [K, 6] final rows: x1, y1, x2, y2 (input pixels), score, class.
func (d *decoder) e2e(data []float32, n int, dst []candidate) []candidate {
	for r := 0; r < n; r++ {
		row := data[r*6 : r*6+6]
		cf := float64(row[5])
		if !(cf >= 0 && cf < float64(d.classes)) || cf != math.Trunc(cf) {
			continue
		}
		c, s := int(cf), float64(row[4])
		if !d.keep(c, s) {
			continue
		}
		dst = append(dst, candidate{float64(row[0]), float64(row[1]), float64(row[2]), float64(row[3]), s, c})
	}
	return dst
}
