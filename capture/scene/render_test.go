package scene

import (
	"math"
	"testing"

	"tallyd/detect"
)

// busyFrames returns up to n frames with the most people in them, spread
// over the scene.
func busyFrames(s *Scene, n int) []int {
	var out []int
	step := s.Frames() / n
	for k := range n {
		best := k * step
		for i := k * step; i < (k+1)*step; i++ {
			if len(s.Truth(i)) > len(s.Truth(best)) {
				best = i
			}
		}
		out = append(out, best)
	}
	return out
}

// figureBoxes are the unclipped boxes of everybody on screen in frame i,
// including people less than 30% visible (drawn, but not in the truth).
func figureBoxes(s *Scene, i int) map[int64]detect.Box {
	out := map[int64]detect.Box{}
	for _, w := range s.ws {
		if b, ok := w.box(s.g, i); ok && s.g.onScreen(b) {
			out[w.ID] = b
		}
	}
	return out
}

// pixRect is the pixel extent of a figure: x0 <= x < x1, y0 <= y < y1.
type pixRect struct{ x0, y0, x1, y1 int }

func (r pixRect) grow(x, y int) pixRect {
	if r.x1 == 0 {
		return pixRect{x, y, x + 1, y + 1}
	}
	return pixRect{min(r.x0, x), min(r.y0, y), max(r.x1, x+1), max(r.y1, y+1)}
}

func insideAny(bs map[int64]detect.Box, x, y int, margin float64) bool {
	fx, fy := float64(x)+0.5, float64(y)+0.5
	for _, b := range bs {
		if fx >= b.X1-margin && fx < b.X2+margin && fy >= b.Y1-margin && fy < b.Y2+margin {
			return true
		}
	}
	return false
}

func TestTruthMatchesPixels(t *testing.T) {
	for _, seed := range []int64{1, 2} {
		s, err := New(Config{Seed: seed}.WithDefaults())
		if err != nil {
			t.Fatal(err)
		}
		w, h := s.Size()
		bg, clean, noisy := make([]byte, w*h*3), make([]byte, w*h*3), make([]byte, w*h*3)
		s.Background(bg)
		var sum, sum2, n float64
		checked := 0
		maxDev := 0
		for _, i := range busyFrames(s, 6) {
			mask := make([]int64, w*h)
			s.render(i, clean, false, mask)
			s.Render(i, noisy)
			truth := s.Truth(i)
			if len(truth) < 2 {
				t.Fatalf("seed %d frame %d: only %d people in a busy frame", seed, i, len(truth))
			}
			figs := figureBoxes(s, i)
			ext := map[int64]pixRect{}
			// Every truth box shows somebody, and at least 30% of the
			// figure is in the frame.
			for _, o := range truth {
				diff := 0
				for y := int(o.Box.Y1); y < int(math.Ceil(o.Box.Y2)); y++ {
					for x := int(o.Box.X1); x < int(math.Ceil(o.Box.X2)); x++ {
						p := (y*w + x) * 3
						if clean[p] != bg[p] || clean[p+1] != bg[p+1] || clean[p+2] != bg[p+2] {
							diff++
						}
					}
				}
				if float64(diff) < 0.2*o.Box.Area() {
					t.Errorf("seed %d frame %d: box of %d has %d figure pixels in %.0f", seed, i, o.ID, diff, o.Box.Area())
				}
			}
			for _, b := range figs {
				if c := b.Clip(float64(w), float64(h)); c.Area() >= 0.3*b.Area() != hasBox(truth, c) {
					t.Errorf("seed %d frame %d: figure %v visible %.0f%%, truth disagrees", seed, i, b, 100*c.Area()/b.Area())
				}
			}
			for y := range h {
				for x := range w {
					p := y*w + x
					if id := mask[p]; id != 0 {
						// Figure pixels lie inside their own box and stand
						// out from the floor under them by >= 40 grey levels.
						if !insideAny(map[int64]detect.Box{id: figs[id]}, x, y, 0) {
							t.Fatalf("seed %d frame %d: figure pixel (%d,%d) outside box of %d", seed, i, x, y, id)
						}
						ext[id] = ext[id].grow(x, y)
						d := 0
						for c := range 3 {
							d = max(d, absInt(int(clean[3*p+c])-int(bg[3*p+c])))
						}
						if d < 40 {
							t.Errorf("seed %d frame %d: figure pixel (%d,%d) differs from the floor by only %d", seed, i, x, y, d)
						}
						continue
					}
					if insideAny(figs, x, y, 1) {
						continue
					}
					// Away from people: the background plus noise only.
					for c := range 3 {
						if clean[3*p+c] != bg[3*p+c] {
							t.Fatalf("seed %d frame %d: clean pixel (%d,%d) is not background", seed, i, x, y)
						}
						d := float64(int(noisy[3*p+c]) - int(bg[3*p+c]))
						maxDev = max(maxDev, absInt(int(d)))
						sum, sum2, n = sum+d, sum2+d*d, n+1
					}
				}
			}
			// A fully visible figure fills its truth box to the pixel: the
			// drawn extent is the box rounded outwards, at most 1 px in.
			for _, o := range truth {
				b, e := o.Box, ext[o.ID]
				if b != figs[o.ID] {
					continue // clipped
				}
				checked++
				if float64(e.x0) < b.X1-1 || float64(e.x0) > b.X1+1 || float64(e.x1) < b.X2-1 || float64(e.x1) > b.X2+1 ||
					float64(e.y0) < b.Y1-1 || float64(e.y0) > b.Y1+1 || float64(e.y1) < b.Y2-1 || float64(e.y1) > b.Y2+1 {
					t.Errorf("seed %d frame %d: %d drawn over %+v, truth box %+v", seed, i, o.ID, e, b)
				}
			}
		}
		if checked == 0 {
			t.Errorf("seed %d: no fully visible figure to check box edges on", seed)
		}
		mean := sum / n
		sd := math.Sqrt(sum2/n - mean*mean)
		// Rounding to whole grey levels adds 1/12 to the variance.
		want := math.Sqrt(DefaultNoise*DefaultNoise + 1.0/12)
		if math.Abs(mean) > 0.05 || math.Abs(sd-want) > 0.05*want || maxDev > 8 {
			t.Errorf("seed %d: noise mean %.3f sd %.3f (want %.3f) max %d", seed, mean, sd, want, maxDev)
		}
	}
}

