package track

import (
	"fmt"
	"math"
	"math/rand/v2"
	"reflect"
	"testing"
)

var inf = math.Inf(1)

// feasibility and value of a pair for each objective under test.
type objective struct {
	name string
	ok   func(c float64) bool    // may the pair be matched
	gain func(c float64) float64 // what matching it is worth (larger is better)
	// lexicographic: more pairs first, then gain (Assign without a gate)
	mostPairs bool
}

func assignObjective(maxCost float64) objective {
	if math.IsInf(maxCost, 1) {
		return objective{
			name:      "Assign(+Inf)",
			ok:        func(c float64) bool { return !math.IsInf(c, 0) && !math.IsNaN(c) },
			gain:      func(c float64) float64 { return -c },
			mostPairs: true,
		}
	}
	return objective{
		name: fmt.Sprintf("Assign(%v)", maxCost),
		ok:   func(c float64) bool { return c < maxCost && !math.IsInf(c, -1) },
		gain: func(c float64) float64 { return maxCost - c },
	}
}

func assignMaxObjective(minScore float64) objective {
	return objective{
		name: fmt.Sprintf("AssignMax(%v)", minScore),
		ok:   func(s float64) bool { return s >= minScore && s > 0 && !math.IsInf(s, 1) },
		gain: func(s float64) float64 { return s },
	}
}

// bruteForce tries every matching of the allowed pairs and returns the best
// number of pairs and total gain.
func bruteForce(mat [][]float64, obj objective) (bestPairs int, bestGain float64) {
	n := len(mat)
	m := 0
	if n > 0 {
		m = len(mat[0])
	}
	bestGain = math.Inf(-1)
	usedCol := make([]bool, m)
	better := func(p int, g float64) bool {
		if obj.mostPairs && p != bestPairs {
			return p > bestPairs
		}
		return g > bestGain
	}
	var rec func(i, pairs int, gain float64)
	rec = func(i, pairs int, gain float64) {
		if i == n {
			if better(pairs, gain) {
				bestPairs, bestGain = pairs, gain
			}
			return
		}
		rec(i+1, pairs, gain) // row i unmatched
		for j := range m {
			if !usedCol[j] && obj.ok(mat[i][j]) {
				usedCol[j] = true
				rec(i+1, pairs+1, gain+obj.gain(mat[i][j]))
				usedCol[j] = false
			}
		}
	}
	rec(0, 0, 0)
	return bestPairs, bestGain
}

// checkPairs verifies that pairs is a valid matching of allowed pairs,
// ordered by row, and returns its size and gain.
func checkPairs(t *testing.T, mat [][]float64, obj objective, pairs [][2]int) (int, float64) {
	t.Helper()
	rows, cols := map[int]bool{}, map[int]bool{}
	gain := 0.0
	for k, p := range pairs {
		i, j := p[0], p[1]
		if i < 0 || i >= len(mat) || j < 0 || j >= len(mat[i]) {
			t.Fatalf("pair %v out of range", p)
		}
		if rows[i] || cols[j] {
			t.Fatalf("row or column used twice in %v", pairs)
		}
		if k > 0 && pairs[k-1][0] >= i {
			t.Fatalf("pairs not ordered by row: %v", pairs)
		}
		rows[i], cols[j] = true, true
		if !obj.ok(mat[i][j]) {
			t.Fatalf("pair %v with value %v is gated out", p, mat[i][j])
		}
		gain += obj.gain(mat[i][j])
	}
	return len(pairs), gain
}

