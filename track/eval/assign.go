package eval

import "math"

// edge is a pair that the assignment may choose: row r, column c, weight
// w. p is the caller's own index of the pair; the matcher ignores it.
type edge struct {
	r, c, p int32
	w       float64
}

// matcher finds one-to-one row↔column matchings of maximum total weight,
// reusing its buffers from one call to the next. The zero value is ready;
// a matcher is not safe for concurrent use.
//
// The official evaluator runs a dense Hungarian solver over every row and
// column of a frame and then discards chosen pairs whose weight is zero. A
// maximum-weight matching splits exactly over the connected components of
// the graph of positive-weight pairs, so match solves each component on its
// own: most are a single pair, and the rest are a few boxes in a crowd.
type matcher struct {
	parent   []int32 // union-find over rows (0..nr-1) and columns (nr..nr+nc-1)
	compID   []int32 // per union-find root: component number, or -1
	compEnd  []int32 // per component: end offset of its edges in sorted
	sorted   []edge
	rowLocal []int32 // per row: index within the current component, or -1
	colLocal []int32
	rows     []int32 // rows of the current component, by local index
	cols     []int32
	dense    []float64
	assigned []int
	h        hungarian
}

// match sets rowTo[r] to the column matched to row r, or -1, choosing among
// edges (all with positive weight) the matching of largest total weight.
// rowTo must have length nr; edges is not modified.
func (m *matcher) match(nr, nc int, edges []edge, rowTo []int32) {
	for i := range rowTo {
		rowTo[i] = -1
	}
	switch len(edges) {
	case 0:
		return
	case 1:
		rowTo[edges[0].r] = edges[0].c
		return
	}
	n := nr + nc
	m.parent = grow(m.parent, n)
	for i := range m.parent {
		m.parent[i] = int32(i)
	}
	for _, e := range edges {
		m.union(e.r, int32(nr)+e.c)
	}

	// Number the components and sort the edges by component (counting sort,
	// keeping the input order inside a component).
	m.compID = grow(m.compID, n)
	for i := range m.compID {
		m.compID[i] = -1
	}
	m.compEnd = m.compEnd[:0]
	for _, e := range edges {
		root := m.find(e.r)
		if m.compID[root] < 0 {
			m.compID[root] = int32(len(m.compEnd))
			m.compEnd = append(m.compEnd, 0)
		}
		m.compEnd[m.compID[root]]++
	}
	var off int32
	for k, cnt := range m.compEnd {
		m.compEnd[k] = off // start offset for now
		off += cnt
	}
	m.sorted = grow(m.sorted, len(edges))
	for _, e := range edges {
		k := m.compID[m.find(e.r)]
		m.sorted[m.compEnd[k]] = e
		m.compEnd[k]++ // ends as the end offset
	}

	m.rowLocal = fill(grow(m.rowLocal, nr), -1)
	m.colLocal = fill(grow(m.colLocal, nc), -1)
	var start int32
	for _, end := range m.compEnd {
		m.solveComponent(m.sorted[start:end], rowTo)
		start = end
	}
}

// solveComponent matches the rows and columns of one connected component.
func (m *matcher) solveComponent(es []edge, rowTo []int32) {
	if len(es) == 1 {
		rowTo[es[0].r] = es[0].c
		return
	}
	m.rows, m.cols = m.rows[:0], m.cols[:0]
	for _, e := range es {
		if m.rowLocal[e.r] < 0 {
			m.rowLocal[e.r] = int32(len(m.rows))
			m.rows = append(m.rows, e.r)
		}
		if m.colLocal[e.c] < 0 {
			m.colLocal[e.c] = int32(len(m.cols))
			m.cols = append(m.cols, e.c)
		}
	}
	nr, nc := len(m.rows), len(m.cols)
	m.dense = fill(grow(m.dense, nr*nc), 0)
	for _, e := range es {
		m.dense[int(m.rowLocal[e.r])*nc+int(m.colLocal[e.c])] = e.w
	}
	m.assigned = grow(m.assigned, nr)
	m.h.maximize(nr, nc, m.dense, m.assigned)
	for i, j := range m.assigned {
		// A pair outside the edge list has weight 0 and is no match.
		if j >= 0 && m.dense[i*nc+j] > 0 {
			rowTo[m.rows[i]] = m.cols[j]
		}
	}
	for _, r := range m.rows {
		m.rowLocal[r] = -1
	}
	for _, c := range m.cols {
		m.colLocal[c] = -1
	}
}

