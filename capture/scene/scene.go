// Package scene generates a deterministic video scene with exact ground
// truth: a ferry-terminal boarding walkway seen from a high fixed camera,
// with people walking through a gate line, stopping at ticket machines and
// turning back short of the gate.
//
// A Scene renders any frame on demand, in any order and from any number of
// goroutines, so it serves both as a live source and as the input of a
// file writer. Truth lists the people visible in a frame; Plan describes
// the whole scenario so that tests can compare counts against it.
package scene

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"time"

	"tallyd/detect"
)

// ClassPerson is the class of every object in the scene.
const ClassPerson = "person"

// Object is one person visible in one frame.
type Object struct {
	ID    int64      // the Walker ID, stable over the scene
	Class string     // always ClassPerson
	Box   detect.Box // clipped to the frame
}

// ClosePass is a moment where two people walking opposite ways pass side
// by side with a small gap between them, away from the gate line.
type ClosePass struct {
	A, B int64         // walker IDs, A < B
	At   time.Duration // frame time of the smallest gap
	Gap  float64       // smallest horizontal gap between the two boxes, pixels
	// LineDist is the vertical distance in pixels from the gate line to the
	// nearer of the two boxes at At.
	LineDist float64
}

// Summary counts what a perfect counter should report for the scene.
type Summary struct {
	Down, Up    int // gate crossings downwards (y increasing) and upwards
	Through     int // through-walkers
	Visitors    int // ticket-machine visitors
	ShortWaits  int // visitors waiting less than the dwell threshold
	LongWaits   int // visitors waiting more than the dwell threshold
	Turnbacks   int // people who stop short of the gate and go back
	ClosePasses int // opposite-direction passes with a small gap
	MaxOnScreen int // most people visible in one frame
	Walkers     int // everybody
	// FirstEntry and LastDeparture are the earliest Enter and the latest
	// Leave over all walkers.
	FirstEntry    time.Duration
	LastDeparture time.Duration
}

// Scene is a generated walkway scene. It is read-only after New and safe
// for concurrent use.
type Scene struct {
	cfg    Config
	layout Layout
	g      *geom
	frames int
	ws     []*walker // by ID
	passes []ClosePass
	bg     []byte  // clean background, BGR
	noise  []int16 // noise samples indexed by 12 random bits
	clamp  [768]uint8
}

// New plans the scenario for cfg and draws the background. cfg is used as
// given, so that an explicit Noise of 0 gives clean frames: pass
// cfg.WithDefaults() to fill zero fields. New fails with *FieldError
// errors for a bad config and with ErrCrowded when the walkers asked for
// do not fit in the duration.
func New(cfg Config) (*Scene, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	s := &Scene{cfg: cfg, layout: DefaultLayout()}
	s.g = newGeom(cfg.Width, cfg.Height, s.layout)
	s.frames = int(math.Round(cfg.Duration.Seconds() * cfg.FPS))
	ws, err := plan(cfg, s.layout, s.g)
	if errors.Is(err, ErrCrowded) {
		return nil, fmt.Errorf("scene: seed %d: %w; lower crossings (%d) or visitors (%d), or raise duration (%v)",
			cfg.Seed, err, cfg.Crossings, cfg.Visitors, cfg.Duration)
	}
	if err != nil {
		return nil, fmt.Errorf("scene: plan seed %d: %w", cfg.Seed, err)
	}
	s.ws = ws
	s.finish()
	s.bg = s.background()
	s.noise = noiseTable(cfg.Noise)
	for i := range s.clamp {
		s.clamp[i] = uint8(min(max(i-256, 0), 255))
	}
	return s, nil
}

// Frames is the number of frames in the scene: Duration * FPS.
func (s *Scene) Frames() int { return s.frames }

// Size is the frame size in pixels.
func (s *Scene) Size() (w, h int) { return s.cfg.Width, s.cfg.Height }

// FPS is the frame rate.
func (s *Scene) FPS() float64 { return s.cfg.FPS }

// Config is the configuration the scene was built with.
func (s *Scene) Config() Config { return s.cfg }

// Layout is the layout the scene is drawn with.
func (s *Scene) Layout() Layout { return s.layout }

// Time is the timestamp of frame i.
func (s *Scene) Time(i int) time.Duration { return frameTime(i, s.cfg.FPS) }

func frameTime(i int, fps float64) time.Duration {
	return time.Duration(math.Round(float64(i) * float64(time.Second) / fps))
}

// Plan is the scenario: every walker, ordered by ID.
func (s *Scene) Plan() []Walker {
	out := make([]Walker, len(s.ws))
	for i, w := range s.ws {
		out[i] = w.Walker
	}
	return out
}

// ClosePasses lists the opposite-direction passes with a gap under 20 px
// (scaled with the frame size), in time order.
func (s *Scene) ClosePasses() []ClosePass { return append([]ClosePass(nil), s.passes...) }

