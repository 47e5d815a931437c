package onnx

import (
	"encoding/binary"
	"math"
	"testing"
)

// fuzzDecode runs one layout's decoder and the post-processing on a tensor
// made of the fuzzer's bytes: nothing may panic, and every detection must be
// a finite, non-empty box inside the frame with a finite score and a known
// class.
func fuzzDecode(f *testing.F, layout Layout, shapes [][]int) {
	// Seeds: zeros, ones, and values that overflow exp() and hold NaN.
	f.Add([]byte{}, uint16(768), uint16(576), uint8(0))
	f.Add(make([]byte, 4096), uint16(1), uint16(1), uint8(1))
	seed := make([]byte, 4096)
	for i := 0; i+4 <= len(seed); i += 4 {
		v := []float32{1, 0.9, 100, float32(math.NaN()), float32(math.Inf(1)), -3, 0.5, 3}[i/4%8]
		binary.LittleEndian.PutUint32(seed[i:], math.Float32bits(v))
	}
	f.Add(seed, uint16(1920), uint16(1080), uint8(2))
	f.Fuzz(func(t *testing.T, data []byte, srcW, srcH uint16, opts uint8) {
		const inW, inH, classes = 64, 64, 3
		plan := layoutPlan{Layout: layout, Classes: classes}
		if layout == LayoutBoxesScores {
			plan.Scores = 1
		}
		if isRawLayout(layout) {
			var infos []TensorInfo
			for _, sh := range shapes {
				dims := []int64{1}
				for _, v := range sh {
					dims = append(dims, int64(v))
				}
				infos = append(infos, TensorInfo{Name: "head", ElemType: elemFloat, Dims: dims})
			}
			spec := &HeadSpec{Anchors: [][][2]float64{{{10, 14}, {23, 27}}, {{37, 58}, {81, 82}}}, ScaleXY: []float64{1.1},
				SigmoidApplied: opts&64 != 0, From: "anchors"}
			p, err := rawPlan(infos, inW, inH, layout, 0, spec)
			if err != nil {
				t.Fatal(err)
			}
			plan = p
		}
		thr := []float64{0.25, 0.5, 0}
		if opts&1 != 0 {
			thr[1] = math.Inf(1) // class not allowed
		}
		d := newDecoder(plan, inW, inH, classes, thr)
		// Each output takes its values from data in turn, zero-padded.
		outs := make([]tensor, len(shapes))
		for k, sh := range shapes {
			n := 1
			for _, v := range sh {
				n *= v
			}
			vals := make([]float32, n)
			for i := range vals {
				if len(data) >= 4 {
					vals[i] = math.Float32frombits(binary.LittleEndian.Uint32(data))
					data = data[4:]
				}
			}
			outs[k] = tensor{dims: append([]int{1}, sh...), data: vals}
		}
		cands, err := d.decode(outs, 0, nil)
		if err != nil {
			t.Fatal(err)
		}
		w, h := int(srcW%4000)+1, int(srcH%4000)+1
		pl := PlaceTopLeft
		if opts&2 != 0 {
			pl = PlaceCenter
		}
		nms := []NMSKind{NMSGreedy, NMSDIoU, NMSNone}[int(opts>>2)%3]
		p := &post{names: []string{"person", "car", "dog"}, nms: nms, iou: 0.45, classAware: opts&32 != 0, maxDets: 50, minBox: float64(opts >> 6)}
		dets := p.finish(cands, NewGeometry(w, h, inW, inH, pl), layout == LayoutE2E)
		if len(dets) > 50 {
			t.Fatalf("%d detections, max 50", len(dets))
		}
		for _, dt := range dets {
			b := dt.Box
			if !finite(b.X1, b.Y1, b.X2, b.Y2, dt.Score) {
				t.Fatalf("not finite: %+v", dt)
			}
			if b.X1 < 0 || b.Y1 < 0 || b.X2 > float64(w) || b.Y2 > float64(h) || b.X2 <= b.X1 || b.Y2 <= b.Y1 {
				t.Fatalf("box %+v outside or empty in a %dx%d frame", b, w, h)
			}
			if dt.Class == "car" && opts&1 != 0 {
				t.Fatalf("class not allowed: %+v", dt)
			}
			if dt.Class == "" {
				t.Fatalf("no class: %+v", dt)
			}
		}
	})
}

func FuzzDecodeYOLOXGrid(f *testing.F) { fuzzDecode(f, LayoutYOLOXGrid, [][]int{{84, 8}}) }
func FuzzDecodeRowsObj(f *testing.F)   { fuzzDecode(f, LayoutRowsObj, [][]int{{20, 8}}) }
func FuzzDecodeRowsNoObjCHW(f *testing.F) {
	fuzzDecode(f, LayoutRowsNoObjCHW, [][]int{{7, 20}})
}
func FuzzDecodeBoxesScores(f *testing.F) {
	fuzzDecode(f, LayoutBoxesScores, [][]int{{20, 1, 4}, {20, 3}})
}
func FuzzDecodeE2E(f *testing.F) { fuzzDecode(f, LayoutE2E, [][]int{{20, 6}}) }

// TestDecodeShapeErrors: a tensor that does not match the layout is an
// error, not a panic.
func TestDecodeShapeErrors(t *testing.T) {
	d := newDecoder(layoutPlan{Layout: LayoutRowsObj, Classes: 3}, 64, 64, 3, []float64{0, 0, 0})
	for _, outs := range [][]tensor{
		nil,
		{{dims: []int{1, 10, 7}, data: make([]float32, 70)}},
		{{dims: []int{1, 10, 8}, data: make([]float32, 10)}},
		{{dims: []int{1}, data: nil}},
		{{dims: []int{2, -1, 8}, data: nil}},
	} {
		if _, err := d.decode(outs, 0, nil); err == nil {
			t.Errorf("outputs %v: no error", outs)
		}
	}
}

// Raw anchor heads at 64x64: strides 8 and 16, 2 anchors of 5+3 values.
func FuzzDecodeAnchorHeads(f *testing.F) {
	fuzzDecode(f, LayoutAnchorHeads, [][]int{{16, 8, 8}, {16, 4, 4}})
}
func FuzzDecodeAnchorHeadsLast(f *testing.F) {
	fuzzDecode(f, LayoutAnchorHeadsLast, [][]int{{8, 8, 16}, {4, 4, 16}})
}