func (m *matcher) find(x int32) int32 {
	for m.parent[x] != x {
		m.parent[x] = m.parent[m.parent[x]]
		x = m.parent[x]
	}
	return x
}

func (m *matcher) union(a, b int32) {
	ra, rb := m.find(a), m.find(b)
	if ra != rb {
		m.parent[ra] = rb
	}
}

// hungarian solves dense rectangular assignment problems with the
// shortest-augmenting-path form of the Hungarian method (Kuhn–Munkres with
// potentials, as in Jonker and Volgenant), O(n²·m) for n ≤ m. Its buffers
// are reused between calls.
type hungarian struct {
	cost, u, v, minv []float64
	p, way, colTo    []int
	used             []bool
}

// maximize sets rowTo[i] to the column assigned to row i, or -1, so that
// min(n, m) pairs are chosen with the largest total weight w[i*m+j]. Like
// the dense solvers of numeric libraries it always makes min(n, m) pairs;
// callers drop those of weight 0. w is not modified.
func (h *hungarian) maximize(n, m int, w []float64, rowTo []int) {
	for i := range rowTo[:n] {
		rowTo[i] = -1
	}
	if n == 0 || m == 0 {
		return
	}
	h.cost = grow(h.cost, n*m)
	if n <= m {
		for k, x := range w[:n*m] {
			h.cost[k] = -x
		}
		h.solve(n, m, rowTo)
		return
	}
	// More rows than columns: assign the columns to rows instead.
	for i := range n {
		for j := range m {
			h.cost[j*n+i] = -w[i*m+j]
		}
	}
	h.colTo = grow(h.colTo, m)
	h.solve(m, n, h.colTo)
	for j, i := range h.colTo {
		if i >= 0 {
			rowTo[i] = j
		}
	}
}

// solve minimises Σ h.cost[i*m+rowTo[i]] over assignments of all n rows to
// distinct columns, n ≤ m. Indices inside are 1-based, column 0 being the
// virtual start of each augmenting path.
func (h *hungarian) solve(n, m int, rowTo []int) {
	cost := h.cost[:n*m]
	u := fill(grow(h.u, n+1), 0)
	v := fill(grow(h.v, m+1), 0)
	p := fill(grow(h.p, m+1), 0)
	way := fill(grow(h.way, m+1), 0)
	minv := grow(h.minv, m+1)
	used := grow(h.used, m+1)
	h.u, h.v, h.p, h.way, h.minv, h.used = u, v, p, way, minv, used
	for i := 1; i <= n; i++ {
		p[0] = i
		j0 := 0
		fill(minv, math.Inf(1))
		fill(used, false)
		for {
			used[j0] = true
			i0 := p[j0]
			row := cost[(i0-1)*m : i0*m]
			delta, j1 := math.Inf(1), 0
			for j := 1; j <= m; j++ {
				if used[j] {
					continue
				}
				cur := row[j-1] - u[i0] - v[j]
				if cur < minv[j] {
					minv[j], way[j] = cur, j0
				}
				if minv[j] < delta {
					delta, j1 = minv[j], j
				}
			}
			for j := 0; j <= m; j++ {
				if used[j] {
					u[p[j]] += delta
					v[j] -= delta
				} else {
					minv[j] -= delta
				}
			}
			j0 = j1
			if p[j0] == 0 {
				break
			}
		}
		for j0 != 0 { // flip the augmenting path
			j1 := way[j0]
			p[j0] = p[j1]
			j0 = j1
		}
	}
	for i := range rowTo[:n] {
		rowTo[i] = -1
	}
	for j := 1; j <= m; j++ {
		if p[j] != 0 {
			rowTo[p[j]-1] = j - 1
		}
	}
}

// grow returns s resized to n, reallocating only when its capacity is short.
func grow[T any](s []T, n int) []T {
	if cap(s) < n {
		return make([]T, n)
	}
	return s[:n]
}

// fill sets every element of s to x and returns s.
func fill[T any](s []T, x T) []T {
	for i := range s {
		s[i] = x
	}
	return s
}
