package eval

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// bruteBest is the largest total weight of a one-to-one matching of an
// n×m matrix, by trying every assignment (rows may stay unmatched).
func bruteBest(n, m int, w []float64) float64 {
	used := make([]bool, m)
	var rec func(i int) float64
	rec = func(i int) float64 {
		if i == n {
			return 0
		}
		best := rec(i + 1) // row i unmatched
		for j := range m {
			if !used[j] {
				used[j] = true
				best = max(best, w[i*m+j]+rec(i+1))
				used[j] = false
			}
		}
		return best
	}
	return rec(0)
}

// checkMatching fails unless rowTo is one-to-one and returns its weight.
func checkMatching(t *testing.T, n, m int, w []float64, rowTo []int) float64 {
	t.Helper()
	seen := make([]bool, m)
	total := 0.0
	for i, j := range rowTo[:n] {
		if j < 0 {
			continue
		}
		if j >= m || seen[j] {
			t.Fatalf("row %d assigned to column %d twice or out of range: %v", i, j, rowTo)
		}
		seen[j] = true
		total += w[i*m+j]
	}
	return total
}

// The dense solver and the sparse matcher both reach the brute-force
// optimum on random rectangular matrices up to 8×8, some entries zero
// (the check for any assignment solver).
func TestAssignmentEqualsBruteForce(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	var (
		h  hungarian
		mt matcher
	)
	for trial := range 1000 {
		n, m := rng.IntN(9), rng.IntN(9)
		w := make([]float64, n*m)
		for k := range w {
			switch rng.IntN(4) {
			case 0: // no pair
			case 1: // small integers make exact ties
				w[k] = float64(1 + rng.IntN(3))
			default:
				w[k] = rng.Float64()
			}
		}
		orig := slices.Clone(w)
		want := bruteBest(n, m, w)

		rowTo := make([]int, n)
		h.maximize(n, m, w, rowTo)
		if got := checkMatching(t, n, m, w, rowTo); math.Abs(got-want) > 1e-9 {
			t.Fatalf("trial %d, %dx%d: hungarian total %v, brute force %v\n%v", trial, n, m, got, want, w)
		}

		var edges []edge
		for i := range n {
			for j := range m {
				if w[i*m+j] > 0 {
					edges = append(edges, edge{r: int32(i), c: int32(j), w: w[i*m+j]})
				}
			}
		}
		sparse := make([]int32, n)
		mt.match(n, m, edges, sparse)
		for i, j := range sparse {
			rowTo[i] = int(j)
			if j >= 0 && w[i*m+int(j)] <= 0 {
				t.Fatalf("trial %d: matcher chose a pair of weight 0", trial)
			}
		}
		if got := checkMatching(t, n, m, w, rowTo); math.Abs(got-want) > 1e-9 {
			t.Fatalf("trial %d, %dx%d: matcher total %v, brute force %v\n%v", trial, n, m, got, want, w)
		}
		if !slices.Equal(w, orig) {
			t.Fatalf("trial %d: the weights were modified", trial)
		}
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
		{"row 0 left out", 3, 3, []float64{x, x, 2, x, x, 1, 8, 7, 4}, [][2]int{{1, 2}, {2, 1}}, 8},
		{"3x3 with forbidden", 3, 3, []float64{5, 9, x, 10, x, 2, 8, 7, 4}, [][2]int{{0, 0}, {1, 2}, {2, 1}}, 14},
		{"2x3", 2, 3, []float64{1, x, x, x, 1, x}, [][2]int{{0, 0}, {1, 1}}, 2},
		{"3x2 all forbidden", 3, 2, []float64{x, x, x, x, x, x}, nil, 0},
		{"0x0", 0, 0, nil, nil, 0},
		{"1x0", 1, 0, nil, nil, 0},
		{"0x1", 0, 1, nil, nil, 0},
	} {
		t.Run(c.name, func(t *testing.T) {
			orig := slices.Clone(c.cost)
			big := 1.0
			for _, v := range c.cost {
				if !math.IsNaN(v) {
					big += v
				}
			}
			var edges []edge
			for k, v := range c.cost {
				if !math.IsNaN(v) {
					edges = append(edges, edge{r: int32(k / c.m), c: int32(k % c.m), w: big - v})
				}
			}
			rowTo := make([]int32, c.n)
			var mt matcher
			mt.match(c.n, c.m, edges, rowTo)
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
			near(t, "total cost", total, c.total, 1e-12, src)
			if !slices.EqualFunc(c.cost, orig, func(a, b float64) bool { return a == b || math.IsNaN(a) && math.IsNaN(b) }) {
				t.Errorf("input matrix modified (source: %s)", src)
			}
		})
	}
}

// E3. py-motmetrics test_metric_engine.py::test_sparse_identity_assignment_uses_independent_components.
func TestExampleE3SparseIdentityAssignment(t *testing.T) {
	edges := []edge{{r: 0, c: 0, w: 3}, {r: 0, c: 1, w: 4}, {r: 1, c: 1, w: 5}, {r: 2, c: 2, w: 2}}
	rowTo := make([]int32, 3)
	var mt matcher
	mt.match(3, 3, edges, rowTo)
	const src = "py-motmetrics test_metric_engine.py::test_sparse_identity_assignment_uses_independent_components (asserted)"
	same(t, "GT→H", [3]int32(rowTo), [3]int32{0, 1, 2}, src)
	total := 0.0
	for _, e := range edges {
		if rowTo[e.r] == e.c {
			total += e.w
		}
	}
	near(t, "IDTP", total, 10, 0, src)
}

func BenchmarkMatcherCrowd(b *testing.B) {
	// A crowded frame: 40 boxes, each overlapping its 3 neighbours.
	rng := rand.New(rand.NewPCG(3, 4))
	var edges []edge
	for i := range 40 {
		for d := -1; d <= 1; d++ {
			if j := i + d; j >= 0 && j < 40 {
				edges = append(edges, edge{r: int32(i), c: int32(j), w: rng.Float64()})
			}
		}
	}
	rowTo := make([]int32, 40)
	var mt matcher
	b.ReportAllocs()
	for b.Loop() {
		mt.match(40, 40, edges, rowTo)
	}
}
