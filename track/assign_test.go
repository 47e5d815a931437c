package track

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

var (
	posInf = math.Inf(1)
	none   = math.NaN() // in a matrix: a pair that is not listed
)

// pairsOf lists the entries of an n×m row-major matrix as pairs, row by
// row, leaving out NaN entries (the pairs that are not listed).
func pairsOf(n, m int, w []float64) []Pair {
	var ps []Pair
	for i := range n {
		for j := range m {
			if v := w[i*m+j]; !math.IsNaN(v) {
				ps = append(ps, Pair{Row: int32(i), Col: int32(j), Weight: v})
			}
		}
	}
	return ps
}

// eligible is the rule Assign documents: positive and finite.
func eligible(v float64) bool { return v > 0 && !math.IsInf(v, 1) }

// bruteBest is the largest total weight of a one-to-one matching of the
// eligible entries of an n×m matrix, by trying every matching.
func bruteBest(n, m int, w []float64) float64 {
	used := make([]bool, m)
	var rec func(i int) float64
	rec = func(i int) float64 {
		if i == n {
			return 0
		}
		best := rec(i + 1) // row i unmatched
		for j := range m {
			if v := w[i*m+j]; !used[j] && eligible(v) {
				used[j] = true
				best = max(best, v+rec(i+1))
				used[j] = false
			}
		}
		return best
	}
	return rec(0)
}

// checkMatching fails unless rowTo is one-to-one over eligible entries and
// returns its weight.
func checkMatching(t *testing.T, n, m int, w []float64, rowTo []int32) float64 {
	t.Helper()
	seen := make([]bool, m)
	total := 0.0
	for i, j := range rowTo[:n] {
		if j < 0 {
			continue
		}
		if int(j) >= m || seen[j] {
			t.Fatalf("row %d assigned to column %d twice or out of range: %v", i, j, rowTo)
		}
		if v := w[i*m+int(j)]; !eligible(v) {
			t.Fatalf("row %d matched to column %d of weight %v", i, j, v)
		}
		seen[j] = true
		total += w[i*m+int(j)]
	}
	return total
}

// randomWeights makes an n×m matrix of one of a few kinds, so that exact
// ties, missing pairs and ineligible weights all occur.
func randomWeights(rng *rand.Rand, n, m int) []float64 {
	kind := rng.IntN(4)
	w := make([]float64, n*m)
	for k := range w {
		switch kind {
		case 0: // continuous, some pairs missing
			w[k] = rng.Float64()
			if rng.IntN(4) == 0 {
				w[k] = none
			}
		case 1: // small integers: many ties, 0 is not eligible
			w[k] = float64(rng.IntN(4))
		case 2: // wide range, negative values too
			w[k] = (rng.Float64() - 0.3) * 100
		case 3: // sparse: most entries missing or unusable
			w[k] = rng.Float64()
			if rng.IntN(3) > 0 {
				w[k] = [...]float64{posInf, none, math.Inf(-1), 0, -1}[rng.IntN(5)]
			}
		}
	}
	return w
}

// TestAssignEqualsBruteForce: Assign reaches the optimum of an exhaustive
// search on random matrices up to 8x8, square and rectangular, and the
// dense solver inside it makes min(n, m) pairs of the largest total weight
// (the check the issue asks of any assignment solver).
func TestAssignEqualsBruteForce(t *testing.T) {
	rng := rand.New(rand.NewPCG(2016, 1987))
	trials := 600
	if testing.Short() {
		trials = 60
	}
	var (
		as Assigner
		h  hungarian
	)
	for trial := range trials {
		n, m := rng.IntN(9), rng.IntN(9)
		if trial < 10 { // always cover the largest size
			n, m = 8, 8
		}
		w := randomWeights(rng, n, m)
		pairs := pairsOf(n, m, w)
		orig := slices.Clone(pairs)
		want := bruteBest(n, m, w)

		rowTo := make([]int32, n)
		as.Assign(n, m, pairs, rowTo)
		if got := checkMatching(t, n, m, w, rowTo); math.Abs(got-want) > 1e-9*(1+math.Abs(want)) {
			t.Fatalf("trial %d, %dx%d: Assign total %v, brute force %v\n%v", trial, n, m, got, want, w)
		}
		if !slices.EqualFunc(pairs, orig, func(a, b Pair) bool {
			return a.Row == b.Row && a.Col == b.Col && (a.Weight == b.Weight || math.IsNaN(a.Weight) && math.IsNaN(b.Weight))
		}) {
			t.Fatalf("trial %d: the pairs were modified", trial)
		}

		// The dense solver on the eligible weights (others 0).
		dense := make([]float64, n*m)
		for k, v := range w {
			if eligible(v) {
				dense[k] = v
			}
		}
		assigned := make([]int, n)
		h.maximize(nil, n, m, dense, assigned)
		links, total := 0, 0.0
		used := make([]bool, m)
		for i, j := range assigned {
			if j < 0 {
				continue
			}
			if used[j] {
				t.Fatalf("trial %d: dense solver used column %d twice: %v", trial, j, assigned)
			}
			used[j] = true
			links++
			total += dense[i*m+j]
		}
		if links != min(n, m) || math.Abs(total-want) > 1e-9*(1+math.Abs(want)) {
			t.Fatalf("trial %d, %dx%d: dense solver made %d pairs worth %v, want %d worth %v",
				trial, n, m, links, total, min(n, m), want)
		}
	}
}

