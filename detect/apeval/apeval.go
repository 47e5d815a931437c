// Package apeval measures detection accuracy as the COCO detection
// evaluation defines it (Lin et al., "Microsoft COCO: Common Objects in
// Context", 2014; the evaluation of the COCO API, cocoeval): per class,
// detections are matched to truth boxes image by image, best score first,
// each to the unmatched truth box of highest IoU at or above the threshold;
// precision is made monotone (each point takes the best precision at any
// higher recall) and read at the 101 recall points 0, 0.01, ..., 1; AP is
// their mean. AP50 uses IoU 0.5; AP50:95 averages the ten thresholds 0.50,
// 0.55, ..., 0.95. Classes without truth boxes are left out of the mean.
//
// Not modelled: crowd regions and area ranges (every truth box counts, the
// "all" area range of the COCO evaluation).
package apeval

import (
	"cmp"
	"math"
	"slices"
	"sort"

	"tallyd/detect"
)

// Detection is one detected box of an image.
type Detection struct {
	Image int
	Class string
	Box   detect.Box
	Score float64
}

// Truth is one truth box of an image.
type Truth struct {
	Image int
	Class string
	Box   detect.Box
}

// MaxDetsDefault is the COCO evaluation's limit of detections per image
// and class (the best-scoring are kept).
const MaxDetsDefault = 100

// IoUThresholds are COCO's ten thresholds 0.50:0.05:0.95.
// Computed as numpy's linspace(0.5, 0.95, 10) does (i*step + start), so
// that a box at exactly 0.6 IoU compares as it does in cocoeval.
var IoUThresholds = func() []float64 {
	t := make([]float64, 10)
	step := (0.95 - 0.5) / 9
	for i := range t {
		t[i] = float64(i)*step + 0.5
	}
	return t
}()

// ClassResult is the accuracy of one class.
type ClassResult struct {
	Class      string
	Truths     int
	Detections int
	AP50       float64
	AP75       float64
	AP5095     float64 // mean over IoUThresholds
}

// Result is the accuracy over every class with truth boxes.
type Result struct {
	AP50, AP75, AP5095 float64 // means over the classes; NaN when no class has truth
	Classes            []ClassResult
}

// Evaluate computes AP per class and their means. maxDets bounds the
// detections per image and class (0 = MaxDetsDefault).
func Evaluate(dets []Detection, truth []Truth, maxDets int) Result {
	if maxDets <= 0 {
		maxDets = MaxDetsDefault
	}
	classes := map[string]bool{}
	for _, t := range truth {
		classes[t.Class] = true
	}
	names := make([]string, 0, len(classes))
	for c := range classes {
		names = append(names, c)
	}
	sort.Strings(names)
	res := Result{AP50: math.NaN(), AP75: math.NaN(), AP5095: math.NaN()}
	var s50, s75, s95 float64
	for _, c := range names {
		cr := evalClass(c, dets, truth, maxDets)
		res.Classes = append(res.Classes, cr)
		s50 += cr.AP50
		s75 += cr.AP75
		s95 += cr.AP5095
	}
	if n := float64(len(names)); n > 0 {
		res.AP50, res.AP75, res.AP5095 = s50/n, s75/n, s95/n
	}
	return res
}

// scored is one detection after matching: its score and, per threshold,
// whether it matched.
type scored struct {
	score float64
	tp    []bool
}

func evalClass(class string, dets []Detection, truth []Truth, maxDets int) ClassResult {
	byImgT := map[int][]detect.Box{}
	nT := 0
	for _, t := range truth {
		if t.Class == class {
			byImgT[t.Image] = append(byImgT[t.Image], t.Box)
			nT++
		}
	}
	byImgD := map[int][]Detection{}
	for _, d := range dets {
		if d.Class == class {
			byImgD[d.Image] = append(byImgD[d.Image], d)
		}
	}
	images := make([]int, 0, len(byImgD))
	for im := range byImgD {
		images = append(images, im)
	}
	sort.Ints(images)
	var all []scored
	for _, im := range images {
		ds := byImgD[im]
		// Best score first; equal scores keep their input order (a stable sort, as cocoeval's mergesort).
		slices.SortStableFunc(ds, func(a, b Detection) int { return cmp.Compare(b.Score, a.Score) })
		if len(ds) > maxDets {
			ds = ds[:maxDets]
		}
		ts := byImgT[im]
		matched := make([][]bool, len(IoUThresholds))
		for k := range matched {
			matched[k] = make([]bool, len(ts))
		}
		for _, d := range ds {
			s := scored{score: d.Score, tp: make([]bool, len(IoUThresholds))}
			for k, thr := range IoUThresholds {
				best, m := math.Min(thr, 1-1e-10), -1
				for g, tb := range ts {
					if matched[k][g] {
						continue
					}
					if iou := boxIoU(d.Box, tb); iou >= best {
						best, m = iou, g
					}
				}
				if m >= 0 {
					matched[k][m] = true
					s.tp[k] = true
				}
			}
			all = append(all, s)
		}
	}
	cr := ClassResult{Class: class, Truths: nT, Detections: len(all)}
	// Across images, best score first, stable (cocoeval sorts the
	// concatenation of the per-image lists in image order with mergesort).
	slices.SortStableFunc(all, func(a, b scored) int { return cmp.Compare(b.score, a.score) })
	var sum float64
	for k := range IoUThresholds {
		ap := averagePrecision(all, k, nT)
		sum += ap
		switch k {
		case 0:
			cr.AP50 = ap
		case 5:
			cr.AP75 = ap
		}
	}
	cr.AP5095 = sum / float64(len(IoUThresholds))
	return cr
}

// averagePrecision is COCO's 101-point interpolated AP at threshold k.
func averagePrecision(all []scored, k, nT int) float64 {
	if nT == 0 {
		return math.NaN()
	}
	n := len(all)
	rc := make([]float64, n)
	pr := make([]float64, n)
	tp, fp := 0, 0
	for i, s := range all {
		if s.tp[k] {
			tp++
		} else {
			fp++
		}
		rc[i] = float64(tp) / float64(nT)
		pr[i] = float64(tp) / float64(tp+fp)
	}
	for i := n - 1; i > 0; i-- {
		if pr[i] > pr[i-1] {
			pr[i-1] = pr[i]
		}
	}
	var sum float64
	for r := 0; r <= 100; r++ {
		thr := float64(r) * 0.01 // numpy's linspace(0, 1, 101)
		// The first point whose recall reaches thr (numpy's searchsorted, side left).
		i := sort.SearchFloat64s(rc, thr)
		if i < n {
			sum += pr[i]
		}
	}
	return sum / 101
}

// boxIoU is the intersection over union of two boxes, widths and heights
// as x2-x1 and y2-y1 (the COCO API's box IoU, no +1).
func boxIoU(a, b detect.Box) float64 {
	iw := math.Min(a.X2, b.X2) - math.Max(a.X1, b.X1)
	ih := math.Min(a.Y2, b.Y2) - math.Max(a.Y1, b.Y1)
	if iw <= 0 || ih <= 0 {
		return 0
	}
	inter := iw * ih
	union := a.Area() + b.Area() - inter
	if union <= 0 {
		return 0
	}
	return inter / union
}
