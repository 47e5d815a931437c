// Package events turns tracks into counting events: line crossings, zone
// entries, exits and dwell alerts, emitted as CloudEvents and summed into
// per-rule totals. It also holds the plain-geometry reference counter used to
// score the rule engine against ground truth.
//
// Coordinates are source pixels with y pointing down, as in detect.Box.
package events

import "math"

// Point is a position in source pixels (y grows downwards).
type Point struct {
	X, Y float64
}

// Sub is the vector p-q.
func (p Point) Sub(q Point) Point { return Point{p.X - q.X, p.Y - q.Y} }

// Cross is the z component of the cross product (a-o) x (b-o). With y up it
// is positive when o→a→b turns counter-clockwise; with image coordinates
// (y down) a positive value means b lies to the right of o→a as drawn on
// screen.
func Cross(o, a, b Point) float64 {
	return (a.X-o.X)*(b.Y-o.Y) - (a.Y-o.Y)*(b.X-o.X)
}

func sign(v float64) int {
	switch {
	case v > 0:
		return 1
	case v < 0:
		return -1
	}
	return 0
}

// onSegment reports whether p, already known to be collinear with a-b, lies
// within the bounding box of a-b, hence on the closed segment.
func onSegment(a, b, p Point) bool {
	return math.Min(a.X, b.X) <= p.X && p.X <= math.Max(a.X, b.X) &&
		math.Min(a.Y, b.Y) <= p.Y && p.Y <= math.Max(a.Y, b.Y)
}

// SegmentsIntersect reports whether the closed segments p1-p2 and q1-q2 share
// at least one point: a proper crossing, an endpoint touching the other
// segment, or a collinear overlap. Degenerate segments (a single point) are
// handled as points.
func SegmentsIntersect(p1, p2, q1, q2 Point) bool {
	d1 := sign(Cross(q1, q2, p1))
	d2 := sign(Cross(q1, q2, p2))
	d3 := sign(Cross(p1, p2, q1))
	d4 := sign(Cross(p1, p2, q2))
	if d1*d2 < 0 && d3*d4 < 0 {
		return true
	}
	switch {
	case d1 == 0 && onSegment(q1, q2, p1):
		return true
	case d2 == 0 && onSegment(q1, q2, p2):
		return true
	case d3 == 0 && onSegment(p1, p2, q1):
		return true
	case d4 == 0 && onSegment(p1, p2, q2):
		return true
	}
	return false
}

// SegmentsCrossProperly reports whether p1-p2 and q1-q2 cross at a single
// point interior to both segments (no endpoint touches the other segment).
func SegmentsCrossProperly(p1, p2, q1, q2 Point) bool {
	return sign(Cross(q1, q2, p1))*sign(Cross(q1, q2, p2)) < 0 &&
		sign(Cross(p1, p2, q1))*sign(Cross(p1, p2, q2)) < 0
}

// SegmentIntersection returns the point where two non-parallel segments
// meet. ok is false when they do not meet or are parallel (collinear
// overlaps have no single intersection point).
func SegmentIntersection(p1, p2, q1, q2 Point) (pt Point, ok bool) {
	r := p2.Sub(p1)
	s := q2.Sub(q1)
	den := r.X*s.Y - r.Y*s.X
	if den == 0 || !SegmentsIntersect(p1, p2, q1, q2) {
		return Point{}, false
	}
	qp := q1.Sub(p1)
	t := (qp.X*s.Y - qp.Y*s.X) / den
	t = math.Min(math.Max(t, 0), 1)
	return Point{p1.X + t*r.X, p1.Y + t*r.Y}, true
}

