package track

import (
	"fmt"
	"math"
	"slices"
)

// Assign pairs the rows of a cost matrix with its columns (at most one
// column per row and one row per column) so that the total saving over
// maxCost is largest, that is it minimises the sum of cost[i][j] − maxCost
// over the matched pairs. Only pairs whose cost is below maxCost are ever
// matched: a pair at or above it would save nothing, so its row and column
// are left unmatched instead. This is the gated assignment trackers use to
// link tracks to detections (with cost 1 − IoU, maxCost 1 − minimum IoU; a
// row or column left unmatched costs maxCost/2 as with the cost_limit of the
// LAPJV solver used by SORT and ByteTrack).
//
// With maxCost = +Inf there is no gate: the result is a matching of the
// largest possible size (min(rows, columns) when every cost is finite) and,
// among those, of the least total cost, the classic rectangular assignment.
// Costs that are NaN or infinite are never matched, whatever maxCost is.
//
// The matrix must be rectangular (all rows as long as the first); Assign
// panics otherwise. It returns the pairs {row, column} ordered by row; nil
// when nothing is matched. To maximise a score instead, use AssignMax.
//
// The solver splits the matrix into independent blocks (pairs linked by
// gated-in entries) and solves each with the Hungarian method (Kuhn 1955,
// Munkres 1957) in its shortest-augmenting-path form, O(n²m) per block.
func Assign(cost [][]float64, maxCost float64) [][2]int {
	n, m := dims(cost)
	if n == 0 || m == 0 || math.IsNaN(maxCost) {
		return nil
	}
	// Internally every solver works on gains g ≤ 0: g < 0 marks a pair that
	// may be matched and what matching it is worth, 0 a gated pair.
	var a assigner
	g := a.gains(n, m)
	if !math.IsInf(maxCost, 1) {
		for i, row := range cost {
			for j, c := range row {
				if c < maxCost && !math.IsInf(c, -1) { // false for NaN
					g[i*m+j] = c - maxCost
				}
			}
		}
		return owned(a.solve(g, n, m))
	}

	// No gate: shift every finite cost so far below 0 that one more matched
	// pair always outweighs any difference in cost among the others.
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, row := range cost {
		for _, c := range row {
			if !math.IsInf(c, 0) && !math.IsNaN(c) {
				lo, hi = min(lo, c), max(hi, c)
			}
		}
	}
	if lo > hi {
		return nil // no finite cost
	}
	shift := hi + 1 + (hi-lo)*float64(min(n, m))
	for i, row := range cost {
		for j, c := range row {
			if !math.IsInf(c, 0) && !math.IsNaN(c) {
				g[i*m+j] = c - shift
			}
		}
	}
	return owned(a.solve(g, n, m))
}

// AssignMax pairs the rows of a score matrix with its columns (at most one
// column per row and one row per column) so that the total score of the
// matched pairs is largest. Only pairs whose score is at least minScore and
// above 0 are ever matched; a row or column left unmatched scores 0. This is
// the matching of the official MOT evaluation code (similarity matrix with
// the entries below the threshold zeroed, maximised, then pairs scoring 0
// dropped). Scores that are NaN or infinite are never matched.
//
// The matrix must be rectangular; AssignMax panics otherwise. It returns the
// pairs {row, column} ordered by row; nil when nothing is matched.
func AssignMax(score [][]float64, minScore float64) [][2]int {
	n, m := dims(score)
	if n == 0 || m == 0 || math.IsNaN(minScore) {
		return nil
	}
	var a assigner
	g := a.gains(n, m)
	for i, row := range score {
		for j, s := range row {
			if s >= minScore && s > 0 && !math.IsInf(s, 1) {
				g[i*m+j] = -s
			}
		}
	}
	return owned(a.solve(g, n, m))
}

// owned returns the pairs of a one-off assigner, nil when there are none.
func owned(pairs [][2]int) [][2]int {
	if len(pairs) == 0 {
		return nil
	}
	return pairs
}

