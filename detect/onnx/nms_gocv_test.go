package onnx

import (
	"image"
	"math/rand/v2"
	"slices"
	"strconv"
	"testing"

	"gocv.io/x/gocv"

	"tallyd/detect"
)

// TestGreedyNMSMatchesOpenCV: detect.NMS (class-agnostic) keeps the same
// boxes in the same order as OpenCV's cv::dnn::NMSBoxes (the reference
// library, through gocv) on random integer boxes with distinct scores.
// OpenCV keeps a box while its overlap with every kept box is <= the
// threshold, as detect.NMS does; integer boxes make both IoUs exact.
func TestGreedyNMSMatchesOpenCV(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for trial := 0; trial < 500; trial++ {
		n := 1 + rng.IntN(60)
		rects := make([]image.Rectangle, n)
		scores := make([]float32, n)
		dets := make([]detect.Detection, n)
		perm := rng.Perm(n)
		for i := range rects {
			x, y := rng.IntN(200), rng.IntN(200)
			w, h := 1+rng.IntN(80), 1+rng.IntN(80)
			rects[i] = image.Rect(x, y, x+w, y+h)
			scores[i] = float32(perm[i]+1) / float32(n+1) // distinct, in (0, 1)
			dets[i] = detect.Detection{Box: detect.BoxXYWH(float64(x), float64(y), float64(w), float64(h)),
				Score: float64(scores[i]), Class: strconv.Itoa(i)}
		}
		thr := float32(0.05 + 0.9*rng.Float64())
		indices := make([]int, n)
		for i := range indices {
			indices[i] = -1
		}
		gocv.NMSBoxes(rects, scores, 0, thr, indices)
		want := slices.DeleteFunc(indices, func(i int) bool { return i < 0 })
		var got []int
		for _, d := range detect.NMS(dets, float64(thr), false) {
			i, _ := strconv.Atoi(d.Class)
			got = append(got, i)
		}
		if !slices.Equal(got, want) {
			t.Fatalf("trial %d (threshold %v): detect.NMS kept %v, OpenCV NMSBoxes %v", trial, thr, got, want)
		}
	}
}
