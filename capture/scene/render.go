package scene

import (
	"fmt"
	"math"

	"tallyd/detect"
)

// Walker colours (BGR). Each differs by at least 40 grey levels on some
// channel from every floor colour below, texture included, so that a
// background subtractor sees every part of a figure.
var (
	shirts = [][3]uint8{
		{40, 40, 200},   // red
		{200, 90, 30},   // blue
		{60, 170, 50},   // green
		{20, 120, 240},  // orange
		{235, 235, 235}, // white
		{160, 150, 20},  // teal
		{180, 120, 240}, // pink
		{150, 40, 140},  // purple
		{28, 28, 32},    // black
		{40, 30, 130},   // maroon
	}
	trousers = [][3]uint8{
		{25, 25, 30},    // black
		{95, 40, 25},    // navy
		{165, 100, 50},  // denim
		{228, 228, 228}, // white
		{140, 190, 215}, // beige
	}
	hairs = [][3]uint8{
		{20, 20, 25},    // black
		{25, 45, 75},    // dark brown
		{90, 175, 220},  // blond
		{218, 218, 218}, // grey
		{30, 30, 200},   // red cap
	}
	shoes = [3]uint8{18, 18, 20}
)

// Background colours (BGR).
var (
	tileBase  = [3]int{150, 153, 156}
	groutCol  = [3]int{122, 125, 128}
	plankBase = [3]int{94, 100, 108}
	seamCol   = [3]int{74, 80, 88}
	kerbCol   = [3]int{132, 136, 140}
	stripeCol = [3]int{30, 190, 228}
	postCol   = [3]int{70, 72, 78}
	quayCol   = [3]int{176, 179, 182}
	waterBase = [3]int{110, 82, 40}
	machBody  = [3]int{118, 80, 56}
	machTop   = [3]int{150, 112, 84}
	screenCol = [3]int{210, 172, 90}
)

// hash mixes integers into 64 well-spread bits (splitmix64 finaliser).
func hash(vs ...uint64) uint64 {
	h := uint64(0x9e3779b97f4a7c15)
	for _, v := range vs {
		h ^= v + 0x9e3779b97f4a7c15 + (h << 6) + (h >> 2)
		h = (h ^ (h >> 30)) * 0xbf58476d1ce4e5b9
		h = (h ^ (h >> 27)) * 0x94d049bb133111eb
		h ^= h >> 31
	}
	return h
}

// jitter is a deterministic offset in -amp..amp.
func jitter(amp int, vs ...uint64) int {
	return int(hash(vs...)%uint64(2*amp+1)) - amp
}

