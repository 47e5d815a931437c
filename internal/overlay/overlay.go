// Package overlay draws what tallyd sees onto a frame: the rules (lines with
// an arrow pointing "in", zones shaded), the current track boxes with their
// ids, and the counts so far. The HTTP snapshots and preview, `tallyd
// snapshot` and `tallyd replay --annotate` all draw with it, so an operator
// checks the counts against the same picture everywhere.
package overlay

import (
	"fmt"
	"image"
	"image/color"
	"math"
	"sort"

	"gocv.io/x/gocv"

	"tallyd/events"
	"tallyd/track"
)

// View is what one source's overlay shows.
type View struct {
	Lines  []events.LineRule // in the frame's pixels
	Zones  []events.ZoneRule
	Active []track.Track // matched in the frame: solid boxes
	Lost   []track.Track // not matched, still kept: thin boxes at the prediction
	Totals map[string]events.Totals
	// Occupancy is each zone's tracks inside now.
	Occupancy map[string]int
}

// Colours (gocv converts RGBA to the frame's BGR order). Chosen to read
// on daylight and night scenes.
var (
	lineColour  = color.RGBA{R: 255, G: 191, B: 0, A: 255}   // amber
	arrowColour = color.RGBA{R: 60, G: 220, B: 80, A: 255}   // green: "in"
	zoneColour  = color.RGBA{R: 40, G: 140, B: 230, A: 255}  // blue
	trackColour = color.RGBA{R: 230, G: 60, B: 200, A: 255}  // magenta
	textBack    = color.RGBA{R: 0, G: 0, B: 0, A: 255}       //
	textColour  = color.RGBA{R: 255, G: 255, B: 255, A: 255} //
)

// zoneAlpha is how strongly zones are shaded.
const zoneAlpha = 0.3

// Draw draws v onto img (a BGR frame) in place.
func Draw(img *gocv.Mat, v View) {
	if img.Empty() {
		return
	}
	scale := textScale(img.Rows())
	thick := max(1, int(math.Round(float64(img.Rows())/360)))
	shadeZones(img, v.Zones)
	for _, z := range v.Zones {
		pts := points(z.Polygon)
		pv := gocv.NewPointsVectorFromPoints([][]image.Point{pts})
		gocv.Polylines(img, pv, true, zoneColour, thick)
		pv.Close()
		label(img, z.Name, pts[0].Add(image.Pt(3, int(14*scale/0.45))), scale)
	}
	for _, l := range v.Lines {
		a, b := pt(l.A), pt(l.B)
		gocv.Line(img, a, b, lineColour, thick+1)
		from, to := InArrow(l, float64(img.Rows())*0.08)
		gocv.ArrowedLine(img, image.Pt(round(from.X), round(from.Y)), image.Pt(round(to.X), round(to.Y)), arrowColour, thick+1)
		gocv.PutText(img, "in", image.Pt(round(to.X)+4, round(to.Y)+4), gocv.FontHersheySimplex, scale, arrowColour, thick)
		label(img, l.Name, a.Add(image.Pt(0, -6)), scale)
	}
	for _, t := range v.Lost {
		gocv.Rectangle(img, rect(t), trackColour, 1)
	}
	for _, t := range v.Active {
		r := rect(t)
		gocv.Rectangle(img, r, trackColour, thick)
		label(img, fmt.Sprintf("%d", t.ID), r.Min.Add(image.Pt(0, -3)), scale)
	}
	counts(img, v, scale)
}

// InArrow is the arrow a line's overlay draws: from the middle of A-B, length
// px long, towards the side a track comes to when it crosses "in" (the
// right-hand side of A→B in image coordinates, y down).
func InArrow(l events.LineRule, px float64) (from, to events.Point) {
	dx, dy := l.B.X-l.A.X, l.B.Y-l.A.Y
	n := math.Hypot(dx, dy)
	mid := events.Point{X: (l.A.X + l.B.X) / 2, Y: (l.A.Y + l.B.Y) / 2}
	if n == 0 {
		return mid, mid
	}
	// (-dy, dx) is A→B turned a quarter to the right on screen.
	return mid, events.Point{X: mid.X - dy/n*px, Y: mid.Y + dx/n*px}
}

// CountLines is the counts panel's text, one line per rule in name order.
func CountLines(v View) []string {
	names := make([]string, 0, len(v.Totals))
	for n := range v.Totals {
		names = append(names, n)
	}
	sort.Strings(names)
	out := make([]string, 0, len(names))
	for _, n := range names {
		t := v.Totals[n]
		switch t.Kind {
		case events.RuleLine:
			out = append(out, fmt.Sprintf("%s in %d out %d", n, t.In, t.Out))
		case events.RuleZone:
			out = append(out, fmt.Sprintf("%s now %d enter %d exit %d", n, v.Occupancy[n], t.Enter, t.Exit))
		}
	}
	return out
}

// counts writes the counts panel in the bottom-left corner, where rules
// are least often drawn.
func counts(img *gocv.Mat, v View, scale float64) {
	lines := CountLines(v)
	y := img.Rows() - 4
	for i := len(lines) - 1; i >= 0; i-- {
		s := lines[i]
		sz := gocv.GetTextSize(s, gocv.FontHersheySimplex, scale, 1)
		gocv.Rectangle(img, image.Rect(2, y-sz.Y-4, 8+sz.X, y+4), textBack, -1)
		gocv.PutText(img, s, image.Pt(5, y), gocv.FontHersheySimplex, scale, textColour, 1)
		y -= sz.Y + 8
	}
}

func shadeZones(img *gocv.Mat, zones []events.ZoneRule) {
	if len(zones) == 0 {
		return
	}
	layer := img.Clone()
	defer layer.Close()
	polys := make([][]image.Point, 0, len(zones))
	for _, z := range zones {
		polys = append(polys, points(z.Polygon))
	}
	pv := gocv.NewPointsVectorFromPoints(polys)
	defer pv.Close()
	gocv.FillPoly(&layer, pv, zoneColour)
	gocv.AddWeighted(layer, zoneAlpha, *img, 1-zoneAlpha, 0, img)
}

// label writes s with a dark background so it reads on any scene.
func label(img *gocv.Mat, s string, at image.Point, scale float64) {
	sz := gocv.GetTextSize(s, gocv.FontHersheySimplex, scale, 1)
	at.X = min(max(at.X, 0), max(0, img.Cols()-sz.X-2))
	at.Y = min(max(at.Y, sz.Y+2), img.Rows()-3)
	gocv.Rectangle(img, image.Rect(at.X-1, at.Y-sz.Y-2, at.X+sz.X+1, at.Y+3), textBack, -1)
	gocv.PutText(img, s, at, gocv.FontHersheySimplex, scale, textColour, 1)
}

func textScale(rows int) float64 { return math.Max(0.35, float64(rows)/800) }

func rect(t track.Track) image.Rectangle {
	return image.Rect(round(t.Box.X1), round(t.Box.Y1), round(t.Box.X2), round(t.Box.Y2))
}

func pt(p events.Point) image.Point { return image.Pt(round(p.X), round(p.Y)) }

func points(ps []events.Point) []image.Point {
	out := make([]image.Point, len(ps))
	for i, p := range ps {
		out[i] = pt(p)
	}
	return out
}

func round(v float64) int { return int(math.Round(v)) }
