package track

import (
	"context"
	"errors"
	"fmt"
	"math"
)

// The assignment solver: one-to-one matchings of rows to columns with the
// largest total weight. ByteTrack solves it to link tracks to detections
// and package eval to match tracker boxes with ground truth; it is the one
// solver both use.
//
// An Assigner takes the pairs that may be linked as a list, each with a
// positive weight; a pair not in the list is never linked. That is the
// gated assignment a tracker needs (cost 1 − IoU under a limit becomes the
// weight limit − cost), and the matching of the official MOTChallenge
// evaluator (TrackEval), which maximises a similarity matrix whose entries
// below the threshold are zeroed and then drops the chosen pairs of weight
// 0. A maximum-weight matching splits exactly over the connected
// components of the graph of pairs, so each component is solved on its own
// with the Hungarian method (Kuhn 1955, Munkres 1957) in its
// shortest-augmenting-path form, O(n²·m) for a component of n ≤ m rows and
// columns: most components are a single pair, the rest a few boxes in a
// crowd.

// MaxAssignCells bounds the work AssignContext takes on: a group of rows
// and columns linked by pairs is solved as a dense matrix of rows × columns
// cells (16 bytes each, time growing with rows² × columns), and one larger
// than this is refused. 8,192 × 8,192 fits.
const MaxAssignCells = 1 << 26

// ErrAssignTooLarge is wrapped by the error AssignContext returns for a
// group of linked rows and columns beyond MaxAssignCells.
var ErrAssignTooLarge = errors.New("assignment too large")

// errStopped reports that done was closed; AssignContext turns it into
// ctx.Err().
var errStopped = errors.New("stopped")

// Pair is a row and a column that an assignment may link, worth Weight.
// Only a positive, finite weight makes a pair eligible.
type Pair struct {
	Row, Col int32
	Weight   float64
}

// eligible reports whether a pair may be linked (false for NaN).
func (p *Pair) eligible() bool { return p.Weight > 0 && p.Weight <= math.MaxFloat64 }

// Assigner solves assignment problems, reusing its buffers from one call to
// the next so that a tracker allocates nothing per frame once warm. The
// zero value is ready; an Assigner is not safe for concurrent use.
type Assigner struct {
	parent   []int32 // union-find over rows (0..nr-1) and columns (nr..nr+nc-1)
	compID   []int32 // per union-find root: component number, or -1
	compEnd  []int32 // per component: end offset of its pairs in sorted
	sorted   []Pair
	rowLocal []int32 // per row: index within the current component, or -1
	colLocal []int32
	rows     []int32 // rows of the current component, by local index
	cols     []int32
	dense    []float64
	assigned []int
	h        hungarian
}

// Assign sets rowTo[r] to the column linked to row r, or -1, choosing among
// pairs the one-to-one assignment of largest total weight. Pairs whose
// weight is not positive and finite are ignored; a pair listed twice counts
// with its last weight. rowTo must have length rows, and every pair must
// lie within rows × cols; pairs is not modified.
//
// Among assignments of equal weight the choice depends only on the input:
// the rows and the columns of a component are taken in the order they
// first appear in pairs.
func (a *Assigner) Assign(rows, cols int, pairs []Pair, rowTo []int32) {
	a.assign(nil, 0, rows, cols, pairs, rowTo) // cannot fail without a limit or a stop
}

// AssignContext is Assign for problems of any size, such as files being
// scored: it returns ctx.Err() soon after ctx is done, and an error
// wrapping ErrAssignTooLarge when a group of linked rows and columns
// exceeds MaxAssignCells. After an error rowTo holds a partial assignment.
func (a *Assigner) AssignContext(ctx context.Context, rows, cols int, pairs []Pair, rowTo []int32) error {
	err := a.assign(ctx.Done(), MaxAssignCells, rows, cols, pairs, rowTo)
	if err == errStopped {
		return ctx.Err()
	}
	return err
}

// assign is Assign stopping when done is closed (never when nil) and
// refusing components of more than limit cells (any size when 0).
func (a *Assigner) assign(done <-chan struct{}, limit, rows, cols int, pairs []Pair, rowTo []int32) error {
	for i := range rowTo {
		rowTo[i] = -1
	}
	n := rows + cols
	a.parent = grow(a.parent, n)
	for i := range a.parent {
		a.parent[i] = int32(i)
	}
	eligible := 0
	for i := range pairs {
		if p := &pairs[i]; p.eligible() {
			eligible++
			a.union(p.Row, int32(rows)+p.Col)
		}
	}
	if eligible == 0 {
		return nil
	}

	// Number the components and sort the pairs by component (counting sort,
	// keeping the input order inside a component).
	a.compID = fill(grow(a.compID, n), -1)
	a.compEnd = a.compEnd[:0]
	for i := range pairs {
		if p := &pairs[i]; p.eligible() {
			root := a.find(p.Row)
			if a.compID[root] < 0 {
				a.compID[root] = int32(len(a.compEnd))
				a.compEnd = append(a.compEnd, 0)
			}
			a.compEnd[a.compID[root]]++
		}
	}
	var off int32
	for k, cnt := range a.compEnd {
		a.compEnd[k] = off // start offset for now
		off += cnt
	}
	a.sorted = grow(a.sorted, eligible)
	for i := range pairs {
		if p := &pairs[i]; p.eligible() {
			k := a.compID[a.find(p.Row)]
			a.sorted[a.compEnd[k]] = *p
			a.compEnd[k]++ // ends as the end offset
		}
	}

	a.rowLocal = fill(grow(a.rowLocal, rows), -1)
	a.colLocal = fill(grow(a.colLocal, cols), -1)
	var start int32
	for _, end := range a.compEnd {
		if err := a.solveComponent(done, limit, a.sorted[start:end], rowTo); err != nil {
			return err
		}
		start = end
	}
	return nil
}

