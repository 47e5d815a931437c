package pipeline

import (
	"image"
	"image/color"
	"math"
	"time"

	"gocv.io/x/gocv"

	"tallyd/capture"
	"tallyd/events"
	"tallyd/internal/config"
)

// gateWidth is the width frames are shrunk to before differencing: enough to
// see a small, distant person, cheap enough to run on every frame.
const gateWidth = 320

// gateAlpha is how fast the gate's reference image follows the scene: a
// change fades from it in a few seconds at 10 fps, so lighting drift and
// someone standing still for long stop waking the detector.
const gateAlpha = 0.05

// motionGate decides from a cheap difference against a running-average
// reference image whether a frame is worth running the detector on. While it
// says no, the source's tracks simply wait (they coast: no detections are
// fed, so no track ends and no count is made).
type motionGate struct {
	threshold float64
	hold      time.Duration
	size      image.Point
	mask      gocv.Mat // 255 where change counts; empty Mat = anywhere
	maskArea  int

	ref, small, gray, grayF, diff gocv.Mat
	started                       bool
	lastMotion                    time.Duration
}

func newMotionGate(g config.Gate, info capture.Info, lines []events.LineRule, zones []events.ZoneRule) *motionGate {
	scale := math.Min(1, float64(gateWidth)/float64(info.Width))
	size := image.Pt(max(1, int(math.Round(float64(info.Width)*scale))), max(1, int(math.Round(float64(info.Height)*scale))))
	m := &motionGate{
		threshold: g.Threshold, hold: g.Hold.Duration, size: size,
		ref: gocv.NewMat(), small: gocv.NewMat(), gray: gocv.NewMat(), grayF: gocv.NewMat(), diff: gocv.NewMat(),
		maskArea: size.X * size.Y,
	}
	if g.Where == "rules" && len(lines)+len(zones) > 0 {
		m.mask = gocv.Zeros(size.Y, size.X, gocv.MatTypeCV8U)
		white := color.RGBA{255, 255, 255, 0}
		pt := func(p events.Point) image.Point {
			return image.Pt(int(math.Round(p.X*scale)), int(math.Round(p.Y*scale)))
		}
		for _, z := range zones {
			poly := make([]image.Point, len(z.Polygon))
			for i, p := range z.Polygon {
				poly[i] = pt(p)
			}
			pv := gocv.NewPointsVectorFromPoints([][]image.Point{poly})
			gocv.FillPoly(&m.mask, pv, white)
			pv.Close()
		}
		// A band around each line, a quarter of the frame height wide: people
		// about to cross are tracked for a while before they reach it.
		thick := max(3, size.Y/4)
		for _, l := range lines {
			gocv.Line(&m.mask, pt(l.A), pt(l.B), white, thick)
		}
		m.maskArea = max(1, gocv.CountNonZero(m.mask))
	}
	return m
}

// moving reports whether the frame shows change (or came within hold of the
// last change). The first frame always counts as moving.
func (m *motionGate) moving(f *capture.Frame) bool {
	gocv.Resize(f.Mat, &m.small, m.size, 0, 0, gocv.InterpolationArea)
	gocv.CvtColor(m.small, &m.gray, gocv.ColorBGRToGray)
	m.gray.ConvertTo(&m.grayF, gocv.MatTypeCV32F)
	if !m.started {
		m.grayF.CopyTo(&m.ref)
		m.started, m.lastMotion = true, f.PTS
		return true
	}
	gocv.AbsDiff(m.grayF, m.ref, &m.diff)
	gocv.AddWeighted(m.ref, 1-gateAlpha, m.grayF, gateAlpha, 0, &m.ref)
	// 25 grey levels: well above sensor noise, well below a person against
	// a floor (common practice for frame differencing).
	gocv.Threshold(m.diff, &m.diff, 25, 255, gocv.ThresholdBinary)
	m.diff.ConvertTo(&m.gray, gocv.MatTypeCV8U)
	if m.mask.Ptr() != nil {
		gocv.BitwiseAnd(m.gray, m.mask, &m.gray)
	}
	if float64(gocv.CountNonZero(m.gray))/float64(m.maskArea) >= m.threshold {
		m.lastMotion = f.PTS
	}
	return f.PTS-m.lastMotion <= m.hold
}

// reset forgets the reference image (after a reconnect the scene may differ).
func (m *motionGate) reset() { m.started = false }

func (m *motionGate) close() error {
	for _, mat := range []*gocv.Mat{&m.ref, &m.small, &m.gray, &m.grayF, &m.diff, &m.mask} {
		if mat.Ptr() != nil {
			_ = mat.Close()
		}
	}
	return nil
}
