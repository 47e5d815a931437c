package scene

import (
	"math"
	"time"

	"tallyd/detect"
)

// Layout holds the landmarks of the walkway that counting rules refer to, as
// fractions (0..1) of the frame width (x) and height (y).
type Layout struct {
	// Gate is the counting line across the walkway, from its left end to its
	// right end. Walking down the frame (y increasing) crosses it downwards.
	Gate [2][2]float64
	// TicketZone is the polygon around the ticket machines.
	TicketZone [][2]float64
	// DwellThreshold separates short ticket-machine visits from long ones:
	// every planned wait is clearly below or clearly above it.
	DwellThreshold time.Duration
}

// DefaultLayout is the layout every Scene is drawn with.
func DefaultLayout() Layout {
	return Layout{
		Gate:           [2][2]float64{{0.15, 0.55}, {0.85, 0.55}},
		TicketZone:     [][2]float64{{0.02, 0.08}, {0.27, 0.08}, {0.27, 0.45}, {0.02, 0.45}},
		DwellThreshold: 10 * time.Second,
	}
}

// GatePixels is the gate line in pixels for a w x h frame.
func (l Layout) GatePixels(w, h int) [2][2]float64 {
	var g [2][2]float64
	for i, p := range l.Gate {
		g[i] = [2]float64{p[0] * float64(w), p[1] * float64(h)}
	}
	return g
}

// ZonePixels is the ticket zone polygon in pixels for a w x h frame.
func (l Layout) ZonePixels(w, h int) [][2]float64 {
	z := make([][2]float64, len(l.TicketZone))
	for i, p := range l.TicketZone {
		z[i] = [2]float64{p[0] * float64(w), p[1] * float64(h)}
	}
	return z
}

type pt struct{ x, y float64 }

type rect struct{ x1, y1, x2, y2 float64 }

func (r rect) has(x, y float64) bool { return x >= r.x1 && x < r.x2 && y >= r.y1 && y < r.y2 }

// geom is the layout in pixels plus the fixed furniture of the walkway and
// the distances the planner keeps, all scaled to the frame size.
type geom struct {
	w, h     float64
	k        float64 // size unit: 1 at 640x360
	lineY    float64
	gate     [2]pt
	zone     []pt
	bandX1   float64 // the darker deck-plank walkway band
	bandX2   float64
	kerb     float64 // kerb width at the band edges
	quayX    float64 // quay edge; water beyond
	waterX   float64
	machines []rect
	spots    []pt    // where visitors stand, one per machine
	minGap   float64 // smallest gap between two walkers, anywhere
	nearGap  float64 // smallest gap while either walker is near the gate line
	nearLine float64 // "near the gate line": box within this many pixels of it
	laneX1   float64 // through-walkers cross the line between laneX1 and laneX2
	laneX2   float64
	exitX1   float64 // visitors leaving through the gate cross it here
	exitX2   float64
	entryX1  float64 // visitors come in from the top between entryX1 and entryX2
	entryX2  float64
}

func newGeom(width, height int, l Layout) *geom {
	w, h := float64(width), float64(height)
	fx := func(f float64) float64 { return f * w }
	fy := func(f float64) float64 { return f * h }
	g := &geom{w: w, h: h, k: math.Min(w/640, h/360)}
	gp := l.GatePixels(width, height)
	g.gate = [2]pt{{gp[0][0], gp[0][1]}, {gp[1][0], gp[1][1]}}
	g.lineY = (g.gate[0].y + g.gate[1].y) / 2
	for _, p := range l.ZonePixels(width, height) {
		g.zone = append(g.zone, pt{p[0], p[1]})
	}
	g.bandX1, g.bandX2 = fx(0.29), fx(0.83)
	g.kerb = 3 * g.k
	g.quayX, g.waterX = fx(0.87), fx(0.885)
	// Three ticket machines: two against the left wall, one against the top
	// wall of the zone. Each visitor stands beside one, clear of its box.
	g.machines = []rect{
		{fx(0.025), fy(0.100), fx(0.060), fy(0.178)},
		{fx(0.025), fy(0.306), fx(0.060), fy(0.383)},
		{fx(0.172), fy(0.086), fx(0.234), fy(0.117)},
	}
	g.spots = []pt{{fx(0.0906), fy(0.1833)}, {fx(0.0906), fy(0.3889)}, {fx(0.203), fy(0.2833)}}
	g.minGap = 8 * g.k
	g.nearGap = 20 * g.k
	g.nearLine = 30 * g.k
	g.laneX1, g.laneX2 = fx(0.33), fx(0.79)
	g.exitX1, g.exitX2 = fx(0.38), fx(0.45)
	g.entryX1, g.entryX2 = fx(0.115), fx(0.145)
	return g
}

