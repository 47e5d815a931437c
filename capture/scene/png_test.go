package scene

import (
	"image"
	"image/color"
	"image/png"
	"os"
	"testing"
)

// TestWritePNG writes the busiest frame of seed 1 as a PNG to the path in
// SCENE_PNG, for a person to look at. Skipped when the variable is unset.
func TestWritePNG(t *testing.T) {
	path := os.Getenv("SCENE_PNG")
	if path == "" {
		t.Skip("set SCENE_PNG=/tmp/scene.png to write a sample frame")
	}
	s, err := New(Config{Seed: 1}.WithDefaults())
	if err != nil {
		t.Fatal(err)
	}
	busiest := 0
	for i := range s.Frames() {
		if len(s.Truth(i)) > len(s.Truth(busiest)) {
			busiest = i
		}
	}
	w, h := s.Size()
	buf := make([]byte, w*h*3)
	s.Render(busiest, buf)
	img := image.NewRGBA(image.Rect(0, 0, w, h))
	for y := range h {
		for x := range w {
			o := (y*w + x) * 3
			img.Set(x, y, color.RGBA{R: buf[o+2], G: buf[o+1], B: buf[o], A: 255})
		}
	}
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if err := png.Encode(f, img); err != nil {
		t.Fatal(err)
	}
	t.Logf("frame %d with %d people written to %s", busiest, len(s.Truth(busiest)), path)
}