func TestAssignCases(t *testing.T) {
	tests := []struct {
		name string
		n, m int
		w    []float64
		want []int32 // per row: column or -1
	}{
		{"empty", 0, 0, nil, []int32{}},
		{"no columns", 2, 0, nil, []int32{-1, -1}},
		{"no pairs", 2, 2, []float64{none, none, none, none}, []int32{-1, -1}},
		// Greedy would take the 0.9 and leave row 1 unmatched; the optimum
		// matches both rows.
		{"sum, not greedy", 2, 2, []float64{0.9, 0.8, 0.7, none}, []int32{1, 0}},
		{"wide", 1, 4, []float64{0.3, 0.2, 0.9, 0.4}, []int32{2}},
		{"tall", 4, 1, []float64{0.3, 0.2, 0.9, 0.4}, []int32{-1, -1, 0, -1}},
		{"zero, negative, NaN and Inf never matched", 2, 2, []float64{0, -1, posInf, 0.5}, []int32{-1, 1}},
		// The evaluator's bonus for keeping last frame's match: 1000 + IoU.
		{"bonus wins", 2, 2, []float64{1000.5, 0.9, 0.9, none}, []int32{0, -1}},
		{"independent blocks", 4, 4, []float64{
			0.9, 0.8, none, none,
			0.8, 0.9, none, none,
			none, none, 0.7, none,
			none, none, none, none,
		}, []int32{0, 1, 2, -1}},
		// Exact ties: the first row and column in the order of the pairs.
		{"tie in a row", 1, 3, []float64{0.5, 0.5, 0.5}, []int32{0}},
		{"tie in a column", 3, 1, []float64{0.5, 0.5, 0.5}, []int32{0, -1, -1}},
	}
	var as Assigner
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			rowTo := make([]int32, tt.n)
			for i := range rowTo {
				rowTo[i] = 7 // must be overwritten
			}
			as.Assign(tt.n, tt.m, pairsOf(tt.n, tt.m, tt.w), rowTo)
			if !slices.Equal(rowTo, tt.want) {
				t.Errorf("rowTo = %v, want %v", rowTo, tt.want)
			}
		})
	}
}

// A pair listed twice counts with its last weight.
func TestAssignDuplicatePair(t *testing.T) {
	var as Assigner
	rowTo := make([]int32, 2)
	as.Assign(2, 2, []Pair{{0, 0, 0.1}, {1, 0, 0.5}, {0, 0, 0.9}}, rowTo)
	if !slices.Equal(rowTo, []int32{0, -1}) {
		t.Errorf("rowTo = %v, want [0 -1]", rowTo)
	}
}

// AssignContext refuses a group of linked rows and columns beyond its limit,
// and stops on a context that is done; Assign has neither limit nor stop.
func TestAssignContextLimits(t *testing.T) {
	w := []float64{0.9, 0.8, none, 0.7, 0.9, 0.1, none, 0.2, 0.9} // one 3x3 group
	pairs := pairsOf(3, 3, w)
	rowTo := make([]int32, 3)
	var as Assigner
	err := as.assign(nil, 8, 3, 3, pairs, rowTo)
	want := "assignment too large: 3 rows and 3 columns linked by eligible pairs, beyond the limit of 8 cells"
	if !errors.Is(err, ErrAssignTooLarge) || err.Error() != want {
		t.Errorf("error = %v, want %s", err, want)
	}
	if err := as.assign(nil, 9, 3, 3, pairs, rowTo); err != nil || !slices.Equal(rowTo, []int32{0, 1, 2}) {
		t.Errorf("within the limit: rowTo %v, error %v", rowTo, err)
	}
	// The matcher is reusable after a refusal.
	as.Assign(3, 3, pairs, rowTo)
	if !slices.Equal(rowTo, []int32{0, 1, 2}) {
		t.Errorf("after a refusal: rowTo %v", rowTo)
	}

	ctx, cancel := context.WithCancel(context.Background())
	if err := as.AssignContext(ctx, 3, 3, pairs, rowTo); err != nil || !slices.Equal(rowTo, []int32{0, 1, 2}) {
		t.Errorf("live context: rowTo %v, error %v", rowTo, err)
	}
	cancel()
	if err := as.AssignContext(ctx, 3, 3, pairs, rowTo); !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled context: error %v, want context.Canceled", err)
	}
	// A single pair needs no solving and is matched whatever the context.
	if err := as.AssignContext(ctx, 1, 1, []Pair{{0, 0, 1}}, rowTo[:1]); err != nil || rowTo[0] != 0 {
		t.Errorf("one pair, cancelled context: rowTo %v, error %v", rowTo[:1], err)
	}
}

