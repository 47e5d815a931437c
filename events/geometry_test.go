package events

import (
	"math"
	"testing"
)

// Worked examples. Each assertion names the text whose rule or example it
// reproduces. Section numbers and rules are quoted from memory; where the
// coordinates are ours, the comment says so.

func TestCrossSignConvention(t *testing.T) {
	o := Point{0, 0}
	// Cormen, Leiserson, Rivest, Stein, "Introduction to Algorithms", 3rd ed.,
	// §33.1 (from memory): p1 x p2 = x1*y2 - x2*y1; if it is positive, p1 is
	// clockwise from p2 with respect to the origin. The x axis is clockwise
	// from the y axis (our example).
	if got := Cross(o, Point{1, 0}, Point{0, 1}); got != 1 {
		t.Errorf("Cross(o, (1,0), (0,1)) = %v, want 1 (CLRS §33.1)", got)
	}
	if got := Cross(o, Point{0, 1}, Point{1, 0}); got != -1 {
		t.Errorf("Cross(o, (0,1), (1,0)) = %v, want -1 (CLRS §33.1)", got)
	}
	// CLRS 3rd ed., Exercise 33.1-3 (from memory): relative to (2,4), (3,5)
	// has polar angle 45 degrees and (3,3) has 315 degrees, so (3,5) is
	// counter-clockwise from (3,3) and the cross product is negative:
	// (1,1) x (1,-1) = 1*(-1) - 1*1 = -2.
	if got := Cross(Point{2, 4}, Point{3, 5}, Point{3, 3}); got != -2 {
		t.Errorf("Cross((2,4), (3,5), (3,3)) = %v, want -2 (CLRS Ex. 33.1-3)", got)
	}
	// CLRS 3rd ed., §33.1, "determining whether consecutive segments turn left
	// or right" (from memory): p0→p1→p2 turns left (counter-clockwise, y up)
	// when (p2-p0) x (p1-p0) < 0, i.e. when Cross(p0, p1, p2) > 0. Our example:
	// (0,0)→(1,0)→(1,1) turns left.
	if got := Cross(Point{0, 0}, Point{1, 0}, Point{1, 1}); got <= 0 {
		t.Errorf("left turn: Cross = %v, want > 0 (CLRS §33.1)", got)
	}
	// de Berg, Cheong, van Kreveld, Overmars, "Computational Geometry:
	// Algorithms and Applications", 3rd ed., §1.1 (from memory): the convex
	// hull algorithm tests whether a point lies to the right of a directed
	// line with this determinant. On screen (y down) a point below a
	// rightward line is on its right: our convention for "in".
	if got := Cross(Point{0, 100}, Point{200, 100}, Point{50, 150}); got <= 0 {
		t.Errorf("point below a rightward line on screen: Cross = %v, want > 0", got)
	}
}

func TestSegmentsIntersectCLRSCases(t *testing.T) {
	// CLRS 3rd ed., §33.1, SEGMENTS-INTERSECT and its Figure 33.3 cases
	// (case list from memory; coordinates ours).
	tests := []struct {
		name           string
		p1, p2, p3, p4 Point
		want           bool
	}{
		// (a) each segment straddles the line containing the other.
		{"a straddle each other", Point{0, 0}, Point{4, 4}, Point{0, 4}, Point{4, 0}, true},
		// (b) p3p4 straddles the line of p1p2, but p1p2 does not straddle the
		// line of p3p4.
		{"b one-sided straddle", Point{0, 0}, Point{4, 0}, Point{5, -1}, Point{5, 1}, false},
		// (c) p3 is collinear with p1p2 and between p1 and p2.
		{"c endpoint on segment", Point{0, 0}, Point{4, 0}, Point{2, 0}, Point{2, 3}, true},
		// (d) p3 is collinear with p1p2 but not between p1 and p2.
		{"d endpoint on line only", Point{0, 0}, Point{4, 0}, Point{6, 0}, Point{6, 3}, false},
		// CLRS Exercise 33.1-2 (from memory): ON-SEGMENT must compare y as
		// well as x; collinear vertical segments show why (our example).
		{"vertical collinear disjoint", Point{0, 0}, Point{0, 10}, Point{0, 20}, Point{0, 30}, false},
		{"vertical collinear overlap", Point{0, 0}, Point{0, 10}, Point{0, 5}, Point{0, 30}, true},
		{"shared endpoint", Point{0, 0}, Point{2, 2}, Point{2, 2}, Point{4, 0}, true},
		{"parallel apart", Point{0, 0}, Point{4, 0}, Point{0, 1}, Point{4, 1}, false},
		{"point on segment", Point{1, 1}, Point{1, 1}, Point{0, 0}, Point{2, 2}, true},
		{"point off segment", Point{1, 2}, Point{1, 2}, Point{0, 0}, Point{2, 2}, false},
	}
	for _, tc := range tests {
		if got := SegmentsIntersect(tc.p1, tc.p2, tc.p3, tc.p4); got != tc.want {
			t.Errorf("%s: SegmentsIntersect = %v, want %v", tc.name, got, tc.want)
		}
	}
}

