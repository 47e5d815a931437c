package scene

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"time"
)

// Walker kinds.
const (
	KindThrough  = "through"  // walks the length of the walkway, crossing the gate line once
	KindVisitor  = "visitor"  // stops at a ticket machine, then leaves up or through the gate
	KindTurnback = "turnback" // walks up to the gate line, stops short of it and goes back
)

// Walker is one person of the scenario, as the ground truth sees them. All
// times are frame times (frame index / FPS); positions are in pixels.
type Walker struct {
	ID   int64  // the object ID used in Truth, 1-based, in order of entry
	Kind string // KindThrough, KindVisitor or KindTurnback
	// Enter and Leave are the times of the first and last frame in which the
	// walker is listed in Truth.
	Enter, Leave time.Duration
	// Cross is +1 if the walker crosses the gate line downwards (y
	// increasing), -1 if upwards and 0 if never. Nobody crosses twice.
	Cross int
	// GateAt is the time of the first frame whose anchor is past the gate
	// line and GateX the x where the anchor crossed it (0 if Cross is 0).
	GateAt time.Duration
	GateX  float64
	// Wait is how long a visitor stands at the machine (a turnback: how long
	// they stop before turning), counted as frames at the spot / FPS.
	Wait time.Duration
	// ZoneTime is how long the anchor is inside the ticket zone, counted as
	// frames inside / FPS: the wait plus the walk in and out.
	ZoneTime time.Duration
	// Spot is where a visitor stands or a turnback turns (anchor, without sway).
	Spot [2]float64
	// Exit says how a visitor leaves: "up" or "gate". Empty for others.
	Exit string
	// Speed is the walking speed in m/s (0.6..1.8).
	Speed float64
	// Height and Width are the figure size in pixels at the bottom edge of
	// the frame; figures higher up are drawn smaller (0.75x at the top).
	Height, Width float64
}

// Visitor exits.
const (
	ExitUp   = "up"   // back out across the top edge
	ExitGate = "gate" // right and down through the gate line, out across the bottom edge
)

// ErrCrowded is returned by New when the walkers asked for do not fit in the
// duration with the spacing the scene keeps.
var ErrCrowded = errors.New("too many walkers for the duration")

const (
	maxOnScreen = 6   // walkers visible at once
	laneGap     = 1.5 // seconds between same-lane walkers at the gate line
	leadIn      = 3   // seconds with no walker at the start
	noEntryTail = 5   // seconds with no new walker before the end
)

// planner places walkers one at a time, each against all placed so far.
type planner struct {
	g      *geom
	cfg    Config
	l      Layout
	rng    *rand.Rand
	frames int
	lead   int // first frame a walker may show in
	tail   int // last frame a walker may enter in
	ws     []*walker
	busy   []uint8 // walkers on screen per frame
}

func (p *planner) secs(s float64) int { return int(math.Round(s * p.cfg.FPS)) }

func (p *planner) uniform(lo, hi float64) float64 { return lo + (hi-lo)*p.rng.Float64() }

// newWalker draws the look, size and speed of a person.
func (p *planner) newWalker(kind string) *walker {
	v := math.Min(math.Max(1.25+0.28*p.rng.NormFloat64(), 0.6), 1.8)
	// 40..70 px tall and at least 0.33 as wide: even at the top edge
	// (0.75x) the box stays near a 300 px² minimum blob area.
	h := p.uniform(40, 70) * p.g.k
	w := &walker{
		Walker: Walker{Kind: kind, Speed: v, Height: h, Width: h * p.uniform(0.33, 0.45)},
		look: appearance{
			shirt:    shirts[p.rng.IntN(len(shirts))],
			trousers: trousers[p.rng.IntN(len(trousers))],
			hair:     hairs[p.rng.IntN(len(hairs))],
		},
	}
	w.h, w.w = w.Height, w.Width
	// 0.6..1.8 m/s is 3..8 px/frame at the bottom edge at 10 fps.
	w.step = (3 + (v-0.6)/1.2*5) * p.g.k * 10 / p.cfg.FPS
	return w
}

// topOut and bottomOut are foot positions just outside the frame.
func (p *planner) topOut() float64             { return -2 }
func (p *planner) bottomOut(w *walker) float64 { return p.g.h + w.h + 2 }