// dims returns the size of a matrix and panics if it is ragged.
func dims(mat [][]float64) (n, m int) {
	n = len(mat)
	if n == 0 {
		return 0, 0
	}
	m = len(mat[0])
	for i, row := range mat {
		if len(row) != m {
			panic(fmt.Sprintf("track: assignment matrix is ragged: row 0 has %d columns, row %d has %d", m, i, len(row)))
		}
	}
	return n, m
}

// assigner solves gated assignment problems given as gains and keeps its
// scratch space between calls, so that a tracker allocates nothing per
// frame once warm. The zero value is ready to use.
type assigner struct {
	g     []float64 // the gains handed out by gains()
	comp  []int     // union-find parents over rows 0..n-1 and columns n..n+m-1
	root  []int     // per node: its component's root
	start []int     // per component: offset into members
	memb  []int     // rows then columns of each component, grouped
	fill  []int
	sub   []float64 // one component's sub-matrix
	pairs [][2]int

	// Hungarian method state.
	u, v, minv []float64
	p, way     []int
	used       []bool
	rowOf      []int
}

// gains returns a zeroed n×m row-major matrix owned by a.
func (a *assigner) gains(n, m int) []float64 {
	a.g = slices.Grow(a.g[:0], n*m)[:n*m]
	clear(a.g)
	return a.g
}

func (a *assigner) find(x int) int {
	for a.comp[x] != x {
		a.comp[x] = a.comp[a.comp[x]]
		x = a.comp[x]
	}
	return x
}

// solve maximises the total −g over matchings that use only pairs with
// g < 0 (g is n×m, row-major, every entry ≤ 0, 0 meaning "no pair"). It
// returns the pairs ordered by row in a slice owned by a.
func (a *assigner) solve(g []float64, n, m int) [][2]int {
	a.pairs = a.pairs[:0]
	// Connected components of the bipartite graph of allowed pairs: pairs in
	// different components never compete, so each is solved alone. In a
	// tracker most components hold one track and one detection.
	nodes := n + m
	a.comp = slices.Grow(a.comp[:0], nodes)[:nodes]
	for i := range a.comp {
		a.comp[i] = i
	}
	edges := 0
	for i := range n {
		for j, w := range g[i*m : i*m+m] {
			if w < 0 {
				edges++
				if ri, rj := a.find(i), a.find(n+j); ri != rj {
					a.comp[max(ri, rj)] = min(ri, rj) // the root is the lowest node
				}
			}
		}
	}
	if edges == 0 {
		return a.pairs
	}
	// Group the nodes of each component, rows first, in index order: count
	// the members under each root, then place them.
	a.start = slices.Grow(a.start[:0], nodes+1)[:nodes+1]
	clear(a.start)
	a.root = slices.Grow(a.root[:0], nodes)[:nodes]
	for x := range nodes {
		a.root[x] = a.find(x)
		a.start[a.root[x]+1]++
	}
	for r := range nodes {
		a.start[r+1] += a.start[r]
	}
	a.fill = append(a.fill[:0], a.start[:nodes]...)
	a.memb = slices.Grow(a.memb[:0], nodes)[:nodes]
	for x := range nodes {
		r := a.root[x]
		a.memb[a.fill[r]] = x
		a.fill[r]++
	}
	for r := range nodes {
		if a.root[r] != r {
			continue
		}
		members := a.memb[a.start[r]:a.start[r+1]]
		k := 0 // members[:k] are rows, members[k:] columns
		for k < len(members) && members[k] < n {
			k++
		}
		rows, cols := members[:k], members[k:]
		if len(rows) == 0 || len(cols) == 0 {
			continue // a node with no allowed pair
		}
		a.solveBlock(g, m, n, rows, cols)
	}
	slices.SortFunc(a.pairs, func(x, y [2]int) int { return x[0] - y[0] })
	return a.pairs
}