// randomMatrix makes an n×m matrix of one of a few kinds, so that ties,
// gated entries and unusable entries all occur.
func randomMatrix(rng *rand.Rand, n, m int) [][]float64 {
	kind := rng.IntN(4)
	mat := make([][]float64, n)
	for i := range mat {
		mat[i] = make([]float64, m)
		for j := range mat[i] {
			switch kind {
			case 0: // continuous
				mat[i][j] = rng.Float64()
			case 1: // small integers: many ties
				mat[i][j] = float64(rng.IntN(4))
			case 2: // wide range, negative values too
				mat[i][j] = (rng.Float64() - 0.3) * 100
			case 3: // sparse: most entries unusable
				mat[i][j] = rng.Float64()
				if rng.IntN(3) > 0 {
					mat[i][j] = [...]float64{inf, math.NaN(), math.Inf(-1)}[rng.IntN(3)]
				}
			}
		}
	}
	return mat
}

// TestAssignBruteForce compares Assign and AssignMax with an exhaustive
// search on random matrices of up to 8x8, square and rectangular, with and
// without a gate.
func TestAssignBruteForce(t *testing.T) {
	rng := rand.New(rand.NewPCG(2016, 1987))
	gates := []float64{0.25, 0.5, 0.8, 2, 50, inf}
	cases := 400
	if testing.Short() {
		cases = 60
	}
	for k := range cases {
		n, m := 1+rng.IntN(8), 1+rng.IntN(8)
		if k < 10 { // always cover the largest size
			n, m = 8, 8
		}
		mat := randomMatrix(rng, n, m)
		gate := gates[rng.IntN(len(gates))]
		for _, tc := range []struct {
			obj   objective
			pairs [][2]int
		}{
			{assignObjective(gate), Assign(mat, gate)},
			{assignMaxObjective(gate - 1), AssignMax(mat, gate-1)},
		} {
			wantN, wantG := bruteForce(mat, tc.obj)
			gotN, gotG := checkPairs(t, mat, tc.obj, tc.pairs)
			tol := 1e-9 * (1 + math.Abs(wantG))
			if (tc.obj.mostPairs && gotN != wantN) || math.Abs(gotG-wantG) > tol {
				t.Fatalf("case %d, %dx%d %s: got %d pairs worth %v, brute force %d worth %v\nmatrix %v\npairs %v",
					k, n, m, tc.obj.name, gotN, gotG, wantN, wantG, mat, tc.pairs)
			}
		}
	}
}

func TestAssignCases(t *testing.T) {
	nan := math.NaN()
	tests := []struct {
		name    string
		cost    [][]float64
		maxCost float64
		want    [][2]int
	}{
		{"empty", nil, 1, nil},
		{"no columns", [][]float64{{}, {}}, 1, nil},
		{"identity", [][]float64{{0, 1}, {1, 0}}, inf, [][2]int{{0, 0}, {1, 1}}},
		{"anti-diagonal", [][]float64{{5, 1}, {1, 5}}, inf, [][2]int{{0, 1}, {1, 0}}},
		// Greedy would take the 0.1 and leave the rest unmatched; the optimum
		// matches both rows.
		{"optimal, not greedy", [][]float64{{0.1, 0.2}, {0.3, 0.9}}, 0.5, [][2]int{{0, 1}, {1, 0}}},
		{"gate leaves a row unmatched", [][]float64{{0.1, 0.2}, {0.6, 0.9}}, 0.5, [][2]int{{0, 0}}},
		{"at the gate is not matched", [][]float64{{0.5}}, 0.5, nil},
		{"wide", [][]float64{{3, 2, 1, 4}}, inf, [][2]int{{0, 2}}},
		{"tall", [][]float64{{3}, {2}, {1}, {4}}, inf, [][2]int{{2, 0}}},
		// Without a gate the most pairs win over a cheaper single pair; with
		// one, what each pair saves below the gate decides: 12 for the single
		// pair against 2 + 2.
		{"no gate: most pairs", [][]float64{{0, 10}, {10, inf}}, inf, [][2]int{{0, 1}, {1, 0}}},
		{"gate: most saving", [][]float64{{0, 10}, {10, inf}}, 12, [][2]int{{0, 0}}},
		{"gate: two pairs save more", [][]float64{{0, 10}, {10, inf}}, 30, [][2]int{{0, 1}, {1, 0}}},
		{"NaN and Inf never matched", [][]float64{{nan, inf}, {math.Inf(-1), 0}}, inf, [][2]int{{1, 1}}},
		{"NaN gate matches nothing", [][]float64{{0}}, nan, nil},
		{"independent blocks", [][]float64{
			{0.1, 0.2, inf, inf},
			{0.2, 0.1, inf, inf},
			{inf, inf, 0.3, inf},
			{inf, inf, inf, inf},
		}, 1, [][2]int{{0, 0}, {1, 1}, {2, 2}}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := Assign(tt.cost, tt.maxCost); !reflect.DeepEqual(got, tt.want) {
				t.Errorf("Assign = %v, want %v", got, tt.want)
			}
		})
	}
}

