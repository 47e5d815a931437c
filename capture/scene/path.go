package scene

import (
	"math"

	"tallyd/detect"
)

// appearance is how one walker is drawn: BGR colours.
type appearance struct {
	shirt, trousers, hair [3]uint8
}

// waypoint is a point on a walker's route. hold is the number of frames
// spent standing there, the arrival frame included; 0 or 1 walks through.
type waypoint struct {
	pt
	hold int
}

// walker is one planned person: the exported summary plus the trajectory,
// one foot position per frame from frame start on.
type walker struct {
	Walker
	look  appearance
	h, w  float64 // figure size in pixels at scale 1 (bottom edge)
	step  float64 // pixels per frame at scale 1
	start int     // frame index of pos[0]
	pos   []pt    // feet (bottom-centre), one per frame
	phase []float32
	// Relative frame indices (into pos), fixed once the route is simulated.
	visFirst, visLast int // any part on screen
	gateRel           int // first frame past the gate line, -1 if none
	dir               int // +1 down, -1 up, 0 no crossing
	zoneFrames        int // frames with the truth anchor inside the ticket zone
}

// end is the last absolute frame of the trajectory.
func (w *walker) end() int { return w.start + len(w.pos) - 1 }

// boxRel is the unclipped figure box at relative frame j.
func (w *walker) boxRel(g *geom, j int) detect.Box {
	p := w.pos[j]
	s := g.scale(p.y)
	hw, hh := w.w*s/2, w.h*s
	return detect.Box{X1: p.x - hw, Y1: p.y - hh, X2: p.x + hw, Y2: p.y}
}

// box is the unclipped figure box at absolute frame f.
func (w *walker) box(g *geom, f int) (detect.Box, bool) {
	j := f - w.start
	if j < 0 || j >= len(w.pos) {
		return detect.Box{}, false
	}
	return w.boxRel(g, j), true
}

// sway is the tiny sideways shift of a standing figure, at most 0.6 px.
func sway(j int, fps float64) float64 {
	return 0.6 * math.Sin(2*math.Pi*float64(j)/(3*fps))
}

// simulate walks w from `from` along route at its own speed, slower where
// perspective makes it smaller, and fills the trajectory and the relative
// indices derived from it.
func (w *walker) simulate(g *geom, fps float64, from pt, route []waypoint) {
	cur := from
	phase := 0.0
	w.pos = append(w.pos[:0], cur)
	w.phase = append(w.phase[:0], 0)
	for k := 0; k < len(route); {
		step := w.step * g.scale(cur.y)
		rem, hold := step, 0
		for rem > 0 && k < len(route) {
			t := route[k].pt
			d := math.Hypot(t.x-cur.x, t.y-cur.y)
			if d > rem {
				cur = pt{cur.x + (t.x-cur.x)*rem/d, cur.y + (t.y-cur.y)*rem/d}
				rem = 0
				break
			}
			cur, rem = t, rem-d
			hold = route[k].hold
			k++
			if hold > 1 {
				break
			}
		}
		phase += (step - rem) / (0.33 * w.h * g.scale(cur.y)) * math.Pi
		if hold > 1 {
			// Stand still with both feet down, swaying slightly.
			phase = 0
			for j := 0; j < hold; j++ {
				w.pos = append(w.pos, pt{cur.x + sway(j, fps), cur.y})
				w.phase = append(w.phase, 0)
			}
			continue
		}
		w.pos = append(w.pos, cur)
		w.phase = append(w.phase, float32(math.Mod(phase, 2*math.Pi)))
	}
	w.derive(g)
}

// derive computes the start-independent facts of a trajectory.
func (w *walker) derive(g *geom) {
	w.visFirst, w.visLast, w.gateRel, w.dir, w.zoneFrames = -1, -1, -1, 0, 0
	var prev pt
	havePrev := false
	for j := range w.pos {
		b := w.boxRel(g, j)
		if g.onScreen(b) {
			if w.visFirst < 0 {
				w.visFirst = j
			}
			w.visLast = j
		}
		c, ok := g.truthBox(b)
		if !ok {
			havePrev = false
			continue
		}
		a := anchor(c)
		if g.inZone(a) {
			w.zoneFrames++
		}
		if havePrev {
			if d := g.crossing(prev, a); d != 0 && w.gateRel < 0 {
				w.gateRel, w.dir = j, d
			}
		}
		prev, havePrev = a, true
	}
}

// vy is the vertical direction of motion at absolute frame f: +1 down, -1
// up, 0 standing.
func (w *walker) vy(f int) int {
	j := f - w.start
	a, b := max(j-1, 0), min(j+1, len(w.pos)-1)
	d := w.pos[b].y - w.pos[a].y
	switch {
	case d > 0.5:
		return 1
	case d < -0.5:
		return -1
	}
	return 0
}