// solveBlock solves one component given by its rows and columns (columns
// numbered from n) and appends its matched pairs to a.pairs.
func (a *assigner) solveBlock(g []float64, m, n int, rows, cols []int) {
	nr, nc := len(rows), len(cols)
	if nr == 1 || nc == 1 { // a star: the single best pair (the first on ties)
		bi, bj, best := -1, -1, 0.0
		for _, i := range rows {
			for _, cj := range cols {
				if w := g[i*m+cj-n]; w < best {
					bi, bj, best = i, cj-n, w
				}
			}
		}
		if bi >= 0 {
			a.pairs = append(a.pairs, [2]int{bi, bj})
		}
		return
	}
	// The Hungarian method needs rows ≤ columns: transpose otherwise.
	tr := nr > nc
	r, c := nr, nc
	if tr {
		r, c = nc, nr
	}
	a.sub = slices.Grow(a.sub[:0], r*c)[:r*c]
	for x, i := range rows {
		for y, cj := range cols {
			w := g[i*m+cj-n]
			if tr {
				a.sub[y*c+x] = w
			} else {
				a.sub[x*c+y] = w
			}
		}
	}
	a.hungarian(a.sub, r, c)
	for x := range r {
		y := a.rowOf[x]
		if a.sub[x*c+y] >= 0 {
			continue // completes the assignment, not a pair
		}
		if tr {
			a.pairs = append(a.pairs, [2]int{rows[y], cols[x] - n})
		} else {
			a.pairs = append(a.pairs, [2]int{rows[x], cols[y] - n})
		}
	}
}

// hungarian assigns every row of the r×c matrix w (r ≤ c) to a distinct
// column at the least total cost and leaves the column of row x in
// a.rowOf[x]. Shortest augmenting paths with row and column potentials, one
// row added at a time; indices are 1-based inside, 0 being a virtual column.
func (a *assigner) hungarian(w []float64, r, c int) {
	inf := math.Inf(1)
	a.u = slices.Grow(a.u[:0], r+1)[:r+1]
	a.v = slices.Grow(a.v[:0], c+1)[:c+1]
	a.minv = slices.Grow(a.minv[:0], c+1)[:c+1]
	a.p = slices.Grow(a.p[:0], c+1)[:c+1]
	a.way = slices.Grow(a.way[:0], c+1)[:c+1]
	a.used = slices.Grow(a.used[:0], c+1)[:c+1]
	clear(a.u)
	clear(a.v)
	clear(a.p)
	clear(a.way)
	for i := 1; i <= r; i++ {
		a.p[0] = i
		j0 := 0
		for j := range a.minv {
			a.minv[j] = inf
		}
		clear(a.used)
		for {
			a.used[j0] = true
			i0, delta, j1 := a.p[j0], inf, 0
			row := w[(i0-1)*c : i0*c]
			ui := a.u[i0]
			for j := 1; j <= c; j++ {
				if a.used[j] {
					continue
				}
				if cur := row[j-1] - ui - a.v[j]; cur < a.minv[j] {
					a.minv[j], a.way[j] = cur, j0
				}
				if a.minv[j] < delta {
					delta, j1 = a.minv[j], j
				}
			}
			for j := 0; j <= c; j++ {
				if a.used[j] {
					a.u[a.p[j]] += delta
					a.v[j] -= delta
				} else {
					a.minv[j] -= delta
				}
			}
			j0 = j1
			if a.p[j0] == 0 {
				break
			}
		}
		for j0 != 0 { // flip the augmenting path
			j1 := a.way[j0]
			a.p[j0] = a.p[j1]
			j0 = j1
		}
	}
	a.rowOf = slices.Grow(a.rowOf[:0], r)[:r]
	for j := 1; j <= c; j++ {
		if a.p[j] != 0 {
			a.rowOf[a.p[j]-1] = j - 1
		}
	}
}
