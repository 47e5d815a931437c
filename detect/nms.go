package detect

import (
	"cmp"
	"slices"
)

// NMS removes duplicate detections of one object (non-maximum suppression):
// detections are visited by descending score, and each one kept suppresses
// every later one whose IoU with it is greater than iouThreshold. With
// classAware only detections of the same class suppress each other. Equal
// scores keep their input order, NaN scores come last. The input slice is not
// modified; the result is a new slice ordered by descending score.
func NMS(dets []Detection, iouThreshold float64, classAware bool) []Detection {
	return greedy(dets, classAware, func(k, d Box) bool {
		// Disjoint boxes have IoU 0, which suppresses nothing unless the
		// threshold is negative; this test is much cheaper than IoU.
		if disjoint(k, d) && iouThreshold >= 0 {
			return false
		}
		return k.IoU(d) > iouThreshold
	})
}

// greedy visits detections by descending score (stable; NaN last) and keeps
// each one that no kept detection suppresses. The input is not modified.
func greedy(dets []Detection, classAware bool, suppresses func(kept, d Box) bool) []Detection {
	if len(dets) == 0 {
		return nil
	}
	sorted := slices.Clone(dets)
	// cmp.Compare orders NaN before every number, so reversing the operands
	// sorts descending with NaN last.
	slices.SortStableFunc(sorted, func(a, b Detection) int { return cmp.Compare(b.Score, a.Score) })
	kept := sorted[:0]
	for _, d := range sorted {
		suppressed := false
		for _, k := range kept {
			if classAware && k.Class != d.Class {
				continue
			}
			if suppresses(k.Box, d.Box) {
				suppressed = true
				break
			}
		}
		if !suppressed {
			kept = append(kept, d)
		}
	}
	return slices.Clip(kept)
}

// disjoint reports whether two boxes certainly do not overlap.
func disjoint(a, b Box) bool {
	return a.X2 <= b.X1 || b.X2 <= a.X1 || a.Y2 <= b.Y1 || b.Y2 <= a.Y1
}
