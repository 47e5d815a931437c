package events

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// Property tests. Integer coordinates keep translation, integer scaling and
// quarter turns exact in float64, so the predicates must agree bit for bit.

func newRand(t testing.TB) *rand.Rand {
	t.Helper()
	return rand.New(rand.NewPCG(20240601, 7))
}

func intPoint(r *rand.Rand, lo, hi int) Point {
	return Point{float64(lo + r.IntN(hi-lo+1)), float64(lo + r.IntN(hi-lo+1))}
}

func TestSegmentsIntersectSymmetry(t *testing.T) {
	r := newRand(t)
	for range 20000 {
		p1, p2, q1, q2 := intPoint(r, -6, 6), intPoint(r, -6, 6), intPoint(r, -6, 6), intPoint(r, -6, 6)
		want := SegmentsIntersect(p1, p2, q1, q2)
		for _, got := range []bool{
			SegmentsIntersect(q1, q2, p1, p2),
			SegmentsIntersect(p2, p1, q1, q2),
			SegmentsIntersect(p1, p2, q2, q1),
			SegmentsIntersect(q2, q1, p2, p1),
		} {
			if got != want {
				t.Fatalf("asymmetric for %v-%v, %v-%v", p1, p2, q1, q2)
			}
		}
		if SegmentsCrossProperly(p1, p2, q1, q2) && !want {
			t.Fatalf("proper crossing not an intersection: %v-%v, %v-%v", p1, p2, q1, q2)
		}
	}
}

func TestSegmentsIntersectInvariance(t *testing.T) {
	r := newRand(t)
	for range 20000 {
		pts := []Point{intPoint(r, -6, 6), intPoint(r, -6, 6), intPoint(r, -6, 6), intPoint(r, -6, 6)}
		want := SegmentsIntersect(pts[0], pts[1], pts[2], pts[3])
		d := intPoint(r, -1000, 1000)
		k := float64(1 + r.IntN(50))
		maps := map[string]func(Point) Point{
			"translate":    func(p Point) Point { return Point{p.X + d.X, p.Y + d.Y} },
			"scale":        func(p Point) Point { return Point{p.X * k, p.Y * k} },
			"quarter turn": func(p Point) Point { return Point{-p.Y, p.X} },
			"mirror":       func(p Point) Point { return Point{-p.X, p.Y} },
		}
		for name, m := range maps {
			if got := SegmentsIntersect(m(pts[0]), m(pts[1]), m(pts[2]), m(pts[3])); got != want {
				t.Fatalf("%s changed the answer for %v", name, pts)
			}
		}
	}
}

func TestSegmentIntersectionLiesOnBoth(t *testing.T) {
	r := newRand(t)
	for range 20000 {
		p1, p2, q1, q2 := intPoint(r, -20, 20), intPoint(r, -20, 20), intPoint(r, -20, 20), intPoint(r, -20, 20)
		pt, ok := SegmentIntersection(p1, p2, q1, q2)
		if !ok {
			continue
		}
		if d := math.Max(DistanceToSegment(pt, p1, p2), DistanceToSegment(pt, q1, q2)); d > 1e-9 {
			t.Fatalf("%v is %g away from %v-%v or %v-%v", pt, d, p1, p2, q1, q2)
		}
	}
}

func TestPointInPolygonMatchesRectangle(t *testing.T) {
	r := newRand(t)
	for range 5000 {
		a, b := intPoint(r, -50, 50), intPoint(r, -50, 50)
		x1, x2 := math.Min(a.X, b.X), math.Max(a.X, b.X)
		y1, y2 := math.Min(a.Y, b.Y), math.Max(a.Y, b.Y)
		rect := []Point{{x1, y1}, {x2, y1}, {x2, y2}, {x1, y2}}
		rev := slices.Clone(rect)
		slices.Reverse(rev)
		rot := append(slices.Clone(rect[2:]), rect[:2]...)
		for range 20 {
			// Half-integer points never lie on the integer boundary.
			p := intPoint(r, -60, 60)
			p.X += 0.5
			p.Y += 0.5
			want := x1 < p.X && p.X < x2 && y1 < p.Y && p.Y < y2
			for _, poly := range [][]Point{rect, rev, rot} {
				if got := PointInPolygon(p, poly); got != want {
					t.Fatalf("PointInPolygon(%v, %v) = %v, want %v", p, poly, got, want)
				}
			}
		}
	}
}

