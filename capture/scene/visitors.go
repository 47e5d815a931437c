package scene

import (
	"fmt"
	"math"
)

// planVisitors places the ticket-machine visitors: half with a short wait,
// half with a long one, and within each half, half leaving back up and half
// through the gate.
func (p *planner) planVisitors() error {
	n := p.cfg.Visitors
	type job struct{ short, gate bool }
	jobs := make([]job, n)
	for i := range jobs {
		jobs[i] = job{short: i%2 == 0, gate: (i/2)%2 == 0}
	}
	p.rng.Shuffle(n, func(i, j int) { jobs[i], jobs[j] = jobs[j], jobs[i] })
	span := float64(p.tail - p.lead)
	for i, jb := range jobs {
		placed := false
		for attempt := 0; attempt < 3000 && !placed; attempt++ {
			c := p.visitor(jb.short, jb.gate)
			if c == nil {
				continue
			}
			// Spread the visits over the duration; once that fails, anywhere.
			t := float64(p.lead) + (float64(i)+p.rng.Float64())/float64(n)*span*0.85
			if attempt >= 300 {
				t = p.uniform(float64(p.lead), float64(p.tail))
			}
			c.start = int(math.Round(t)) - c.visFirst
			if p.fits(c) {
				p.add(c)
				placed = true
			}
		}
		if !placed {
			return fmt.Errorf("%w: placed %d of %d visitors", ErrCrowded, i, n)
		}
	}
	return nil
}

// visitor builds one visit, or nil when the draw would blur the dwell
// threshold (a short visit whose walk in and out takes too long).
func (p *planner) visitor(short, gate bool) *walker {
	g := p.g
	w := p.newWalker(KindVisitor)
	var wait float64
	spot := p.rng.IntN(len(g.spots))
	if short {
		wait = p.uniform(2, 6)
		if p.rng.IntN(3) > 0 {
			spot = 0 // the machine nearest the entrance keeps short visits short
		}
	} else {
		// 14..20 s rather than the full 14..24: a background model learning
		// at 0.0005 per frame absorbs a motionless figure after ~21 s.
		wait = p.uniform(14, 20)
	}
	hold := max(p.secs(wait), 2)
	w.Wait = frameTime(hold, p.cfg.FPS)
	s := g.spots[spot]
	w.Spot = [2]float64{s.x, s.y}
	xe, xl := p.uniform(g.entryX1, g.entryX2), p.uniform(g.entryX1, g.entryX2)
	top := p.topOut()
	aisle := 0.147 * g.w // the path past the left-wall machines
	var in, out []waypoint
	at := func(x, y float64) waypoint { return waypoint{pt: pt{x, y}} }
	switch spot {
	case 0:
		in = []waypoint{{pt: s, hold: hold}}
		out = []waypoint{at(xl, top)}
	case 1:
		in = []waypoint{at(aisle, 0.328*g.h), {pt: s, hold: hold}}
		out = []waypoint{at(aisle, 0.328*g.h), at(xl, top)}
	default:
		in = []waypoint{at(aisle, s.y), {pt: s, hold: hold}}
		out = []waypoint{at(aisle, s.y), at(xl, top)}
	}
	w.Exit = ExitUp
	if gate {
		w.Exit = ExitGate
		xg := p.uniform(g.exitX1, g.exitX2)
		bottom := p.bottomOut(w)
		switch spot {
		case 0:
			out = []waypoint{at(0.156*g.w, 0.278*g.h), at(xg, g.lineY-40*g.k), at(xg, bottom)}
		case 1:
			out = []waypoint{at(xg, g.lineY-26*g.k), at(xg, bottom)}
		default:
			out = []waypoint{at(xg, g.lineY-40*g.k), at(xg, bottom)}
		}
	}
	w.simulate(g, p.cfg.FPS, pt{xe, top}, append(in, out...))
	thr := p.l.DwellThreshold.Seconds()
	if short && w.zoneFrames > p.secs(thr-2) {
		return nil
	}
	if !short && w.zoneFrames < p.secs(thr+3) {
		return nil
	}
	return w
}

// planTurnbacks places n walkers who come up to the gate line from either
// side, stop 25..45 px before it and go back the way they came.
func (p *planner) planTurnbacks(n int) error {
	g := p.g
	for i := range n {
		placed := false
		for attempt := 0; attempt < 3000 && !placed; attempt++ {
			w := p.newWalker(KindTurnback)
			x := p.uniform(0.35, 0.77) * g.w
			d := p.uniform(25, 45) * g.k
			hold := max(p.secs(p.uniform(0.5, 1.5)), 2)
			w.Wait = frameTime(hold, p.cfg.FPS)
			from, turn := p.topOut(), g.lineY-d
			if p.rng.IntN(2) == 0 {
				from, turn = p.bottomOut(w), g.lineY+d
			}
			w.Spot = [2]float64{x, turn}
			w.simulate(g, p.cfg.FPS, pt{x, from}, []waypoint{{pt: pt{x, turn}, hold: hold}, {pt: pt{x + p.uniform(-10, 10)*g.k, from}}})
			t := p.uniform(float64(p.lead), float64(p.tail))
			w.start = int(math.Round(t)) - w.visFirst
			if w.dir == 0 && p.fits(w) {
				p.add(w)
				placed = true
			}
		}
		if !placed {
			return fmt.Errorf("%w: placed %d of %d turnbacks", ErrCrowded, i, n)
		}
	}
	return nil
}