// background draws the empty walkway once: tiled floor, the deck-plank
// walkway band with kerbs, the gate stripe and posts, the ticket machines
// and the quay edge with water beyond.
func (s *Scene) background() []byte {
	g := s.g
	W, H := s.cfg.Width, s.cfg.Height
	seed := uint64(s.cfg.Seed)
	buf := make([]byte, W*H*3)
	tile := int(math.Round(28 * g.k))
	plank := 18 * g.k
	plankLen := 150 * g.k
	stripe := 2 * g.k
	postW, postH := 6*g.k, 9*g.k // half sizes
	for y := range H {
		fy := float64(y) + 0.5
		for x := range W {
			fx := float64(x) + 0.5
			var c [3]int
			switch {
			case fx >= g.waterX:
				r := int(7 * math.Sin(0.45*fy+2.2*math.Sin(0.07*fx+0.02*fy)))
				c = add(waterBase, r+jitter(2, seed, 5, uint64(x), uint64(y)))
			case fx >= g.quayX:
				c = add(quayCol, jitter(3, seed, 6, uint64(x), uint64(y)))
			case fx >= g.bandX1+g.kerb && fx < g.bandX2-g.kerb:
				i := int((fx - g.bandX1 - g.kerb) / plank)
				off := float64(hash(seed, 2, uint64(i))%1000) / 1000 * plankLen
				joint := math.Mod(fy+off, plankLen) < 1.2*g.k
				edge := math.Mod(fx-g.bandX1-g.kerb, plank) < 1.2*g.k
				if joint || edge {
					c = add(seamCol, jitter(2, seed, 3, uint64(x), uint64(y)))
				} else {
					grain := jitter(3, seed, 4, uint64(i), uint64(fy/3), uint64(x%3))
					c = add(plankBase, jitter(6, seed, 2, uint64(i))+grain)
				}
			case fx >= g.bandX1 && fx < g.bandX2:
				c = add(kerbCol, jitter(2, seed, 7, uint64(x), uint64(y)))
			default:
				tx, ty := x/tile, y/tile
				if x%tile == 0 || y%tile == 0 {
					c = add(groutCol, jitter(2, seed, 8, uint64(x), uint64(y)))
				} else {
					c = add(tileBase, jitter(5, seed, 9, uint64(tx), uint64(ty))+jitter(2, seed, 10, uint64(x), uint64(y)))
				}
			}
			// The gate: a painted stripe between two posts.
			if math.Abs(fy-g.lineY) < stripe && fx >= g.gate[0].x && fx < g.gate[1].x {
				c = add(stripeCol, jitter(2, seed, 11, uint64(x), uint64(y)))
			}
			for _, e := range g.gate {
				if math.Abs(fx-e.x) < postW && math.Abs(fy-e.y) < postH {
					c = postCol
					if fy-e.y < -postH+3*g.k {
						c = kerbCol
					}
				}
			}
			for _, m := range g.machines {
				if m.has(fx, fy) {
					c = machBody
					inset := rect{m.x1 + 2*g.k, m.y1 + 2*g.k, m.x2 - 2*g.k, m.y2 - 2*g.k}
					if inset.has(fx, fy) {
						c = machTop
					}
					scr := rect{m.x1 + 4*g.k, m.y1 + 4*g.k, m.x2 - 4*g.k, m.y1 + (m.y2-m.y1)*0.45}
					if scr.has(fx, fy) {
						c = screenCol
					}
				}
			}
			o := (y*W + x) * 3
			buf[o], buf[o+1], buf[o+2] = clampByte(c[0]), clampByte(c[1]), clampByte(c[2])
		}
	}
	return buf
}

func add(c [3]int, d int) [3]int { return [3]int{c[0] + d, c[1] + d, c[2] + d} }

func clampByte(v int) uint8 { return uint8(min(max(v, 0), 255)) }

// Background copies the clean (noiseless) empty walkway into dst, which
// must hold w*h*3 bytes, BGR.
func (s *Scene) Background(dst []byte) {
	s.checkDst(dst)
	copy(dst, s.bg)
}

// Render draws frame i into dst as 8-bit BGR, row-major, len(dst) ==
// w*h*3. The result depends only on the seed and i. Frames outside
// 0..Frames()-1 show the empty walkway.
func (s *Scene) Render(i int, dst []byte) {
	s.checkDst(dst)
	s.render(i, dst, true, nil)
}

func (s *Scene) checkDst(dst []byte) {
	if want := s.cfg.Width * s.cfg.Height * 3; len(dst) != want {
		panic(fmt.Sprintf("scene: frame buffer has %d bytes, want %d", len(dst), want))
	}
}

// render draws frame i; mask, when not nil, gets the walker ID of every
// figure pixel.
func (s *Scene) render(i int, dst []byte, noisy bool, mask []int64) {
	copy(dst, s.bg)
	for _, w := range s.ws {
		b, ok := w.box(s.g, i)
		if !ok || !s.g.onScreen(b) {
			continue
		}
		s.drawFigure(dst, mask, w.ID, b, w.look, float64(w.phase[i-w.start]))
	}
	if noisy {
		s.addNoise(i, dst)
	}
}

