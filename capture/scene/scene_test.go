package scene

import (
	"crypto/sha256"
	"fmt"
	"math"
	"reflect"
	"sync"
	"testing"
	"time"

	"tallyd/detect"
)

// gateCross is the test's own segment intersection: +1 when the anchor step
// p->q crosses gate segment a-b towards the y-increasing side, -1 the other
// way, 0 if it misses. A point on the line counts as past it.
func gateCross(p, q, a, b [2]float64) int {
	orient := func(r [2]float64) float64 { return (b[0]-a[0])*(r[1]-a[1]) - (b[1]-a[1])*(r[0]-a[0]) }
	op, oq := orient(p), orient(q)
	if (op >= 0) == (oq >= 0) {
		return 0
	}
	// The step's own line must separate the gate's ends (or touch them).
	d := [2]float64{q[0] - p[0], q[1] - p[1]}
	sa := d[0]*(a[1]-p[1]) - d[1]*(a[0]-p[0])
	sb := d[0]*(b[1]-p[1]) - d[1]*(b[0]-p[0])
	if sa*sb > 0 {
		return 0
	}
	if oq >= 0 {
		return 1
	}
	return -1
}

func bottomCentre(b detect.Box) [2]float64 { return [2]float64{(b.X1 + b.X2) / 2, b.Y2} }

// vDist is the vertical distance from a box to the horizontal line y.
func vDist(b detect.Box, y float64) float64 {
	switch {
	case b.Y2 < y:
		return y - b.Y2
	case b.Y1 > y:
		return b.Y1 - y
	}
	return 0
}

// edgeDist is the distance from p to the nearest edge of polygon poly.
func edgeDist(poly [][2]float64, p [2]float64) float64 {
	best := math.Inf(1)
	for i := range poly {
		a, b := poly[i], poly[(i+1)%len(poly)]
		ex, ey := b[0]-a[0], b[1]-a[1]
		t := math.Max(0, math.Min(1, ((p[0]-a[0])*ex+(p[1]-a[1])*ey)/(ex*ex+ey*ey)))
		best = math.Min(best, math.Hypot(p[0]-a[0]-t*ex, p[1]-a[1]-t*ey))
	}
	return best
}

func inPoly(poly [][2]float64, p [2]float64) bool {
	in := false
	for i, j := 0, len(poly)-1; i < len(poly); j, i = i, i+1 {
		a, b := poly[i], poly[j]
		if (a[1] > p[1]) != (b[1] > p[1]) && p[0] < (b[0]-a[0])*(p[1]-a[1])/(b[1]-a[1])+a[0] {
			in = !in
		}
	}
	return in
}

// observed is what the test reads off the ground truth for one walker.
type observed struct {
	crossings  []int // directions in order
	crossX     []float64
	zoneFrames int
	spotFrames int
	minLine    float64 // smallest anchor distance to the gate line
	maxStep    float64 // largest frame-to-frame move of a fully visible box
	maxH, minH float64 // fully visible box heights
	first      int
	last       int
}

func observe(t *testing.T, s *Scene) map[int64]*observed {
	t.Helper()
	w, h := s.Size()
	l := s.Layout()
	gate, zone := l.GatePixels(w, h), l.ZonePixels(w, h)
	plan := map[int64]Walker{}
	for _, wk := range s.Plan() {
		plan[wk.ID] = wk
	}
	obs := map[int64]*observed{}
	prev := map[int64]detect.Box{}
	for i := range s.Frames() {
		cur := map[int64]detect.Box{}
		for _, o := range s.Truth(i) {
			cur[o.ID] = o.Box
			ob := obs[o.ID]
			if ob == nil {
				ob = &observed{minLine: math.Inf(1), minH: math.Inf(1), first: i}
				obs[o.ID] = ob
			}
			ob.last = i
			a := bottomCentre(o.Box)
			if inPoly(zone, a) {
				ob.zoneFrames++
			}
			if sp := plan[o.ID].Spot; plan[o.ID].Kind == KindVisitor && math.Hypot(a[0]-sp[0], a[1]-sp[1]) <= 1 {
				ob.spotFrames++
			}
			ob.minLine = math.Min(ob.minLine, math.Abs(a[1]-gate[0][1]))
			full := o.Box.X1 > 0 && o.Box.Y1 > 0 && o.Box.X2 < float64(w) && o.Box.Y2 < float64(h)
			if full {
				ob.maxH, ob.minH = math.Max(ob.maxH, o.Box.H()), math.Min(ob.minH, o.Box.H())
			}
			if p, ok := prev[o.ID]; ok {
				if d := gateCross(bottomCentre(p), a, gate[0], gate[1]); d != 0 {
					ob.crossings = append(ob.crossings, d)
					ob.crossX = append(ob.crossX, a[0])
				}
				pfull := p.X1 > 0 && p.Y1 > 0 && p.X2 < float64(w) && p.Y2 < float64(h)
				if full && pfull {
					px, py := p.Center()
					cx, cy := o.Box.Center()
					ob.maxStep = math.Max(ob.maxStep, math.Hypot(cx-px, cy-py))
				}
			}
		}
		prev = cur
	}
	return obs
}