func TestProperVersusImproper(t *testing.T) {
	// O'Rourke, "Computational Geometry in C", 2nd ed., §1.5 (from memory):
	// IntersectProp is true only when the segments cross at an interior point;
	// Intersect also accepts an endpoint lying on the other segment
	// ("improper" intersection, decided with Between). Coordinates ours.
	a, b := Point{0, 0}, Point{4, 0}
	if !SegmentsCrossProperly(a, b, Point{2, -1}, Point{2, 1}) {
		t.Error("X crossing: SegmentsCrossProperly = false, want true (O'Rourke §1.5)")
	}
	if SegmentsCrossProperly(a, b, Point{2, 0}, Point{2, 3}) {
		t.Error("T junction: SegmentsCrossProperly = true, want false (O'Rourke §1.5)")
	}
	if !SegmentsIntersect(a, b, Point{2, 0}, Point{2, 3}) {
		t.Error("T junction: SegmentsIntersect = false, want true (O'Rourke §1.5)")
	}
	if SegmentsCrossProperly(a, b, Point{1, 0}, Point{3, 0}) {
		t.Error("collinear overlap: SegmentsCrossProperly = true, want false (O'Rourke §1.5)")
	}
}

func TestSegmentIntersection(t *testing.T) {
	p, ok := SegmentIntersection(Point{0, 0}, Point{4, 4}, Point{0, 4}, Point{4, 0})
	if !ok || p != (Point{2, 2}) {
		t.Errorf("diagonals: got %v, %v; want (2,2), true", p, ok)
	}
	if _, ok := SegmentIntersection(Point{0, 0}, Point{4, 0}, Point{1, 0}, Point{3, 0}); ok {
		t.Error("collinear overlap: ok = true, want false (no single point)")
	}
	if _, ok := SegmentIntersection(Point{0, 0}, Point{1, 1}, Point{3, 0}, Point{2, 1}); ok {
		t.Error("lines meet outside both segments: ok = true, want false")
	}
}

func TestPolygonAreaWorked(t *testing.T) {
	// O'Rourke, 2nd ed., §1.3 (from memory): twice the signed area of a
	// triangle is a determinant, positive when the vertices run
	// counter-clockwise; a polygon's area is the sum of the areas of a fan of
	// triangles. Coordinates ours.
	if got := PolygonArea([]Point{{0, 0}, {1, 0}, {0, 1}}); got != 0.5 {
		t.Errorf("ccw unit right triangle: area = %v, want 0.5 (O'Rourke §1.3)", got)
	}
	if got := PolygonArea([]Point{{0, 0}, {0, 1}, {1, 0}}); got != -0.5 {
		t.Errorf("cw unit right triangle: area = %v, want -0.5 (O'Rourke §1.3)", got)
	}
	// L shape: a 4x4 square without its 2x2 top-right quarter, area 12.
	l := []Point{{0, 0}, {4, 0}, {4, 2}, {2, 2}, {2, 4}, {0, 4}}
	if got := PolygonArea(l); got != 12 {
		t.Errorf("L shape: area = %v, want 12", got)
	}
}

func TestPointInPolygonWorked(t *testing.T) {
	// O'Rourke, 2nd ed., §7.4 (from memory): count the crossings of a ray
	// from the point with the edges; an edge counts when one end point is
	// strictly above the ray and the other on or below it, so a ray through a
	// vertex is counted once and a ray along a horizontal edge is handled.
	// Coordinates ours.
	diamond := []Point{{0, -1}, {1, 0}, {0, 1}, {-1, 0}}
	l := []Point{{0, 0}, {4, 0}, {4, 2}, {2, 2}, {2, 4}, {0, 4}}
	tests := []struct {
		name string
		p    Point
		poly []Point
		want bool
	}{
		{"ray through the right vertex", Point{0, 0}, diamond, true},
		{"ray through two vertices, outside", Point{-2, 0}, diamond, false},
		{"ray through a vertex, right of it", Point{2, 0}, diamond, false},
		{"ray along a horizontal edge, inside", Point{1, 2}, l, true},
		{"ray along a horizontal edge, outside", Point{5, 2}, l, false},
		{"in the notch", Point{3, 3}, l, false},
		{"in the foot", Point{3, 1}, l, true},
		{"too few vertices", Point{0, 0}, []Point{{-1, -1}, {1, 1}}, false},
	}
	for _, tc := range tests {
		if got := PointInPolygon(tc.p, tc.poly); got != tc.want {
			t.Errorf("%s: PointInPolygon(%v) = %v, want %v (O'Rourke §7.4)", tc.name, tc.p, got, tc.want)
		}
	}
}

