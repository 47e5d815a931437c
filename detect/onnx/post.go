package onnx

import (
	"cmp"
	"math"
	"slices"

	"tallyd/detect"
)

// preNMSMax bounds the candidates handed to NMS, best first (common
// practice: YOLO post-processing caps NMS input at 30000 boxes).
const preNMSMax = 30000

// post turns candidates into final detections in source pixels.
type post struct {
	names      []string
	nms        NMSKind
	iou        float64
	classAware bool
	maxDets    int
	minBox     float64
}

// finish maps candidates to source pixels, clips them to the frame, drops
// boxes that are not finite or smaller than minBox, runs NMS and keeps the
// best maxDets.
func (p *post) finish(cands []candidate, g Geometry, skipNMS bool) []detect.Detection {
	if len(cands) == 0 {
		return nil
	}
	if len(cands) > preNMSMax {
		slices.SortStableFunc(cands, func(a, b candidate) int { return cmp.Compare(b.score, a.score) })
		cands = cands[:preNMSMax]
	}
	w, h := float64(g.SrcW), float64(g.SrcH)
	dets := make([]detect.Detection, 0, len(cands))
	for _, c := range cands {
		x1, y1 := g.ToSource(c.x1, c.y1)
		x2, y2 := g.ToSource(c.x2, c.y2)
		if !finite(x1, y1, x2, y2, c.score) {
			continue
		}
		b := detect.Box{X1: x1, Y1: y1, X2: x2, Y2: y2}.Clip(w, h)
		if b.X2 <= b.X1 || b.Y2 <= b.Y1 || b.W() < p.minBox || b.H() < p.minBox {
			continue
		}
		dets = append(dets, detect.Detection{Box: b, Score: c.score, Class: p.names[c.class]})
	}
	switch {
	case skipNMS || p.nms == NMSNone:
		slices.SortStableFunc(dets, func(a, b detect.Detection) int { return cmp.Compare(b.Score, a.Score) })
	case p.nms == NMSDIoU:
		dets = detect.DIoUNMS(dets, p.iou, p.classAware)
	default:
		dets = detect.NMS(dets, p.iou, p.classAware)
	}
	if p.maxDets > 0 && len(dets) > p.maxDets {
		dets = dets[:p.maxDets]
	}
	if len(dets) == 0 {
		return nil
	}
	return dets
}

func finite(vs ...float64) bool {
	for _, v := range vs {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return false
		}
	}
	return true
}