func TestAssignMaxCases(t *testing.T) {
	tests := []struct {
		name     string
		score    [][]float64
		minScore float64
		want     [][2]int
	}{
		{"sum, not greedy", [][]float64{{0.9, 0.8}, {0.7, 0.1}}, 0.5, [][2]int{{0, 1}, {1, 0}}},
		{"below minScore never matched", [][]float64{{0.9, 0.8}, {0.4, 0.1}}, 0.5, [][2]int{{0, 0}}},
		{"at minScore matched", [][]float64{{0.5}}, 0.5, [][2]int{{0, 0}}},
		{"zero and negative never matched", [][]float64{{0, -1}}, math.Inf(-1), nil},
		// The evaluation code's bonus for keeping a match: 1000 + IoU.
		{"bonus wins", [][]float64{{1000.5, 0.9}, {0.9, 0}}, 0.5, [][2]int{{0, 0}}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := AssignMax(tt.score, tt.minScore); !reflect.DeepEqual(got, tt.want) {
				t.Errorf("AssignMax = %v, want %v", got, tt.want)
			}
		})
	}
}

func TestAssignRaggedPanics(t *testing.T) {
	defer func() {
		want := "track: assignment matrix is ragged: row 0 has 2 columns, row 1 has 1"
		if r := recover(); r != want {
			t.Errorf("panic %v, want %q", r, want)
		}
	}()
	Assign([][]float64{{1, 2}, {3}}, 5)
}

// TestAssignDoesNotKeepResult checks that a result is the caller's: the
// solver's scratch space must not leak into it.
func TestAssignDoesNotKeepResult(t *testing.T) {
	a := Assign([][]float64{{0, 1}, {1, 0}}, inf)
	b := Assign([][]float64{{1, 0}, {0, 1}}, inf)
	if !reflect.DeepEqual(a, [][2]int{{0, 0}, {1, 1}}) || !reflect.DeepEqual(b, [][2]int{{0, 1}, {1, 0}}) {
		t.Errorf("results %v and %v", a, b)
	}
}

// BenchmarkAssign solves dense random square problems without a gate (one
// block: the worst case), and sparse gated ones like a tracker's.
func BenchmarkAssign(b *testing.B) {
	for _, n := range []int{20, 200} {
		rng := rand.New(rand.NewPCG(1, uint64(n)))
		dense := make([][]float64, n)
		sparse := make([][]float64, n)
		for i := range dense {
			dense[i] = make([]float64, n)
			sparse[i] = make([]float64, n)
			for j := range dense[i] {
				dense[i][j] = rng.Float64()
				sparse[i][j] = 1
				if d := i - j; d >= -1 && d <= 1 { // each row overlaps its neighbours
					sparse[i][j] = rng.Float64() * 0.7
				}
			}
		}
		b.Run(fmt.Sprintf("dense/%dx%d", n, n), func(b *testing.B) {
			for b.Loop() {
				Assign(dense, inf)
			}
		})
		b.Run(fmt.Sprintf("gated/%dx%d", n, n), func(b *testing.B) {
			for b.Loop() {
				Assign(sparse, 0.8)
			}
		})
	}
}
