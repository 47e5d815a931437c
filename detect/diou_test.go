package detect

import (
	"math"
	"testing"
)

// TestDIoU checks DIoU against values worked by hand from its definition in
// Zheng et al., "Distance-IoU Loss: Faster and Better Learning for Bounding
// Box Regression", AAAI 2020 (arXiv:1911.08287): DIoU = IoU − ρ²(b, b_gt)/c²,
// ρ the distance between the centres, c the diagonal of the smallest
// enclosing box.
func TestDIoU(t *testing.T) {
	tests := []struct {
		name string
		a, b Box
		want float64
	}{
		// IoU = 80/120 = 2/3; centres (5,5), (7,5): ρ² = 4; enclosing 12x10: c² = 244.
		// 2/3 − 4/244 = 2/3 − 1/61 = 119/183.
		{"shifted 2 px", Box{0, 0, 10, 10}, Box{2, 0, 12, 10}, 119.0 / 183},
		// IoU = 0; centres (5,5), (25,5): ρ² = 400; enclosing 30x10: c² = 1000.
		{"disjoint", Box{0, 0, 10, 10}, Box{20, 0, 30, 10}, -0.4},
		// IoU = 0; centres (2,2), (6,6): ρ² = 32; enclosing 8x8: c² = 128.
		{"corners touch", Box{0, 0, 4, 4}, Box{4, 4, 8, 8}, -0.25},
		// Same centre: no penalty, IoU = 36/100.
		{"concentric", Box{0, 0, 10, 10}, Box{2, 2, 8, 8}, 0.36},
		{"identical", Box{1, 2, 11, 22}, Box{1, 2, 11, 22}, 1},
		// Two points at one place: IoU 0 and c = 0, so no penalty.
		{"same point", Box{5, 5, 5, 5}, Box{5, 5, 5, 5}, 0},
		// Side by side people: IoU = 80/320 = 0.25; centres (5,10), (11,10): ρ² = 36;
		// enclosing 16x20: c² = 656. 0.25 − 36/656 = 0.25 − 9/164 = 32/164.
		{"side by side", Box{0, 0, 10, 20}, Box{6, 0, 16, 20}, 32.0 / 164},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := DIoU(tt.a, tt.b); math.Abs(got-tt.want) > 1e-12 {
				t.Errorf("DIoU = %.15f, want %.15f", got, tt.want)
			}
			if got := DIoU(tt.b, tt.a); math.Abs(got-tt.want) > 1e-12 {
				t.Errorf("DIoU is not symmetric: %.15f, want %.15f", got, tt.want)
			}
		})
	}
}

func TestDIoUNMS(t *testing.T) {
	// Side by side (DIoU 32/164 ≈ 0.195, IoU 0.25, see TestDIoU): at threshold
	// 0.2 greedy IoU NMS drops b, DIoU-NMS keeps it.
	a := Detection{Box: Box{0, 0, 10, 20}, Score: 0.9, Class: "person"}
	b := Detection{Box: Box{6, 0, 16, 20}, Score: 0.8, Class: "person"}
	if got := NMS([]Detection{a, b}, 0.2, true); len(got) != 1 {
		t.Fatalf("greedy NMS kept %v, want only a", got)
	}
	if got := DIoUNMS([]Detection{b, a}, 0.2, true); len(got) != 2 || got[0] != a || got[1] != b {
		t.Fatalf("DIoU-NMS = %v, want [a b]", got)
	}
	// Shifted by 2 px (DIoU 119/183 ≈ 0.650): suppressed at 0.5 and at exactly 119/183.
	c := Detection{Box: Box{2, 0, 12, 10}, Score: 0.7, Class: "person"}
	a2 := Detection{Box: Box{0, 0, 10, 10}, Score: 0.9, Class: "person"}
	if got := DIoUNMS([]Detection{c, a2}, 0.5, false); len(got) != 1 || got[0] != a2 {
		t.Fatalf("DIoU-NMS = %v, want [a2]", got)
	}
	if got := DIoUNMS([]Detection{c, a2}, DIoU(a2.Box, c.Box), false); len(got) != 1 {
		t.Fatalf("DIoU equal to the threshold must suppress: %v", got)
	}
	// Class-aware: another class is never suppressed.
	car := c
	car.Class = "car"
	if got := DIoUNMS([]Detection{car, a2}, 0.5, true); len(got) != 2 {
		t.Fatalf("class-aware DIoU-NMS = %v, want both", got)
	}
	if got := DIoUNMS(nil, 0.5, true); got != nil {
		t.Fatalf("DIoUNMS(nil) = %v", got)
	}
}