// PointInPolygon reports whether p lies inside the simple polygon poly
// (vertices in order, closing edge implied) by the even-odd crossing-number
// rule: a horizontal ray from p is counted against each edge whose end
// points lie strictly on different sides of the ray (the half-open rule
// that makes a ray through a vertex count once). Points exactly on the
// boundary may be classified either way; callers that care use
// DistancePolygonBoundary. Fewer than three vertices is never inside.
func PointInPolygon(p Point, poly []Point) bool {
	n := len(poly)
	if n < 3 {
		return false
	}
	in := false
	j := n - 1
	for i := 0; i < n; i++ {
		a, b := poly[i], poly[j]
		if (a.Y > p.Y) != (b.Y > p.Y) {
			// x of the edge at height p.Y; the division is safe because
			// a.Y != b.Y here.
			x := a.X + (p.Y-a.Y)*(b.X-a.X)/(b.Y-a.Y)
			if p.X < x {
				in = !in
			}
		}
		j = i
	}
	return in
}

// DistanceToSegment is the Euclidean distance from p to the closed segment
// a-b (to a when a == b). It is exactly symmetric in a and b, so that a
// polygon's boundary distance does not depend on its orientation.
func DistanceToSegment(p, a, b Point) float64 {
	if b.X < a.X || (b.X == a.X && b.Y < a.Y) {
		a, b = b, a
	}
	ab := b.Sub(a)
	ap := p.Sub(a)
	l2 := ab.X*ab.X + ab.Y*ab.Y
	if l2 == 0 {
		return math.Hypot(ap.X, ap.Y)
	}
	t := (ap.X*ab.X + ap.Y*ab.Y) / l2
	t = math.Min(math.Max(t, 0), 1)
	return math.Hypot(p.X-(a.X+t*ab.X), p.Y-(a.Y+t*ab.Y))
}

// DistanceToLine is the distance from p to the infinite line through a and b
// (to a when a == b).
func DistanceToLine(p, a, b Point) float64 {
	l := math.Hypot(b.X-a.X, b.Y-a.Y)
	if l == 0 {
		return math.Hypot(p.X-a.X, p.Y-a.Y)
	}
	return math.Abs(Cross(a, b, p)) / l
}

// DistancePolygonBoundary is the distance from p to the nearest edge of the
// polygon, closing edge included (+Inf for an empty polygon).
func DistancePolygonBoundary(p Point, poly []Point) float64 {
	d := math.Inf(1)
	for i := range poly {
		j := (i + 1) % len(poly)
		d = math.Min(d, DistanceToSegment(p, poly[i], poly[j]))
	}
	return d
}

// SelfIntersection finds two edges of the polygon that make it non-simple.
// Edge i runs from poly[i] to poly[(i+1)%n]. It reports two non-adjacent
// edges that share a point (which also catches a repeated vertex), or two
// adjacent edges that fold back over each other along a line (a spike or a
// collinear triangle), with i < j. Polygons of fewer than three vertices are
// not its concern and report ok == false.
func SelfIntersection(poly []Point) (i, j int, ok bool) {
	n := len(poly)
	if n < 3 {
		return 0, 0, false
	}
	edge := func(k int) (Point, Point) { return poly[k], poly[(k+1)%n] }
	for i = 0; i < n; i++ {
		a, b := edge(i)
		for j = i + 1; j < n; j++ {
			c, d := edge(j)
			adjacent := j == i+1 || (i == 0 && j == n-1)
			if !adjacent {
				if SegmentsIntersect(a, b, c, d) {
					return i, j, true
				}
				continue
			}
			// Adjacent edges share one vertex v; they overlap beyond it when
			// the other two end points are collinear with v and on the same
			// side of it.
			var v, x, y Point
			if j == i+1 {
				v, x, y = b, a, d
			} else { // i == 0, j == n-1: edge j ends where edge i starts
				v, x, y = a, b, c
			}
			if Cross(v, x, y) == 0 {
				dx, dy := x.Sub(v), y.Sub(v)
				if dx.X*dy.X+dx.Y*dy.Y > 0 || x == v || y == v {
					return i, j, true
				}
			}
		}
	}
	return 0, 0, false
}

// PolygonArea is the signed area by the shoelace formula: positive when the
// vertices run counter-clockwise in y-up axes, which is clockwise as seen on
// screen with image coordinates.
func PolygonArea(poly []Point) float64 {
	var s float64
	for i := range poly {
		j := (i + 1) % len(poly)
		s += poly[i].X*poly[j].Y - poly[j].X*poly[i].Y
	}
	return s / 2
}