// fits reports whether c, at its start frame, keeps every rule against the
// walkers placed so far.
func (p *planner) fits(c *walker) bool {
	if c.visFirst < 0 {
		return false
	}
	first, last := c.start+c.visFirst, c.start+c.visLast
	if c.start < 0 || first < p.lead || first > p.tail || last > p.frames-2 {
		return false
	}
	for f := first; f <= last; f++ {
		if p.busy[f] >= maxOnScreen {
			return false
		}
	}
	for _, a := range p.ws {
		if !p.pairOK(c, a) {
			return false
		}
	}
	return true
}

// pairOK checks the spacing of two walkers over the frames both are on
// screen: a visible gap everywhere, a wider one near the gate line, and
// time between same-lane walkers at the line.
func (p *planner) pairOK(c, a *walker) bool {
	g := p.g
	lo := max(c.start+c.visFirst, a.start+a.visFirst)
	hi := min(c.start+c.visLast, a.start+a.visLast)
	for f := lo; f <= hi; f++ {
		bc, _ := c.box(g, f)
		ba, _ := a.box(g, f)
		if !g.onScreen(bc) || !g.onScreen(ba) {
			continue
		}
		gap := boxGap(bc, ba)
		if gap < g.minGap || (gap < g.nearGap && (g.nearGate(bc) || g.nearGate(ba))) {
			return false
		}
	}
	if c.dir != 0 && c.dir == a.dir {
		fc, fa := c.start+c.gateRel, a.start+a.gateRel
		if abs(fc-fa) < p.secs(laneGap) {
			s := g.scale(g.lineY)
			if math.Abs(c.pos[c.gateRel].x-a.pos[a.gateRel].x) < (c.w+a.w)*s/2+g.nearGap {
				return false
			}
		}
	}
	return true
}

func (p *planner) add(w *walker) {
	p.ws = append(p.ws, w)
	for f := w.start + w.visFirst; f <= w.start+w.visLast; f++ {
		p.busy[f]++
	}
}

func (p *planner) remove(w *walker) {
	p.ws = p.ws[:len(p.ws)-1]
	for f := w.start + w.visFirst; f <= w.start+w.visLast; f++ {
		p.busy[f]--
	}
}

// plan builds the whole scenario: visitors first (they stay longest), then
// the close passes, then the other through-walkers spread over the
// duration, then the turnbacks.
func plan(cfg Config, l Layout, g *geom) ([]*walker, error) {
	p := &planner{g: g, cfg: cfg, l: l, rng: rand.New(rand.NewPCG(uint64(cfg.Seed), 0x7a11d5ce4e))}
	p.frames = int(math.Round(cfg.Duration.Seconds() * cfg.FPS))
	p.lead, p.tail = p.secs(leadIn), p.frames-p.secs(noEntryTail)
	p.busy = make([]uint8, p.frames)
	if err := p.planVisitors(); err != nil {
		return nil, err
	}
	pairs := min(4+p.rng.IntN(2), cfg.Crossings)
	done := p.planClosePasses(pairs)
	if cfg.Crossings >= 3 && done < 3 {
		return nil, fmt.Errorf("%w: placed %d of %d close passes", ErrCrowded, done, pairs)
	}
	if err := p.planThrough(cfg.Crossings - done); err != nil {
		return nil, err
	}
	if err := p.planTurnbacks(3 + p.rng.IntN(2)); err != nil {
		return nil, err
	}
	return p.ws, nil
}

// planThrough places n through-walkers each way, with gate times spread
// evenly over the duration, the two directions half a slot apart.
func (p *planner) planThrough(n int) error {
	if n <= 0 {
		return nil
	}
	type slot struct {
		dir int
		t   float64
	}
	lo, hi := float64(p.lead+p.secs(6)), float64(p.frames-p.secs(7))
	width := (hi - lo) / float64(n)
	var slots []slot
	for i := range n {
		slots = append(slots, slot{1, lo + (float64(i)+0.25)*width}, slot{-1, lo + (float64(i)+0.75)*width})
	}
	for i, s := range slots {
		if !p.placeThrough(s.dir, s.t, width, lo, hi) {
			return fmt.Errorf("%w: placed %d of %d through-walkers", ErrCrowded, i, len(slots))
		}
	}
	return nil
}

