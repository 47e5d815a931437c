package detect

import (
	"fmt"
	"math"
	"math/rand/v2"
	"reflect"
	"testing"
)

func TestNMS(t *testing.T) {
	// a and b: 10x10 boxes shifted by 2 px → IoU = 80/120 = 2/3.
	// a and c: shifted by 5 px → IoU = 50/150 = 1/3.
	a := Detection{Box: BoxXYWH(0, 0, 10, 10), Score: 0.9, Class: "person"}
	b := Detection{Box: BoxXYWH(2, 0, 10, 10), Score: 0.8, Class: "person"}
	c := Detection{Box: BoxXYWH(5, 0, 10, 10), Score: 0.7, Class: "person"}
	bCar := b
	bCar.Class = "car"
	far := Detection{Box: BoxXYWH(100, 100, 10, 10), Score: 0.95, Class: "person"}
	low := func(d Detection, s float64) Detection { d.Score = s; return d }

	tests := []struct {
		name       string
		dets       []Detection
		thr        float64
		classAware bool
		want       []Detection
	}{
		{"empty", nil, 0.5, false, nil},
		{"single", []Detection{a}, 0.5, false, []Detection{a}},
		{"overlap above threshold suppressed", []Detection{b, a}, 0.5, false, []Detection{a}},
		{"overlap below threshold kept", []Detection{c, a}, 0.5, false, []Detection{a, c}},
		{"IoU equal to threshold kept", []Detection{a, c}, 1.0 / 3, false, []Detection{a, c}},
		{"IoU just above threshold suppressed", []Detection{a, c}, 1.0/3 - 1e-9, false, []Detection{a}},
		// b is suppressed by a, so b cannot suppress c (IoU(b,c) = 70/130 > 0.5);
		// c survives because IoU(a,c) = 1/3.
		{"suppressed box suppresses nothing", []Detection{c, b, a}, 0.5, false, []Detection{a, c}},
		{"sorted by score, far box untouched", []Detection{a, far, b}, 0.5, false, []Detection{far, a}},
		{"class-agnostic suppresses other class", []Detection{a, bCar}, 0.5, false, []Detection{a}},
		{"class-aware keeps other class", []Detection{a, bCar}, 0.5, true, []Detection{a, bCar}},
		{"class-aware still suppresses same class", []Detection{a, bCar, b}, 0.5, true, []Detection{a, bCar}},
		// Equal scores: the earlier detection in the input wins.
		{"tie keeps input order", []Detection{low(b, 0.9), a}, 0.5, false, []Detection{low(b, 0.9)}},
		{"NaN score sorts last", []Detection{low(a, math.NaN()), c}, 0.5, false, []Detection{c, low(a, math.NaN())}},
		{"negative threshold suppresses even disjoint boxes", []Detection{a, far}, -1, false, []Detection{far}},
		{"threshold 1 keeps identical boxes", []Detection{a, low(a, 0.5)}, 1, false, []Detection{a, low(a, 0.5)}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			in := append([]Detection(nil), tt.dets...)
			got := NMS(tt.dets, tt.thr, tt.classAware)
			if fmt.Sprint(got) != fmt.Sprint(tt.want) { // Sprint so NaN scores compare equal
				t.Errorf("NMS =\n%v\nwant\n%v", got, tt.want)
			}
			if fmt.Sprint(in) != fmt.Sprint(tt.dets) {
				t.Errorf("NMS modified its input: %v, was %v", tt.dets, in)
			}
		})
	}
}

func TestNMSResultIsIndependent(t *testing.T) {
	dets := []Detection{{Box: BoxXYWH(0, 0, 1, 1), Score: 1}, {Box: BoxXYWH(5, 5, 1, 1), Score: 0.5}}
	got := NMS(dets, 0.5, false)
	got[0].Score = 7
	_ = append(got, Detection{}) // must not write into the input's backing array
	if !reflect.DeepEqual(dets, []Detection{{Box: BoxXYWH(0, 0, 1, 1), Score: 1}, {Box: BoxXYWH(5, 5, 1, 1), Score: 0.5}}) {
		t.Errorf("changing the result changed the input: %v", dets)
	}
}

// benchDets makes n detections: n/3 objects each seen as three jittered
// candidate boxes, the raw output shape NMS usually cleans up.
func benchDets(n int) []Detection {
	rng := rand.New(rand.NewPCG(1, uint64(n)))
	dets := make([]Detection, 0, n)
	for len(dets) < n {
		x, y := rng.Float64()*1800, rng.Float64()*1000
		for k := 0; k < 3 && len(dets) < n; k++ {
			dets = append(dets, Detection{
				Box:   BoxXYWH(x+rng.Float64()*6, y+rng.Float64()*6, 40+rng.Float64()*4, 80+rng.Float64()*4),
				Score: rng.Float64(),
				Class: []string{"person", "car"}[rng.IntN(2)],
			})
		}
	}
	return dets
}

func BenchmarkNMS(b *testing.B) {
	for _, n := range []int{30, 300, 3000} {
		dets := benchDets(n)
		b.Run(fmt.Sprintf("dets=%d", n), func(b *testing.B) {
			for b.Loop() {
				NMS(dets, 0.45, true)
			}
		})
	}
}