// solveComponent assigns the rows and columns of one connected component.
func (a *Assigner) solveComponent(done <-chan struct{}, limit int, ps []Pair, rowTo []int32) error {
	if len(ps) == 1 {
		rowTo[ps[0].Row] = ps[0].Col
		return nil
	}
	a.rows, a.cols = a.rows[:0], a.cols[:0]
	for _, p := range ps {
		if a.rowLocal[p.Row] < 0 {
			a.rowLocal[p.Row] = int32(len(a.rows))
			a.rows = append(a.rows, p.Row)
		}
		if a.colLocal[p.Col] < 0 {
			a.colLocal[p.Col] = int32(len(a.cols))
			a.cols = append(a.cols, p.Col)
		}
	}
	nr, nc := len(a.rows), len(a.cols)
	defer func() {
		for _, r := range a.rows {
			a.rowLocal[r] = -1
		}
		for _, c := range a.cols {
			a.colLocal[c] = -1
		}
	}()
	if limit > 0 && nr*nc > limit {
		return fmt.Errorf("%w: %d rows and %d columns linked by eligible pairs, beyond the limit of %d cells",
			ErrAssignTooLarge, nr, nc, limit)
	}
	a.dense = fill(grow(a.dense, nr*nc), 0)
	for _, p := range ps {
		a.dense[int(a.rowLocal[p.Row])*nc+int(a.colLocal[p.Col])] = p.Weight
	}
	a.assigned = grow(a.assigned, nr)
	if !a.h.maximize(done, nr, nc, a.dense, a.assigned) {
		return errStopped
	}
	for i, j := range a.assigned {
		// A cell outside the pair list has weight 0 and is no link.
		if j >= 0 && a.dense[i*nc+j] > 0 {
			rowTo[a.rows[i]] = a.cols[j]
		}
	}
	return nil
}

func (a *Assigner) find(x int32) int32 {
	for a.parent[x] != x {
		a.parent[x] = a.parent[a.parent[x]]
		x = a.parent[x]
	}
	return x
}

func (a *Assigner) union(x, y int32) {
	rx, ry := a.find(x), a.find(y)
	if rx != ry {
		a.parent[rx] = ry
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
// callers drop those of weight 0. w is not modified. It reports false,
// leaving rowTo unset, when done was closed before it finished.
func (h *hungarian) maximize(done <-chan struct{}, n, m int, w []float64, rowTo []int) bool {
	for i := range rowTo[:n] {
		rowTo[i] = -1
	}
	if n == 0 || m == 0 {
		return true
	}
	h.cost = grow(h.cost, n*m)
	if n <= m {
		for k, x := range w[:n*m] {
			h.cost[k] = -x
		}
		return h.solve(done, n, m, rowTo)
	}
	// More rows than columns: assign the columns to rows instead.
	for i := range n {
		for j := range m {
			h.cost[j*n+i] = -w[i*m+j]
		}
	}
	h.colTo = grow(h.colTo, m)
	if !h.solve(done, m, n, h.colTo) {
		return false
	}
	for j, i := range h.colTo {
		if i >= 0 {
			rowTo[i] = j
		}
	}
	return true
}

// solve minimises Σ h.cost[i*m+rowTo[i]] over assignments of all n rows to
// distinct columns, n ≤ m. Indices inside are 1-based, column 0 being the
// virtual start of each augmenting path. It reports false when done was
// closed first, which it checks before each row.
func (h *hungarian) solve(done <-chan struct{}, n, m int, rowTo []int) bool {
	cost := h.cost[:n*m]
	u := fill(grow(h.u, n+1), 0)
	v := fill(grow(h.v, m+1), 0)
	p := fill(grow(h.p, m+1), 0)
	way := fill(grow(h.way, m+1), 0)
	minv := grow(h.minv, m+1)
	used := grow(h.used, m+1)
	h.u, h.v, h.p, h.way, h.minv, h.used = u, v, p, way, minv, used
	for i := 1; i <= n; i++ {
		select {
		case <-done:
			return false
		default:
		}
		p[0] = i
		j0 := 0
		fill(minv, math.Inf(1))
		fill(used, false)
		for {
			used[j0] = true
			i0 := p[j0]
			row := cost[(i0-1)*m : i0*m]
			ui := u[i0]
			delta, j1 := math.Inf(1), 0
			for j := 1; j <= m; j++ {
				if used[j] {
					continue
				}
				if cur := row[j-1] - ui - v[j]; cur < minv[j] {
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
	return true
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