func hasBox(objs []Object, b detect.Box) bool {
	for _, o := range objs {
		if o.Box == b {
			return true
		}
	}
	return false
}

func absInt(v int) int {
	if v < 0 {
		return -v
	}
	return v
}

func TestEmptyFrames(t *testing.T) {
	s, err := New(Config{Seed: 1}.WithDefaults())
	if err != nil {
		t.Fatal(err)
	}
	w, h := s.Size()
	bg, buf := make([]byte, w*h*3), make([]byte, w*h*3)
	s.Background(bg)
	for _, i := range []int{-1, 0, int(3 * s.FPS()), s.Frames() - 1, s.Frames()} {
		if len(s.Truth(i)) != 0 || len(figureBoxes(s, i)) != 0 {
			t.Errorf("frame %d: want nobody on screen", i)
		}
		s.render(i, buf, false, nil)
		if string(buf) != string(bg) {
			t.Errorf("frame %d: clean render is not the empty background", i)
		}
	}
}

func TestNoiseOff(t *testing.T) {
	cfg := Config{Seed: 1}.WithDefaults()
	cfg.Noise = 0
	s, err := New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	w, h := s.Size()
	got, want := make([]byte, w*h*3), make([]byte, w*h*3)
	for _, i := range busyFrames(s, 3) {
		s.Render(i, got)
		s.render(i, want, false, nil)
		if string(got) != string(want) {
			t.Errorf("frame %d: noise 0 still adds noise", i)
		}
	}
}

func BenchmarkRender(b *testing.B) {
	s, err := New(Config{Seed: 1}.WithDefaults())
	if err != nil {
		b.Fatal(err)
	}
	w, h := s.Size()
	buf := make([]byte, w*h*3)
	frames := busyFrames(s, 10)
	b.SetBytes(int64(len(buf)))
	i := 0
	for b.Loop() {
		s.Render(frames[i%len(frames)], buf)
		i++
	}
}

func BenchmarkNew(b *testing.B) {
	for b.Loop() {
		if _, err := New(Config{Seed: 1}.WithDefaults()); err != nil {
			b.Fatal(err)
		}
	}
}