func TestScenario(t *testing.T) {
	for _, seed := range []int64{1, 2, 3} {
		t.Run(fmt.Sprint("seed", seed), func(t *testing.T) {
			s, err := New(Config{Seed: seed}.WithDefaults())
			if err != nil {
				t.Fatal(err)
			}
			w, h := s.Size()
			fw := float64(w)
			l := s.Layout()
			gateY := l.GatePixels(w, h)[0][1]
			zone := l.ZonePixels(w, h)
			frame := time.Duration(float64(time.Second) / s.FPS())
			obs := observe(t, s)
			down, up := 0, 0
			var short, long, shortGate, shortUp, longGate, longUp int
			for _, wk := range s.Plan() {
				o := obs[wk.ID]
				if o == nil {
					t.Fatalf("walker %d never in the truth", wk.ID)
				}
				for _, d := range o.crossings {
					if d > 0 {
						down++
					} else {
						up++
					}
				}
				if len(o.crossings) > 1 {
					t.Errorf("walker %d (%s) crosses %d times", wk.ID, wk.Kind, len(o.crossings))
				}
				if got := len(o.crossings); (got == 1) != (wk.Cross != 0) || (got == 1 && o.crossings[0] != wk.Cross) {
					t.Errorf("walker %d: truth crossings %v, plan says %d", wk.ID, o.crossings, wk.Cross)
				}
				if s.Time(o.first) != wk.Enter || s.Time(o.last) != wk.Leave {
					t.Errorf("walker %d: truth from %v to %v, plan %v to %v", wk.ID, s.Time(o.first), s.Time(o.last), wk.Enter, wk.Leave)
				}
				// Empty first 3 s and no new entries in the last 5 s; gone before the end.
				if wk.Enter < 3*time.Second || wk.Enter > s.Config().Duration-5*time.Second || o.last >= s.Frames()-1 {
					t.Errorf("walker %d on screen %v..%v, outside the allowed window", wk.ID, wk.Enter, wk.Leave)
				}
				// At most ~8 px per frame at 10 fps, sizes 40..70 px with 0.75x at the top.
				if o.maxStep > 8.01 {
					t.Errorf("walker %d moves %.2f px in one frame", wk.ID, o.maxStep)
				}
				if wk.Height < 40 || wk.Height > 70 || o.maxH > 70.01 || o.minH < 0.75*40-0.01 {
					t.Errorf("walker %d height %.1f, seen %.1f..%.1f", wk.ID, wk.Height, o.minH, o.maxH)
				}
				if wk.Speed < 0.6 || wk.Speed > 1.8 {
					t.Errorf("walker %d speed %.2f m/s", wk.ID, wk.Speed)
				}
				switch wk.Kind {
				case KindThrough:
					if len(o.crossings) != 1 || o.crossX[0] < 0.32*fw || o.crossX[0] > 0.80*fw {
						t.Errorf("through walker %d crosses %v at x %v", wk.ID, o.crossings, o.crossX)
					}
					if o.zoneFrames > 0 {
						t.Errorf("through walker %d enters the ticket zone", wk.ID)
					}
				case KindTurnback:
					if len(o.crossings) != 0 || o.minLine < 25 {
						t.Errorf("turnback %d crosses %v, comes %.1f px from the line", wk.ID, o.crossings, o.minLine)
					}
				case KindVisitor:
					// Standing time at the machine is the planned wait, within a frame.
					if d := time.Duration(o.spotFrames)*frame - wk.Wait; d.Abs() > frame {
						t.Errorf("visitor %d stands %d frames, plan waits %v", wk.ID, o.spotFrames, wk.Wait)
					}
					if d := time.Duration(o.zoneFrames)*frame - wk.ZoneTime; d.Abs() > frame {
						t.Errorf("visitor %d in zone %d frames, plan says %v", wk.ID, o.zoneFrames, wk.ZoneTime)
					}
					if !inPoly(zone, wk.Spot) || edgeDist(zone, wk.Spot) < 15 {
						t.Errorf("visitor %d spot %v is not 15 px inside the zone", wk.ID, wk.Spot)
					}
					gateExit := wk.Exit == ExitGate
					if gateExit != (wk.Cross == 1) {
						t.Errorf("visitor %d exit %q but crossing %d", wk.ID, wk.Exit, wk.Cross)
					}
					if gateExit && (o.crossX[0] < 0.38*fw-1 || o.crossX[0] > 0.45*fw+1) {
						t.Errorf("visitor %d crosses the gate at x %.1f", wk.ID, o.crossX[0])
					}
					thr := l.DwellThreshold
					switch {
					case wk.Wait >= 2*time.Second && wk.Wait <= 6*time.Second && wk.ZoneTime < thr-time.Second:
						short++
						shortGate += b2i(gateExit)
						shortUp += b2i(!gateExit)
					case wk.Wait >= 14*time.Second && wk.Wait <= 24*time.Second && wk.ZoneTime > thr+3*time.Second:
						long++
						longGate += b2i(gateExit)
						longUp += b2i(!gateExit)
					default:
						t.Errorf("visitor %d waits %v, %v in zone: not clearly short or long", wk.ID, wk.Wait, wk.ZoneTime)
					}
				}
			}
			sum := s.Summary()
			t.Logf("down %d up %d, visitors short %d long %d, turnbacks %d, close passes %d, at most %d on screen",
				down, up, short, long, sum.Turnbacks, len(s.ClosePasses()), sum.MaxOnScreen)
			if down < 20 || up < 20 || down != sum.Down || up != sum.Up {
				t.Errorf("crossings down %d up %d (summary %d, %d), want >= 20 each", down, up, sum.Down, sum.Up)
			}
			if short != 4 || long != 4 || shortGate != 2 || longGate != 2 || longUp != 2 || shortUp != 2 {
				t.Errorf("visitors short %d (gate %d, up %d) long %d (gate %d, up %d), want 4 (2, 2) and 4 (2, 2)",
					short, shortGate, shortUp, long, longGate, longUp)
			}
			if sum.Turnbacks < 3 || sum.MaxOnScreen > maxOnScreen {
				t.Errorf("turnbacks %d, max on screen %d", sum.Turnbacks, sum.MaxOnScreen)
			}
			checkSpacing(t, s, gateY)
			checkClosePasses(t, s, gateY)
		})
	}
}

