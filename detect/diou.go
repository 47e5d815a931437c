package detect

// DIoU is the Distance-IoU of two boxes (Zheng et al., "Distance-IoU Loss:
// Faster and Better Learning for Bounding Box Regression", AAAI 2020):
// IoU − ρ²/c², where ρ is the distance between the box centres and c the
// diagonal of the smallest box enclosing both. It lies in (−1, 1]. Two
// degenerate boxes at the same point have c = 0 and no distance penalty.
func DIoU(a, b Box) float64 {
	iou := a.IoU(b)
	ax, ay := a.Center()
	bx, by := b.Center()
	rho2 := (ax-bx)*(ax-bx) + (ay-by)*(ay-by)
	cw := max(a.X2, b.X2) - min(a.X1, b.X1)
	ch := max(a.Y2, b.Y2) - min(a.Y1, b.Y1)
	c2 := cw*cw + ch*ch
	if c2 <= 0 {
		return iou
	}
	return iou - rho2/c2
}

// DIoUNMS is non-maximum suppression with DIoU as the criterion (Zheng et
// al., AAAI 2020, the DIoU-NMS section): detections are visited by
// descending score, and each one kept suppresses every later one whose DIoU
// with it is at least threshold (the paper keeps a box while
// IoU − ρ²/c² < ε; the strict/non-strict split is from memory). Nearby
// boxes with distant centres — people side by side — survive more often
// than under IoU. classAware, ordering and NaN handling are as in NMS; the
// input slice is not modified.
func DIoUNMS(dets []Detection, threshold float64, classAware bool) []Detection {
	return greedy(dets, classAware, func(k, d Box) bool { return DIoU(k, d) >= threshold })
}
