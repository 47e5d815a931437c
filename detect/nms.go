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
			// Disjoint boxes have IoU 0, which suppresses nothing unless the
			// threshold is negative; this test is much cheaper than IoU.
			if disjoint(k.Box, d.Box) && iouThreshold >= 0 {
				continue
			}
			if k.Box.IoU(d.Box) > iouThreshold {
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