func b2i(b bool) int {
	if b {
		return 1
	}
	return 0
}

// checkSpacing: no two truth boxes ever overlap, and none come within the
// visible gap of each other near the gate line.
func checkSpacing(t *testing.T, s *Scene, gateY float64) {
	t.Helper()
	for i := range s.Frames() {
		objs := s.Truth(i)
		for a := range objs {
			if objs[a].Class != ClassPerson || (a > 0 && objs[a].ID <= objs[a-1].ID) {
				t.Fatalf("frame %d: truth not sorted persons: %+v", i, objs)
			}
			for b := a + 1; b < len(objs); b++ {
				ba, bb := objs[a].Box, objs[b].Box
				if iou := ba.IoU(bb); iou > 0 {
					near := vDist(ba, gateY) <= 25 || vDist(bb, gateY) <= 25
					t.Errorf("frame %d: %d and %d overlap (IoU %.3f, near gate %v)", i, objs[a].ID, objs[b].ID, iou, near)
				}
				dx := math.Max(bb.X1-ba.X2, ba.X1-bb.X2)
				dy := math.Max(bb.Y1-ba.Y2, ba.Y1-bb.Y2)
				if gap := math.Max(dx, dy); gap < 8-1e-9 {
					t.Errorf("frame %d: %d and %d only %.1f px apart", i, objs[a].ID, objs[b].ID, gap)
				}
			}
		}
	}
}

