package onnx

import (
	"errors"
	"fmt"
	"image"
	"math"

	"gocv.io/x/gocv"
)

// Geometry maps between source pixels and model input pixels for one
// letterboxed frame: the source is resized keeping its aspect ratio so that
// it fits the input, placed at (PadX, PadY), and the rest is filled.
type Geometry struct {
	SrcW, SrcH         int
	InW, InH           int
	ContentW, ContentH int     // size of the resized source inside the input
	PadX, PadY         int     // left and top offset of the resized source
	ScaleX, ScaleY     float64 // input pixels per source pixel (ContentW/SrcW, ContentH/SrcH)
}

// NewGeometry is the letterbox of a srcW x srcH frame in an inW x inH input.
func NewGeometry(srcW, srcH, inW, inH int, place Placement) Geometry {
	r := math.Min(float64(inW)/float64(srcW), float64(inH)/float64(srcH))
	cw := min(max(int(math.Round(float64(srcW)*r)), 1), inW)
	ch := min(max(int(math.Round(float64(srcH)*r)), 1), inH)
	g := Geometry{SrcW: srcW, SrcH: srcH, InW: inW, InH: inH, ContentW: cw, ContentH: ch,
		ScaleX: float64(cw) / float64(srcW), ScaleY: float64(ch) / float64(srcH)}
	if place == PlaceCenter {
		g.PadX, g.PadY = (inW-cw)/2, (inH-ch)/2
	}
	return g
}

// ToInput maps a source point to input pixels.
func (g Geometry) ToInput(x, y float64) (float64, float64) {
	return x*g.ScaleX + float64(g.PadX), y*g.ScaleY + float64(g.PadY)
}

// ToSource maps an input point to source pixels (not clipped).
func (g Geometry) ToSource(x, y float64) (float64, float64) {
	return (x - float64(g.PadX)) / g.ScaleX, (y - float64(g.PadY)) / g.ScaleY
}

// preproc turns an 8-bit BGR frame into the model's float32 planes: the
// resize is gocv's (OpenCV, bilinear), the conversion one pass over the
// resized bytes through a lookup table per plane, the padding copied rows.
type preproc struct {
	inW, inH int
	place    Placement
	lut      [3][256]float32 // plane -> byte value -> input value
	srcCh    [3]int          // plane -> channel of the BGR pixel
	pad      [3]float32      // input value of the padding per plane
	padRow   [3][]float32    // one input row of padding per plane
}

func newPreproc(cfg Config, inW, inH int) *preproc {
	p := &preproc{inW: inW, inH: inH, place: cfg.Place, srcCh: [3]int{0, 1, 2}}
	if cfg.RGB {
		p.srcCh = [3]int{2, 1, 0}
	}
	for c := 0; c < 3; c++ {
		for v := 0; v < 256; v++ {
			p.lut[c][v] = float32((float64(v)*cfg.Scale/255 - cfg.Mean[c]) / cfg.Std[c])
		}
		p.pad[c] = p.lut[c][cfg.Pad]
		p.padRow[c] = make([]float32, inW)
		for i := range p.padRow[c] {
			p.padRow[c][i] = p.pad[c]
		}
	}
	return p
}

// size is the number of float32 values of one prepared image.
func (p *preproc) size() int { return 3 * p.inW * p.inH }

var errBadFrame = errors.New("frame is not an 8-bit 3-channel image")

// fill letterboxes src into dst (3 planes of inH x inW) and returns the
// geometry used.
func (p *preproc) fill(src gocv.Mat, dst []float32) (Geometry, error) {
	if src.Empty() || src.Type() != gocv.MatTypeCV8UC3 {
		return Geometry{}, errBadFrame
	}
	if len(dst) < p.size() {
		return Geometry{}, fmt.Errorf("input buffer holds %d values, want %d", len(dst), p.size())
	}
	g := NewGeometry(src.Cols(), src.Rows(), p.inW, p.inH, p.place)
	img := src
	if g.ContentW != src.Cols() || g.ContentH != src.Rows() || !src.IsContinuous() {
		resized := gocv.NewMat()
		defer resized.Close()
		gocv.Resize(src, &resized, image.Pt(g.ContentW, g.ContentH), 0, 0, gocv.InterpolationLinear)
		img = resized
	}
	px, err := img.DataPtrUint8()
	if err != nil {
		return Geometry{}, fmt.Errorf("read resized frame: %w", err)
	}
	p.convert(px, g, dst)
	return g, nil
}

// convert writes the resized BGR bytes (ContentW x ContentH) and the padding
// into dst.
func (p *preproc) convert(px []byte, g Geometry, dst []float32) {
	plane := p.inW * p.inH
	for c := 0; c < 3; c++ {
		out := dst[c*plane : (c+1)*plane]
		lut := &p.lut[c]
		sc := p.srcCh[c]
		for y := 0; y < p.inH; y++ {
			row := out[y*p.inW : (y+1)*p.inW]
			sy := y - g.PadY
			if sy < 0 || sy >= g.ContentH {
				copy(row, p.padRow[c])
				continue
			}
			copy(row[:g.PadX], p.padRow[c])
			copy(row[g.PadX+g.ContentW:], p.padRow[c])
			srow := px[sy*g.ContentW*3 : (sy+1)*g.ContentW*3]
			content := row[g.PadX : g.PadX+g.ContentW]
			for x := range content {
				content[x] = lut[srow[3*x+sc]]
			}
		}
	}
}
