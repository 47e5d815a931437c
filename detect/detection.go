// Package detect turns frames into detections: boxes in source pixels with a
// class and a score. The package itself is pure Go (types, NMS, the
// detections-file replayer); detectors that need OpenCV or ONNX Runtime live in
// sub-packages so that the tracker and the rules never pull in cgo.
package detect

import "math"

// DefaultClass is the class name given to the boxes of detectors that do not
// classify (background subtraction, a detections file without classes).
const DefaultClass = "person"

// Box is an axis-aligned rectangle in source pixels: X1,Y1 is the top-left
// corner and X2,Y2 the bottom-right one (exclusive edges, as in the
// MOTChallenge format where right = left + width).
type Box struct {
	X1, Y1, X2, Y2 float64
}

// BoxXYWH builds a Box from a left, top, width, height quadruple.
func BoxXYWH(x, y, w, h float64) Box { return Box{X1: x, Y1: y, X2: x + w, Y2: y + h} }

// W is the box width (0 for an empty box).
func (b Box) W() float64 { return math.Max(0, b.X2-b.X1) }

// H is the box height (0 for an empty box).
func (b Box) H() float64 { return math.Max(0, b.Y2-b.Y1) }

// Area is W*H.
func (b Box) Area() float64 { return b.W() * b.H() }

// Center is the centre point of the box.
func (b Box) Center() (x, y float64) { return (b.X1 + b.X2) / 2, (b.Y1 + b.Y2) / 2 }

// Intersect is the overlap of two boxes (empty when they do not overlap).
func (b Box) Intersect(o Box) Box {
	r := Box{math.Max(b.X1, o.X1), math.Max(b.Y1, o.Y1), math.Min(b.X2, o.X2), math.Min(b.Y2, o.Y2)}
	if r.X2 < r.X1 {
		r.X2 = r.X1
	}
	if r.Y2 < r.Y1 {
		r.Y2 = r.Y1
	}
	return r
}

// IoU is the intersection over union of two boxes, 0 when both are empty
// (common practice: Jaccard index of the two rectangles).
func (b Box) IoU(o Box) float64 {
	inter := b.Intersect(o).Area()
	union := b.Area() + o.Area() - inter
	if union <= 0 {
		return 0
	}
	return inter / union
}

// Clip limits the box to a w x h frame.
func (b Box) Clip(w, h float64) Box {
	c := func(v, hi float64) float64 { return math.Min(math.Max(v, 0), hi) }
	return Box{c(b.X1, w), c(b.Y1, h), c(b.X2, w), c(b.Y2, h)}
}

// Detection is one object found in one frame.
type Detection struct {
	Box   Box
	Score float64 // 0..1; 1 for detectors without a confidence
	Class string  // class name, e.g. "person"
}