// placeThrough tries lanes and times near gate frame t, widening the search
// as attempts fail.
func (p *planner) placeThrough(dir int, t, width, lo, hi float64) bool {
	for attempt := range 1500 {
		spread := width * (0.3 + float64(attempt)/60)
		gt := t + spread*(p.rng.Float64()-0.5)
		if attempt >= 1000 {
			gt = p.uniform(lo-width, hi+width)
		}
		c := p.through(dir, p.uniform(p.g.laneX1, p.g.laneX2), p.uniform(-20, 20)*p.g.k)
		if c.gateRel < 0 {
			continue
		}
		c.start = int(math.Round(gt)) - c.gateRel
		if p.fits(c) {
			p.add(c)
			return true
		}
	}
	return false
}

// through is a walker crossing the whole frame in direction dir, at x = xg
// on the gate line, drifting sideways by drift over the frame height.
func (p *planner) through(dir int, xg, drift float64) *walker {
	w := p.newWalker(KindThrough)
	y0, y1 := p.topOut(), p.bottomOut(w)
	if dir < 0 {
		y0, y1 = y1, y0
	}
	x := func(y float64) float64 { return xg + drift*(y-p.g.lineY)/p.g.h }
	w.simulate(p.g, p.cfg.FPS, pt{x(y0), y0}, []waypoint{{pt: pt{x(y1), y1}}})
	return w
}

// planClosePasses places up to n pairs of opposite walkers in neighbouring
// lanes, timed to pass each other above the gate line with a small gap.
func (p *planner) planClosePasses(n int) int {
	done := 0
	for attempt := 0; done < n && attempt < 3000; attempt++ {
		if p.closePass() {
			done++
		}
	}
	return done
}

func (p *planner) closePass() bool {
	g := p.g
	ym := p.uniform(65, 120) * g.k // where the feet are level
	xa := p.uniform(g.laneX1, g.laneX2)
	a := p.through(1, xa, 0)
	b := p.through(-1, xa, 0)
	ja, jb := firstPast(a, ym, 1), firstPast(b, ym, -1)
	if ja < 0 || jb < 0 || a.gateRel < 0 || b.gateRel < 0 {
		return false
	}
	side := 1.0
	if p.rng.IntN(2) == 0 {
		side = -1
	}
	target := p.uniform(9, 13) * g.k
	shiftX(b, side*((a.w+b.w)*g.scale(ym)/2+target))
	b.derive(g)
	a.start = int(math.Round(p.uniform(float64(p.lead+p.secs(8)), float64(p.frames-p.secs(10))))) - ja
	b.start = a.start + ja - jb
	// Widths change with height, so measure the real smallest gap and
	// correct the lane once.
	gap, ok := sideGap(g, a, b)
	if !ok {
		return false
	}
	shiftX(b, side*(target-gap))
	b.derive(g)
	if b.gateRel < 0 {
		return false
	}
	bx := b.pos[b.gateRel].x
	if bx < g.laneX1 || bx > g.laneX2 {
		return false
	}
	if !p.fits(a) {
		return false
	}
	p.add(a)
	if !p.fits(b) {
		p.remove(a)
		return false
	}
	p.add(b)
	return true
}

// firstPast is the first relative frame whose feet are at or past y moving
// in direction dir, or -1.
func firstPast(w *walker, y float64, dir int) int {
	for j, q := range w.pos {
		if (dir > 0 && q.y >= y) || (dir < 0 && q.y <= y) {
			return j
		}
	}
	return -1
}

func shiftX(w *walker, dx float64) {
	for j := range w.pos {
		w.pos[j].x += dx
	}
}

// sideGap is the smallest horizontal gap between a and b over the frames
// in which their boxes overlap vertically.
func sideGap(g *geom, a, b *walker) (float64, bool) {
	best, found := math.Inf(1), false
	for f := max(a.start, b.start); f <= min(a.end(), b.end()); f++ {
		ba, _ := a.box(g, f)
		bb, _ := b.box(g, f)
		if math.Min(ba.Y2, bb.Y2)-math.Max(ba.Y1, bb.Y1) <= 0 {
			continue
		}
		best, found = math.Min(best, math.Max(bb.X1-ba.X2, ba.X1-bb.X2)), true
	}
	return best, found
}

func abs(v int) int {
	if v < 0 {
		return -v
	}
	return v
}