// regular is a convex polygon: n vertices on a circle.
func regular(c Point, radius, phase float64, n int) []Point {
	poly := make([]Point, n)
	for i := range poly {
		a := phase + 2*math.Pi*float64(i)/float64(n)
		poly[i] = Point{c.X + radius*math.Cos(a), c.Y + radius*math.Sin(a)}
	}
	return poly
}

func TestPointInPolygonMatchesConvexTest(t *testing.T) {
	r := newRand(t)
	for range 2000 {
		poly := regular(Point{r.Float64()*200 - 100, r.Float64()*200 - 100}, 1+r.Float64()*100, r.Float64()*math.Pi, 3+r.IntN(10))
		for range 20 {
			p := Point{r.Float64()*400 - 200, r.Float64()*400 - 200}
			// A point is inside a convex polygon iff it is on the same side
			// of every edge. Skip points too close to an edge to decide.
			pos, neg, near := 0, 0, false
			for i := range poly {
				c := Cross(poly[i], poly[(i+1)%len(poly)], p)
				switch {
				case math.Abs(c) < 1e-6:
					near = true
				case c > 0:
					pos++
				default:
					neg++
				}
			}
			if near {
				continue
			}
			want := pos == 0 || neg == 0
			if got := PointInPolygon(p, poly); got != want {
				t.Fatalf("PointInPolygon(%v, %v) = %v, want %v", p, poly, got, want)
			}
		}
	}
}

func TestPointInPolygonTranslationInvariant(t *testing.T) {
	r := newRand(t)
	for range 3000 {
		poly := make([]Point, 3+r.IntN(8))
		for i := range poly {
			poly[i] = intPoint(r, -20, 20)
		}
		p := intPoint(r, -25, 25)
		p.X += 0.5
		p.Y += 0.25
		d := intPoint(r, -1000, 1000)
		moved := make([]Point, len(poly))
		for i, v := range poly {
			moved[i] = Point{v.X + d.X, v.Y + d.Y}
		}
		if PointInPolygon(p, poly) != PointInPolygon(Point{p.X + d.X, p.Y + d.Y}, moved) {
			t.Fatalf("translation by %v changed the answer for %v in %v", d, p, poly)
		}
	}
}

func TestPolygonAreaProperties(t *testing.T) {
	r := newRand(t)
	for range 3000 {
		poly := make([]Point, 3+r.IntN(8))
		for i := range poly {
			poly[i] = intPoint(r, -20, 20)
		}
		a := PolygonArea(poly)
		rev := slices.Clone(poly)
		slices.Reverse(rev)
		if got := PolygonArea(rev); got != -a {
			t.Fatalf("reversed area %v, want %v", got, -a)
		}
		k := r.IntN(len(poly))
		if got := PolygonArea(append(slices.Clone(poly[k:]), poly[:k]...)); got != a {
			t.Fatalf("rotated area %v, want %v", got, a)
		}
		// O'Rourke §1.3 (from memory): the area is the sum of the signed
		// areas of the fan of triangles from any fixed point.
		var fan float64
		o := intPoint(r, -50, 50)
		for i := range poly {
			fan += Cross(o, poly[i], poly[(i+1)%len(poly)]) / 2
		}
		if fan != a {
			t.Fatalf("fan sum %v, shoelace %v", fan, a)
		}
	}
	w, h := 7.0, 3.0
	if got := PolygonArea([]Point{{0, 0}, {w, 0}, {w, h}, {0, h}}); got != w*h {
		t.Errorf("rectangle area %v, want %v", got, w*h)
	}
}