// Truth lists the people visible in frame i, boxes clipped to the frame,
// leaving out anyone less than 30% visible, ordered by ID. Frames outside
// 0..Frames()-1 are empty.
func (s *Scene) Truth(i int) []Object {
	var out []Object
	for _, w := range s.ws {
		b, ok := w.box(s.g, i)
		if !ok {
			continue
		}
		if c, ok := s.g.truthBox(b); ok {
			out = append(out, Object{ID: w.ID, Class: ClassPerson, Box: c})
		}
	}
	return out
}

// Summary counts the scenario's events.
func (s *Scene) Summary() Summary {
	var sum Summary
	sum.Walkers = len(s.ws)
	sum.ClosePasses = len(s.passes)
	sum.FirstEntry = time.Duration(math.MaxInt64)
	for _, w := range s.ws {
		switch w.Cross {
		case 1:
			sum.Down++
		case -1:
			sum.Up++
		}
		switch w.Kind {
		case KindThrough:
			sum.Through++
		case KindTurnback:
			sum.Turnbacks++
		case KindVisitor:
			sum.Visitors++
			if w.Wait < s.layout.DwellThreshold {
				sum.ShortWaits++
			} else {
				sum.LongWaits++
			}
		}
		sum.FirstEntry = min(sum.FirstEntry, w.Enter)
		sum.LastDeparture = max(sum.LastDeparture, w.Leave)
	}
	if len(s.ws) == 0 {
		sum.FirstEntry = 0
	}
	for i := range s.frames {
		sum.MaxOnScreen = max(sum.MaxOnScreen, len(s.Truth(i)))
	}
	return sum
}

// finish numbers the walkers in order of entry and fills the facts that
// are read off the ground truth: entry, exit, crossing and zone time.
func (s *Scene) finish() {
	g, fps := s.g, s.cfg.FPS
	sort.SliceStable(s.ws, func(i, j int) bool {
		a, b := s.ws[i], s.ws[j]
		if fa, fb := a.start+a.visFirst, b.start+b.visFirst; fa != fb {
			return fa < fb
		}
		return a.pos[a.visFirst].x < b.pos[b.visFirst].x
	})
	for i, w := range s.ws {
		w.ID = int64(i + 1)
		first, last := -1, -1
		var prev pt
		for j := range w.pos {
			c, ok := g.truthBox(w.boxRel(g, j))
			if !ok {
				continue
			}
			if first < 0 {
				first = j
			}
			a := anchor(c)
			if last >= 0 && last == j-1 {
				if d := g.crossing(prev, a); d != 0 {
					w.Cross = d
					w.GateAt = frameTime(w.start+j, fps)
					w.GateX = prev.x + (a.x-prev.x)*(g.lineY-prev.y)/(a.y-prev.y)
				}
			}
			last, prev = j, a
		}
		w.Enter, w.Leave = frameTime(w.start+first, fps), frameTime(w.start+last, fps)
		w.ZoneTime = frameTime(w.zoneFrames, fps)
	}
	s.passes = closePasses(g, s.ws, fps)
}

// closePasses finds every pair of walkers that pass each other going
// opposite ways, both in the truth, with boxes overlapping vertically and a
// horizontal gap under the near-line gap.
func closePasses(g *geom, ws []*walker, fps float64) []ClosePass {
	var out []ClosePass
	for i, a := range ws {
		for _, b := range ws[i+1:] {
			best := ClosePass{Gap: math.Inf(1)}
			for f := max(a.start, b.start); f <= min(a.end(), b.end()); f++ {
				ua, _ := a.box(g, f)
				ub, _ := b.box(g, f)
				ba, okA := g.truthBox(ua)
				bb, okB := g.truthBox(ub)
				if !okA || !okB || a.vy(f)*b.vy(f) >= 0 {
					continue
				}
				if math.Min(ba.Y2, bb.Y2)-math.Max(ba.Y1, bb.Y1) <= 0 {
					continue
				}
				gap := math.Max(bb.X1-ba.X2, ba.X1-bb.X2)
				if gap < g.nearGap && gap < best.Gap {
					best = ClosePass{A: a.ID, B: b.ID, At: frameTime(f, fps), Gap: gap,
						LineDist: math.Min(lineDist(g, ba), lineDist(g, bb))}
				}
			}
			if best.A != 0 {
				out = append(out, best)
			}
		}
	}
	sort.Slice(out, func(i, j int) bool { return out[i].At < out[j].At })
	return out
}

// lineDist is the vertical distance from the gate line to b, 0 if b
// straddles it.
func lineDist(g *geom, b detect.Box) float64 {
	switch {
	case b.Y2 < g.lineY:
		return g.lineY - b.Y2
	case b.Y1 > g.lineY:
		return b.Y1 - g.lineY
	}
	return 0
}
