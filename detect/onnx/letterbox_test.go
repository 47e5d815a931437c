package onnx

import (
	"fmt"
	"image"
	"math"
	"math/rand/v2"
	"testing"

	"gocv.io/x/gocv"
)

var placements = []Placement{PlaceTopLeft, PlaceCenter}

// TestGeometryRoundTrip: source -> input -> source returns within 0.5 px
// for random frame and input sizes, both placements.
func TestGeometryRoundTrip(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for i := 0; i < 2000; i++ {
		sw, sh := 1+rng.IntN(4000), 1+rng.IntN(3000)
		iw, ih := 32+rng.IntN(1000), 32+rng.IntN(1000)
		for _, pl := range placements {
			g := NewGeometry(sw, sh, iw, ih, pl)
			if g.ContentW > iw || g.ContentH > ih || g.PadX+g.ContentW > iw || g.PadY+g.ContentH > ih {
				t.Fatalf("%+v: content outside the input", g)
			}
			x, y := rng.Float64()*float64(sw), rng.Float64()*float64(sh)
			ix, iy := g.ToInput(x, y)
			bx, by := g.ToSource(ix, iy)
			if math.Abs(bx-x) > 0.5 || math.Abs(by-y) > 0.5 {
				t.Fatalf("%+v: (%v,%v) came back as (%v,%v)", g, x, y, bx, by)
			}
		}
	}
}

// TestLetterboxContent prepares real frames and finds the image inside the
// input tensor: its corners map back to the frame's corners within 0.5 px,
// the rest holds the padding value, both placements.
func TestLetterboxContent(t *testing.T) {
	cfg := Defaults()
	for _, pl := range placements {
		for _, sz := range [][2]int{{768, 576}, {640, 480}, {1920, 1080}, {500, 700}, {416, 416}, {100, 37}, {33, 900}} {
			t.Run(fmt.Sprintf("%s/%dx%d", pl, sz[0], sz[1]), func(t *testing.T) {
				cfg.Place = pl
				p := newPreproc(cfg, 416, 416)
				f := uniformFrame(sz[0], sz[1], 255)
				defer f.Close()
				buf := make([]float32, p.size())
				g, err := p.fill(f.Mat, buf)
				if err != nil {
					t.Fatal(err)
				}
				x1, y1, x2, y2 := 416, 416, 0, 0
				for y := 0; y < 416; y++ {
					for x := 0; x < 416; x++ {
						switch v := buf[y*416+x]; v {
						case 255:
							x1, y1, x2, y2 = min(x1, x), min(y1, y), max(x2, x+1), max(y2, y+1)
						case 114:
						default:
							t.Fatalf("pixel (%d,%d) = %v, want 255 (image) or 114 (padding)", x, y, v)
						}
					}
				}
				sx1, sy1 := g.ToSource(float64(x1), float64(y1))
				sx2, sy2 := g.ToSource(float64(x2), float64(y2))
				if math.Abs(sx1) > 0.5 || math.Abs(sy1) > 0.5 || math.Abs(sx2-float64(sz[0])) > 0.5 || math.Abs(sy2-float64(sz[1])) > 0.5 {
					t.Fatalf("image found at input (%d,%d)-(%d,%d) maps to (%.2f,%.2f)-(%.2f,%.2f), want (0,0)-(%d,%d)",
						x1, y1, x2, y2, sx1, sy1, sx2, sy2, sz[0], sz[1])
				}
				if pl == PlaceTopLeft && (x1 != 0 || y1 != 0) {
					t.Errorf("top-left image starts at (%d,%d)", x1, y1)
				}
				if pl == PlaceCenter && (abs(x1-(416-x2)) > 1 || abs(y1-(416-y2)) > 1) {
					t.Errorf("centred image at (%d,%d)-(%d,%d)", x1, y1, x2, y2)
				}
			})
		}
	}
}

func abs(v int) int { return max(v, -v) }

// TestLetterboxMarker draws a white rectangle on a frame twice the input's
// width, finds it in the input and maps it back: within 0.5 px.
func TestLetterboxMarker(t *testing.T) {
	for _, pl := range placements {
		cfg := Defaults()
		cfg.Place = pl
		p := newPreproc(cfg, 416, 416)
		m := gocv.NewMatWithSize(624, 832, gocv.MatTypeCV8UC3)
		defer m.Close()
		want := image.Rect(200, 100, 400, 300)
		roi := m.Region(want) // exactly the pixels 200..399 x 100..299
		roi.SetTo(gocv.NewScalar(255, 255, 255, 0))
		roi.Close()
		buf := make([]float32, p.size())
		g, err := p.fill(m, buf)
		if err != nil {
			t.Fatal(err)
		}
		x1, y1, x2, y2 := 416, 416, 0, 0
		for y := 0; y < 416; y++ {
			for x := 0; x < 416; x++ {
				if buf[y*416+x] > 127.5 {
					x1, y1, x2, y2 = min(x1, x), min(y1, y), max(x2, x+1), max(y2, y+1)
				}
			}
		}
		bx1, by1 := g.ToSource(float64(x1), float64(y1))
		bx2, by2 := g.ToSource(float64(x2), float64(y2))
		for _, d := range []float64{bx1 - 200, by1 - 100, bx2 - 400, by2 - 300} {
			if math.Abs(d) > 0.5 {
				t.Fatalf("%s: marker %v came back as (%.2f,%.2f)-(%.2f,%.2f)", pl, want, bx1, by1, bx2, by2)
			}
		}
	}
}

// TestChannelsAndNormalisation: BGR or RGB planes, scale and mean/std.
func TestChannelsAndNormalisation(t *testing.T) {
	m := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(10, 20, 30, 0), 4, 4, gocv.MatTypeCV8UC3) // B, G, R
	defer m.Close()
	cfg := Defaults()
	get := func(cfg Config) [3]float32 {
		p := newPreproc(cfg, 4, 4)
		buf := make([]float32, p.size())
		if _, err := p.fill(m, buf); err != nil {
			t.Fatal(err)
		}
		return [3]float32{buf[0], buf[16], buf[32]}
	}
	if got := get(cfg); got != [3]float32{10, 20, 30} {
		t.Errorf("bgr 0..255: %v", got)
	}
	cfg.RGB = true
	if got := get(cfg); got != [3]float32{30, 20, 10} {
		t.Errorf("rgb 0..255: %v", got)
	}
	cfg.Scale, cfg.Mean, cfg.Std = 1, [3]float64{0.5, 0.25, 0}, [3]float64{0.5, 0.25, 2}
	want := [3]float32{float32((30.0/255 - 0.5) / 0.5), float32((20.0/255 - 0.25) / 0.25), float32(10.0 / 255 / 2)}
	if got := get(cfg); got != want {
		t.Errorf("rgb 0..1 mean/std: %v, want %v", got, want)
	}
	gray := gocv.NewMatWithSize(4, 4, gocv.MatTypeCV8UC1)
	defer gray.Close()
	if _, err := newPreproc(cfg, 4, 4).fill(gray, make([]float32, 48)); err != errBadFrame {
		t.Errorf("grey frame: err = %v", err)
	}
}
