package onnx

import (
	"math/rand"
	"testing"
)

// BenchmarkRawHeadDecode decodes YOLOv3-416's three heads (52x52, 26x26,
// 13x13 cells, 3 anchors, 80 classes: 10647 anchor boxes) with random
// logits around -4 (few pass a 0.25 threshold, as on a real frame).
func BenchmarkRawHeadDecode(b *testing.B) {
	for _, last := range []bool{false, true} {
		name := "channels-first"
		if last {
			name = "channels-last"
		}
		b.Run(name, func(b *testing.B) {
			rng := rand.New(rand.NewSource(1))
			var outs []tensor
			var infos []TensorInfo
			for _, g := range []int{52, 26, 13} {
				t := tensor{data: make([]float32, 255*g*g)}
				for i := range t.data {
					t.data[i] = float32(rng.NormFloat64() - 4)
				}
				dims := []int64{1, 255, int64(g), int64(g)}
				if last {
					dims = []int64{1, int64(g), int64(g), 255}
				}
				t.dims = []int{int(dims[0]), int(dims[1]), int(dims[2]), int(dims[3])}
				outs = append(outs, t)
				infos = append(infos, TensorInfo{Name: "h", ElemType: elemFloat, Dims: dims})
			}
			l := LayoutAnchorHeads
			if last {
				l = LayoutAnchorHeadsLast
			}
			// YOLOv3's COCO anchors (yolov3.cfg, from memory), finest head first.
			spec := &HeadSpec{Anchors: [][][2]float64{
				{{10, 13}, {16, 30}, {33, 23}}, {{30, 61}, {62, 45}, {59, 119}}, {{116, 90}, {156, 198}, {373, 326}},
			}, From: "anchors"}
			plan, err := rawPlan(infos, 416, 416, l, 0, spec)
			if err != nil {
				b.Fatal(err)
			}
			thr := make([]float64, 80)
			for i := range thr {
				thr[i] = 0.25
			}
			d := newDecoder(plan, 416, 416, 80, thr)
			var cands []candidate
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				cands, err = d.decode(outs, 0, cands[:0])
				if err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