func TestDistanceToSegmentProperties(t *testing.T) {
	r := newRand(t)
	for range 20000 {
		p, a, b := intPoint(r, -30, 30), intPoint(r, -30, 30), intPoint(r, -30, 30)
		d := DistanceToSegment(p, a, b)
		if d != DistanceToSegment(p, b, a) {
			t.Fatalf("not symmetric in a, b: %v %v %v", p, a, b)
		}
		if d < 0 || d > math.Hypot(p.X-a.X, p.Y-a.Y) || d > math.Hypot(p.X-b.X, p.Y-b.Y) {
			t.Fatalf("distance %v out of bounds: %v %v %v", d, p, a, b)
		}
		if d < DistanceToLine(p, a, b)-1e-9 {
			t.Fatalf("segment distance %v below line distance %v", d, DistanceToLine(p, a, b))
		}
		s := r.Float64()
		on := Point{a.X + s*(b.X-a.X), a.Y + s*(b.Y-a.Y)}
		if d := DistanceToSegment(on, a, b); d > 1e-9 {
			t.Fatalf("point on the segment at distance %v", d)
		}
	}
}

func TestSelfIntersectionProperties(t *testing.T) {
	r := newRand(t)
	for range 2000 {
		n := 4 + r.IntN(10)
		poly := regular(Point{r.Float64() * 100, r.Float64() * 100}, 1+r.Float64()*100, r.Float64(), n)
		if i, j, ok := SelfIntersection(poly); ok {
			t.Fatalf("convex polygon reported edges %d, %d", i, j)
		}
		// Swapping two consecutive vertices ties a bow: the edges around
		// them cross.
		k := r.IntN(n)
		bad := slices.Clone(poly)
		bad[k], bad[(k+1)%n] = bad[(k+1)%n], bad[k]
		i, j, ok := SelfIntersection(bad)
		if !ok {
			t.Fatalf("bow tie not found in %v", bad)
		}
		if !edgesMeet(bad, i, j) {
			t.Fatalf("edges %d and %d of %v do not meet", i, j, bad)
		}
	}
}

func edgesMeet(poly []Point, i, j int) bool {
	n := len(poly)
	return SegmentsIntersect(poly[i], poly[(i+1)%n], poly[j], poly[(j+1)%n])
}

func FuzzPolygon(f *testing.F) {
	f.Add([]byte{0, 0, 10, 0, 10, 10, 0, 10, 5, 5})
	f.Add([]byte{0, 0, 10, 10, 10, 0, 0, 10, 5, 5})
	f.Add([]byte{0, 0, 0, 0, 0, 0, 1, 1})
	f.Add([]byte{0x80, 0x7f, 0x7f, 0x80, 0, 0, 3})
	f.Fuzz(func(t *testing.T, b []byte) {
		var pts []Point
		for i := 0; i+1 < len(b) && len(pts) < 24; i += 2 {
			pts = append(pts, Point{float64(int8(b[i])), float64(int8(b[i+1]))})
		}
		if len(pts) == 0 {
			return
		}
		p, poly := pts[len(pts)-1], pts[:len(pts)-1]
		i, j, ok := SelfIntersection(poly)
		if ok {
			if i < 0 || j <= i || j >= len(poly) {
				t.Fatalf("bad edge pair %d, %d for %d vertices", i, j, len(poly))
			}
			if !edgesMeet(poly, i, j) {
				t.Fatalf("edges %d and %d of %v do not meet", i, j, poly)
			}
		}
		in := PointInPolygon(p, poly)
		if d := DistancePolygonBoundary(p, poly); d < 0 || math.IsNaN(d) {
			t.Fatalf("distance %v", d)
		}
		_ = PolygonArea(poly)
		// Moving everything by the same integer vector keeps the answer.
		moved := make([]Point, len(poly))
		for k, v := range poly {
			moved[k] = Point{v.X + 300, v.Y - 200}
		}
		if PointInPolygon(Point{p.X + 300, p.Y - 200}, moved) != in {
			t.Fatalf("translation changed PointInPolygon(%v, %v)", p, poly)
		}
	})
}