// drawFigure draws a person filling box b exactly: head, rounded torso,
// arms and two legs that swing with the walking phase, and shoes.
// A pixel belongs to a shape when its centre does.
func (s *Scene) drawFigure(dst []byte, mask []int64, id int64, b detect.Box, look appearance, phase float64) {
	W, H := s.cfg.Width, s.cfg.Height
	h, w := b.H(), b.W()
	cx := (b.X1 + b.X2) / 2
	r := math.Min(0.12*h, 0.34*w)
	hcy := b.Y1 + r
	tTop, tBot := b.Y1+0.22*h, b.Y1+0.64*h
	rcTop, rcBot := math.Min(0.3*w, 0.1*h), 0.1*w
	lTop, lift := b.Y1+0.60*h, 0.07*h
	aTop := tTop + 0.03*h
	aBotL := b.Y1 + 0.57*h + 0.03*h*math.Sin(phase)
	aBotR := b.Y1 + 0.57*h - 0.03*h*math.Sin(phase)
	lBot := b.Y2 - lift*math.Max(0, math.Sin(phase))
	rBot := b.Y2 - lift*math.Max(0, -math.Sin(phase))
	shoe := 0.06 * h
	x0, x1 := max(int(math.Floor(b.X1)), 0), min(int(math.Ceil(b.X2)), W)
	y0, y1 := max(int(math.Floor(b.Y1)), 0), min(int(math.Ceil(b.Y2)), H)
	for y := y0; y < y1; y++ {
		fy := float64(y) + 0.5
		for x := x0; x < x1; x++ {
			fx := float64(x) + 0.5
			if fx < b.X1 || fx >= b.X2 || fy < b.Y1 || fy >= b.Y2 {
				continue
			}
			var c [3]uint8
			dx := fx - cx
			switch {
			case fy >= tTop && fy < tBot && inRoundRect(dx, fy, 0.36*w, tTop, tBot, rcTop, rcBot):
				c = look.shirt
			case fy >= aTop && dx >= 0.39*w && fy < aBotR, fy >= aTop && dx <= -0.39*w && fy < aBotL:
				c = look.shirt // arms
			case dx*dx+(fy-hcy)*(fy-hcy) <= r*r:
				c = look.hair
			case fy >= lTop && dx >= -0.34*w && dx < -0.04*w && fy < lBot:
				c = look.trousers
				if fy >= lBot-shoe {
					c = shoes
				}
			case fy >= lTop && dx >= 0.04*w && dx < 0.34*w && fy < rBot:
				c = look.trousers
				if fy >= rBot-shoe {
					c = shoes
				}
			default:
				continue
			}
			o := (y*W + x) * 3
			dst[o], dst[o+1], dst[o+2] = c[0], c[1], c[2]
			if mask != nil {
				mask[y*W+x] = id
			}
		}
	}
}

// inRoundRect reports whether (dx, y) lies in a rectangle of half-width hw
// spanning top..bot, centred on dx = 0, with corner radii rt at the top and
// rb at the bottom.
func inRoundRect(dx, y, hw, top, bot, rt, rb float64) bool {
	ax := math.Abs(dx)
	if ax >= hw {
		return false
	}
	if y < top+rt && ax > hw-rt {
		ex, ey := ax-(hw-rt), top+rt-y
		return ex*ex+ey*ey <= rt*rt
	}
	if y > bot-rb && ax > hw-rb {
		ex, ey := ax-(hw-rb), y-(bot-rb)
		return ex*ex+ey*ey <= rb*rb
	}
	return true
}

// noiseTable holds 4096 equally likely samples of a normal distribution
// with standard deviation sd, rounded to whole grey levels (the quantiles
// at (k+0.5)/4096).
func noiseTable(sd float64) []int16 {
	t := make([]int16, 4096)
	for k := range t {
		p := (float64(k) + 0.5) / float64(len(t))
		t[k] = int16(math.Round(sd * math.Sqrt2 * math.Erfinv(2*p-1)))
	}
	return t
}

// addNoise adds sensor noise to every byte of dst, from a generator seeded
// by the scene seed and the frame index only.
func (s *Scene) addNoise(i int, dst []byte) {
	if s.cfg.Noise == 0 {
		return
	}
	x := hash(uint64(s.cfg.Seed), 0x6e6f697365, uint64(i)) | 1
	tab, cl := s.noise, &s.clamp
	n := len(dst)
	j := 0
	for j+5 <= n {
		// xorshift64*: five 12-bit table indices per draw.
		x ^= x >> 12
		x ^= x << 25
		x ^= x >> 27
		r := x * 2685821657736338717
		d := dst[j : j+5 : j+5]
		d[0] = cl[int(d[0])+int(tab[r&4095])+256]
		d[1] = cl[int(d[1])+int(tab[(r>>12)&4095])+256]
		d[2] = cl[int(d[2])+int(tab[(r>>24)&4095])+256]
		d[3] = cl[int(d[3])+int(tab[(r>>36)&4095])+256]
		d[4] = cl[int(d[4])+int(tab[(r>>48)&4095])+256]
		j += 5
	}
	for ; j < n; j++ {
		x ^= x >> 12
		x ^= x << 25
		x ^= x >> 27
		dst[j] = cl[int(dst[j])+int(tab[(x*2685821657736338717)&4095])+256]
	}
}
