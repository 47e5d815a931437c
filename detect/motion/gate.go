package motion

import (
	"image"
	"image/color"
	"math"
	"time"

	"gocv.io/x/gocv"

	"tallyd/capture"
)

// GateWhere says where a Gate looks for change.
type GateWhere string

// Gate regions.
const (
	GateAnywhere GateWhere = "anywhere" // the whole frame
	GateRules    GateWhere = "rules"    // the zones, and a band around each line
)

// GateConfig tunes a Gate; the site file's sources[].gate block.
type GateConfig struct {
	Where GateWhere
	// Threshold is the fraction of (downscaled) pixels that must change.
	Threshold float64
	// Hold keeps detecting this long after the last change.
	Hold time.Duration
}

// DefaultGateConfig looks anywhere, wakes on a change of 0.1% of the pixels
// (a distant person at 640x360) and holds for 2 s, long enough for a
// person who paused to move again before the detector sleeps.
func DefaultGateConfig() GateConfig {
	return GateConfig{Where: GateAnywhere, Threshold: 0.001, Hold: 2 * time.Second}
}

// GateRegion is where the rules of a source are, in source pixels: zone
// polygons and line segments. A GateRules gate watches only there.
type GateRegion struct {
	Zones [][]image.Point
	Lines [][2]image.Point
}

// gateWidth is the width frames are shrunk to before differencing: enough to
// see a small, distant person, cheap enough to run on every frame.
const gateWidth = 320

// gateAlpha is how fast the gate's reference image follows the scene: a
// change fades from it in a few seconds at 10 fps, so lighting drift and
// someone standing still for long stop waking the detector.
const gateAlpha = 0.05

// Gate decides from a cheap difference against a running-average reference
// image whether a frame is worth running the detector on. While it says no,
// the source's tracks simply wait (they coast: no detections are fed, so no
// track ends and no count is made). One Gate serves one source; it is not
// safe for concurrent use.
type Gate struct {
	threshold float64
	hold      time.Duration
	size      image.Point
	mask      gocv.Mat // 255 where change counts; empty Mat = anywhere
	maskArea  int

	ref, small, gray, grayF, diff gocv.Mat
	started                       bool
	lastMotion                    time.Duration
}

// NewGate makes a gate for frames of width x height pixels. Close it to
// release its OpenCV images.
func NewGate(c GateConfig, width, height int, region GateRegion) *Gate {
	scale := math.Min(1, float64(gateWidth)/float64(width))
	size := image.Pt(max(1, int(math.Round(float64(width)*scale))), max(1, int(math.Round(float64(height)*scale))))
	g := &Gate{
		threshold: c.Threshold, hold: c.Hold, size: size,
		ref: gocv.NewMat(), small: gocv.NewMat(), gray: gocv.NewMat(), grayF: gocv.NewMat(), diff: gocv.NewMat(),
		maskArea: size.X * size.Y,
	}
	if c.Where == GateRules && len(region.Zones)+len(region.Lines) > 0 {
		g.mask = gocv.Zeros(size.Y, size.X, gocv.MatTypeCV8U)
		white := color.RGBA{255, 255, 255, 0}
		pt := func(p image.Point) image.Point {
			return image.Pt(int(math.Round(float64(p.X)*scale)), int(math.Round(float64(p.Y)*scale)))
		}
		for _, z := range region.Zones {
			poly := make([]image.Point, len(z))
			for i, p := range z {
				poly[i] = pt(p)
			}
			pv := gocv.NewPointsVectorFromPoints([][]image.Point{poly})
			gocv.FillPoly(&g.mask, pv, white)
			pv.Close()
		}
		// A band around each line, a quarter of the frame height wide: people
		// about to cross are tracked for a while before they reach it.
		thick := max(3, size.Y/4)
		for _, l := range region.Lines {
			gocv.Line(&g.mask, pt(l[0]), pt(l[1]), white, thick)
		}
		g.maskArea = max(1, gocv.CountNonZero(g.mask))
	}
	return g
}

// Moving reports whether the frame shows change (or came within hold of the
// last change). The first frame always counts as moving.
func (g *Gate) Moving(f *capture.Frame) bool {
	gocv.Resize(f.Mat, &g.small, g.size, 0, 0, gocv.InterpolationArea)
	gocv.CvtColor(g.small, &g.gray, gocv.ColorBGRToGray)
	g.gray.ConvertTo(&g.grayF, gocv.MatTypeCV32F)
	if !g.started {
		g.grayF.CopyTo(&g.ref)
		g.started, g.lastMotion = true, f.PTS
		return true
	}
	gocv.AbsDiff(g.grayF, g.ref, &g.diff)
	gocv.AddWeighted(g.ref, 1-gateAlpha, g.grayF, gateAlpha, 0, &g.ref)
	// 25 grey levels: well above sensor noise, well below a person against
	// a floor (common practice for frame differencing).
	gocv.Threshold(g.diff, &g.diff, 25, 255, gocv.ThresholdBinary)
	g.diff.ConvertTo(&g.gray, gocv.MatTypeCV8U)
	if g.mask.Ptr() != nil {
		gocv.BitwiseAnd(g.gray, g.mask, &g.gray)
	}
	if float64(gocv.CountNonZero(g.gray))/float64(g.maskArea) >= g.threshold {
		g.lastMotion = f.PTS
	}
	return f.PTS-g.lastMotion <= g.hold
}

// Reset forgets the reference image (after a reconnect the scene may differ).
func (g *Gate) Reset() { g.started = false }

// Close releases the gate's images. Safe to call twice.
func (g *Gate) Close() error {
	for _, m := range []*gocv.Mat{&g.ref, &g.small, &g.gray, &g.grayF, &g.diff, &g.mask} {
		if m.Ptr() != nil {
			_ = m.Close()
		}
	}
	return nil
}