// E2. py-motmetrics test_assignment.py::test_assignment and test_hungarian.py:
// minimise total cost, forbidden pairs never chosen, the largest possible
// number of pairs first. As a maximisation: weight = B − cost with B above
// the sum of all costs, so one more pair always outweighs any cost saving.
func TestExampleE2AssignmentWithForbiddenPairs(t *testing.T) {
	const src = "py-motmetrics test_assignment.py::test_assignment / test_hungarian.py (asserted)"
	for _, c := range []struct {
		name  string
		n, m  int
		cost  []float64
		want  [][2]int
		total float64
	}{
		{"3x3 a", 3, 3, []float64{6, 9, 1, 10, 3, 2, 8, 7, 4}, [][2]int{{0, 2}, {1, 1}, {2, 0}}, 12},
		{"3x3 b", 3, 3, []float64{5, 5, 6, 1, 2, 5, 2, 4, 5}, [][2]int{{0, 2}, {1, 1}, {2, 0}}, 10},
		{"row 0 left out", 3, 3, []float64{none, none, 2, none, none, 1, 8, 7, 4}, [][2]int{{1, 2}, {2, 1}}, 8},
		{"3x3 with forbidden", 3, 3, []float64{5, 9, none, 10, none, 2, 8, 7, 4}, [][2]int{{0, 0}, {1, 2}, {2, 1}}, 14},
		{"2x3", 2, 3, []float64{1, none, none, none, 1, none}, [][2]int{{0, 0}, {1, 1}}, 2},
		{"3x2 all forbidden", 3, 2, []float64{none, none, none, none, none, none}, nil, 0},
		{"0x0", 0, 0, nil, nil, 0},
		{"1x0", 1, 0, nil, nil, 0},
		{"0x1", 0, 1, nil, nil, 0},
	} {
		t.Run(c.name, func(t *testing.T) {
			big := 1.0
			for _, v := range c.cost {
				if !math.IsNaN(v) {
					big += v
				}
			}
			var pairs []Pair
			for k, v := range c.cost {
				if !math.IsNaN(v) {
					pairs = append(pairs, Pair{Row: int32(k / c.m), Col: int32(k % c.m), Weight: big - v})
				}
			}
			rowTo := make([]int32, c.n)
			var as Assigner
			as.Assign(c.n, c.m, pairs, rowTo)
			var got [][2]int
			total := 0.0
			for i, j := range rowTo {
				if j >= 0 {
					got = append(got, [2]int{i, int(j)})
					total += c.cost[i*c.m+int(j)]
				}
			}
			if !slices.Equal(got, c.want) {
				t.Errorf("pairs = %v, want %v (source: %s)", got, c.want, src)
			}
			if total != c.total {
				t.Errorf("total cost = %v, want %v (source: %s)", total, c.total, src)
			}
		})
	}
}

// E3. py-motmetrics test_metric_engine.py::test_sparse_identity_assignment_uses_independent_components.
func TestExampleE3SparseIdentityAssignment(t *testing.T) {
	const src = "py-motmetrics test_metric_engine.py::test_sparse_identity_assignment_uses_independent_components (asserted)"
	pairs := []Pair{{Row: 0, Col: 0, Weight: 3}, {Row: 0, Col: 1, Weight: 4}, {Row: 1, Col: 1, Weight: 5}, {Row: 2, Col: 2, Weight: 2}}
	rowTo := make([]int32, 3)
	var as Assigner
	as.Assign(3, 3, pairs, rowTo)
	if !slices.Equal(rowTo, []int32{0, 1, 2}) {
		t.Errorf("GT→H = %v, want [0 1 2] (source: %s)", rowTo, src)
	}
	total := 0.0
	for _, e := range pairs {
		if rowTo[e.Row] == e.Col {
			total += e.Weight
		}
	}
	if total != 10 {
		t.Errorf("IDTP = %v, want 10 (source: %s)", total, src)
	}
}