// scale is the perspective factor for a figure whose feet are at y: 0.75 at
// the top edge, 1 at the bottom edge.
func (g *geom) scale(y float64) float64 {
	return 0.75 + 0.25*math.Min(math.Max(y/g.h, 0), 1)
}

// onScreen reports whether any part of b lies inside the frame.
func (g *geom) onScreen(b detect.Box) bool {
	return b.X2 > 0 && b.X1 < g.w && b.Y2 > 0 && b.Y1 < g.h
}

// truthBox clips b to the frame and reports whether enough of it (30%) shows
// to be listed as ground truth.
func (g *geom) truthBox(b detect.Box) (detect.Box, bool) {
	c := b.Clip(g.w, g.h)
	return c, c.Area() > 0 && c.Area() >= 0.3*b.Area()
}

// nearGate reports whether b comes within nearLine pixels of the gate line
// vertically.
func (g *geom) nearGate(b detect.Box) bool { return lineDist(g, b) < g.nearLine }

// inZone reports whether p is inside the ticket zone (even-odd rule).
func (g *geom) inZone(p pt) bool { return inPolygon(g.zone, p) }

func inPolygon(poly []pt, p pt) bool {
	in := false
	for i, j := 0, len(poly)-1; i < len(poly); j, i = i, i+1 {
		a, b := poly[i], poly[j]
		if (a.y > p.y) != (b.y > p.y) && p.x < (b.x-a.x)*(p.y-a.y)/(b.y-a.y)+a.x {
			in = !in
		}
	}
	return in
}

// anchor is the bottom-centre point of a box: where a person stands.
func anchor(b detect.Box) pt { return pt{(b.X1 + b.X2) / 2, b.Y2} }

// boxGap is the Chebyshev gap between two boxes: negative when they overlap.
func boxGap(a, b detect.Box) float64 {
	dx := math.Max(b.X1-a.X2, a.X1-b.X2)
	dy := math.Max(b.Y1-a.Y2, a.Y1-b.Y2)
	return math.Max(dx, dy)
}

// crossing returns +1 when the step from p to q crosses the gate segment
// downwards (to the y-increasing side), -1 upwards and 0 otherwise. A point
// exactly on the line counts as past it, so that a walk across it is
// counted once.
func (g *geom) crossing(p, q pt) int {
	a, b := g.gate[0], g.gate[1]
	side := func(r pt) bool { return (b.x-a.x)*(r.y-a.y)-(b.y-a.y)*(r.x-a.x) >= 0 }
	sp, sq := side(p), side(q)
	if sp == sq {
		return 0
	}
	// Where the step meets the line, as a fraction along the gate.
	dx, dy := q.x-p.x, q.y-p.y
	ex, ey := b.x-a.x, b.y-a.y
	den := dx*ey - dy*ex
	if den == 0 {
		return 0
	}
	t := ((a.x-p.x)*dy - (a.y-p.y)*dx) / den
	if t < 0 || t > 1 {
		return 0
	}
	if sq {
		return 1
	}
	return -1
}