func TestDistances(t *testing.T) {
	a, b := Point{0, 0}, Point{4, 0}
	tests := []struct {
		p    Point
		want float64
	}{
		{Point{2, 3}, 3},  // foot of the perpendicular inside the segment
		{Point{7, 4}, 5},  // nearest is b: 3-4-5 triangle
		{Point{-3, 4}, 5}, // nearest is a
		{Point{1, 0}, 0},
	}
	for _, tc := range tests {
		if got := DistanceToSegment(tc.p, a, b); got != tc.want {
			t.Errorf("DistanceToSegment(%v) = %v, want %v", tc.p, got, tc.want)
		}
	}
	if got := DistanceToSegment(Point{3, 4}, a, a); got != 5 {
		t.Errorf("degenerate segment: %v, want 5", got)
	}
	if got := DistanceToLine(Point{7, 4}, a, b); got != 4 {
		t.Errorf("DistanceToLine = %v, want 4", got)
	}
	sq := []Point{{0, 0}, {10, 0}, {10, 10}, {0, 10}}
	if got := DistancePolygonBoundary(Point{3, 5}, sq); got != 3 {
		t.Errorf("DistancePolygonBoundary inside = %v, want 3", got)
	}
	if got := DistancePolygonBoundary(Point{5, -2}, sq); got != 2 {
		t.Errorf("DistancePolygonBoundary outside = %v, want 2", got)
	}
	// The closing edge (0,10)-(0,0) counts.
	if got := DistancePolygonBoundary(Point{-1, 5}, sq); got != 1 {
		t.Errorf("DistancePolygonBoundary by the closing edge = %v, want 1", got)
	}
	if got := DistancePolygonBoundary(Point{}, nil); !math.IsInf(got, 1) {
		t.Errorf("empty polygon: %v, want +Inf", got)
	}
}

func TestSelfIntersection(t *testing.T) {
	tests := []struct {
		name   string
		poly   []Point
		i, j   int
		wantOK bool
	}{
		{"square", []Point{{0, 0}, {10, 0}, {10, 10}, {0, 10}}, 0, 0, false},
		{"L shape", []Point{{0, 0}, {4, 0}, {4, 2}, {2, 2}, {2, 4}, {0, 4}}, 0, 0, false},
		// Bow tie: edges 0 (0,0)-(10,10) and 2 (10,0)-(0,10) cross.
		{"bow tie", []Point{{0, 0}, {10, 10}, {10, 0}, {0, 10}}, 0, 2, true},
		// Edge 1 doubles back over edge 0.
		{"spike", []Point{{0, 0}, {10, 0}, {5, 0}, {5, 5}}, 0, 1, true},
		// A repeated vertex makes edge 1 a point lying on edge 0.
		{"repeated vertex", []Point{{0, 0}, {10, 0}, {10, 0}, {10, 10}, {0, 10}}, 0, 1, true},
		// The closing edge 2 runs back over edge 0.
		{"collinear triangle", []Point{{0, 0}, {1, 0}, {2, 0}}, 0, 2, true},
		// Edge 4 touches the interior of edge 1 at (10,5).
		{"vertex on an edge", []Point{{0, 0}, {10, 0}, {10, 10}, {5, 10}, {10, 5}, {0, 10}}, 1, 3, true},
		{"two vertices", []Point{{0, 0}, {1, 1}}, 0, 0, false},
	}
	for _, tc := range tests {
		i, j, ok := SelfIntersection(tc.poly)
		if ok != tc.wantOK || (ok && (i != tc.i || j != tc.j)) {
			t.Errorf("%s: SelfIntersection = %d, %d, %v; want %d, %d, %v", tc.name, i, j, ok, tc.i, tc.j, tc.wantOK)
		}
	}
}