// checkClosePasses: at least 3 per seed, each a real side-by-side pass in
// the truth, with a visible gap, away from the gate line.
func checkClosePasses(t *testing.T, s *Scene, gateY float64) {
	t.Helper()
	cps := s.ClosePasses()
	if len(cps) < 3 {
		t.Errorf("%d close passes, want >= 3", len(cps))
	}
	for _, cp := range cps {
		f := int(math.Round(cp.At.Seconds() * s.FPS()))
		var ba, bb *detect.Box
		for _, o := range s.Truth(f) {
			switch o.ID {
			case cp.A:
				ba = &o.Box
			case cp.B:
				bb = &o.Box
			}
		}
		if ba == nil || bb == nil {
			t.Errorf("close pass %+v: not both in the truth", cp)
			continue
		}
		gap := math.Max(bb.X1-ba.X2, ba.X1-bb.X2)
		overlapY := math.Min(ba.Y2, bb.Y2) - math.Max(ba.Y1, bb.Y1)
		if gap < 8-1e-9 || gap >= 20 || overlapY <= 0 {
			t.Errorf("close pass %+v: truth gap %.1f, vertical overlap %.1f", cp, gap, overlapY)
		}
		if vDist(*ba, gateY) < 30 || vDist(*bb, gateY) < 30 || cp.LineDist < 30 {
			t.Errorf("close pass %+v: within 30 px of the gate line", cp)
		}
	}
}

func TestDeterminism(t *testing.T) {
	a, err := New(Config{Seed: 7}.WithDefaults())
	if err != nil {
		t.Fatal(err)
	}
	b, err := New(Config{Seed: 7}.WithDefaults())
	if err != nil {
		t.Fatal(err)
	}
	c, err := New(Config{Seed: 8}.WithDefaults())
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(a.Plan(), b.Plan()) || !reflect.DeepEqual(a.ClosePasses(), b.ClosePasses()) {
		t.Error("same seed, different plans")
	}
	if reflect.DeepEqual(a.Plan(), c.Plan()) {
		t.Error("seeds 7 and 8 give the same plan")
	}
	for i := range a.Frames() {
		if !reflect.DeepEqual(a.Truth(i), b.Truth(i)) {
			t.Fatalf("frame %d: same seed, different truth", i)
		}
	}
	w, h := a.Size()
	fa, fb, fc := make([]byte, w*h*3), make([]byte, w*h*3), make([]byte, w*h*3)
	for _, i := range []int{0, 100, 555, 1234} {
		a.Render(i, fa)
		b.Render(i, fb)
		c.Render(i, fc)
		if string(fa) != string(fb) {
			t.Errorf("frame %d: same seed, different pixels", i)
		}
		if string(fa) == string(fc) {
			t.Errorf("frame %d: seeds 7 and 8 give the same pixels", i)
		}
	}
}

func TestRenderOrderIndependent(t *testing.T) {
	s, err := New(Config{Seed: 3}.WithDefaults())
	if err != nil {
		t.Fatal(err)
	}
	w, h := s.Size()
	const from, n = 400, 16
	sums := func(order []int, parallel bool) [n][32]byte {
		var out [n][32]byte
		var wg sync.WaitGroup
		for _, i := range order {
			job := func() {
				buf := make([]byte, w*h*3)
				s.Render(from+i, buf)
				out[i] = sha256.Sum256(buf)
			}
			if parallel {
				wg.Go(job)
			} else {
				job()
			}
		}
		wg.Wait()
		return out
	}
	fwd, rev := make([]int, n), make([]int, n)
	for i := range n {
		fwd[i], rev[i] = i, n-1-i
	}
	want := sums(fwd, false)
	if got := sums(rev, false); got != want {
		t.Error("frames rendered in reverse differ from frames rendered in order")
	}
	if got := sums(fwd, true); got != want {
		t.Error("frames rendered concurrently differ from frames rendered in order")
	}
}

func TestOtherSizes(t *testing.T) {
	tests := []Config{
		{Seed: 4, Width: 1280, Height: 720, FPS: 25},
		{Seed: 5, Width: 320, Height: 180, Duration: 100 * time.Second, Crossings: 10, Visitors: 4},
	}
	for _, cfg := range tests {
		s, err := New(cfg.WithDefaults())
		if err != nil {
			t.Fatalf("New(%+v): %v", cfg, err)
		}
		w, h := s.Size()
		if w != cfg.Width || h != cfg.Height {
			t.Errorf("Size() = %d, %d, want %d, %d", w, h, cfg.Width, cfg.Height)
		}
		if want := int(math.Round(s.Config().Duration.Seconds() * s.FPS())); s.Frames() != want {
			t.Errorf("Frames() = %d, want %d", s.Frames(), want)
		}
		sum := s.Summary()
		if sum.Down < s.Config().Crossings || sum.Up < s.Config().Crossings {
			t.Errorf("%+v: crossings %d down, %d up", cfg, sum.Down, sum.Up)
		}
		buf := make([]byte, w*h*3)
		s.Render(s.Frames()/2, buf)
	}
}
