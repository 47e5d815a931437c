package capture

import (
	"fmt"
	"time"

	"gocv.io/x/gocv"

	"tallyd/capture/scene"
)

// Generated serves the frames of a generated scene as a source.
type Generated struct {
	sc *scene.Scene
	i  int
}

// NewGenerated wraps a generated scene.
func NewGenerated(sc *scene.Scene) *Generated { return &Generated{sc: sc} }

// Info describes the scene as a source.
func (g *Generated) Info() Info {
	w, h := g.sc.Size()
	return Info{Width: w, Height: h, FPS: g.sc.FPS(), Frames: g.sc.Frames()}
}

// Read implements Reader: it renders the next frame straight into dst.
func (g *Generated) Read(dst *gocv.Mat) (time.Duration, error) {
	if g.i >= g.sc.Frames() {
		return 0, ErrEndOfStream
	}
	w, h := g.sc.Size()
	if dst.Empty() || dst.Cols() != w || dst.Rows() != h || dst.Type() != gocv.MatTypeCV8UC3 {
		_ = dst.Close()
		*dst = gocv.NewMatWithSize(h, w, gocv.MatTypeCV8UC3)
	}
	buf, err := dst.DataPtrUint8()
	if err != nil {
		return 0, fmt.Errorf("render generated frame %d: %w", g.i, err)
	}
	g.sc.Render(g.i, buf)
	pts := time.Duration(float64(g.i) / g.sc.FPS() * float64(time.Second))
	g.i++
	return pts, nil
}

// Close implements Reader.
func (g *Generated) Close() error { return nil }
