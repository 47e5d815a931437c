package eval

import (
	"context"
	"fmt"
	"slices"

	"tallyd/track"
)

// clearCounts are the summable CLEAR MOT results of one sequence.
type clearCounts struct {
	tp, fn, fp, idsw int
	mt, pt, ml, frag int
	iouSum           float64 // Σ IoU of the matched pairs
}

// continueBonus is added to the weight of a pair that continues the
// previous frame's match, so that the assignment keeps as many such pairs as
// possible before it maximises the sum of IoU. The official evaluator uses
// the same 1000, which outweighs any IoU sum of a frame with fewer than
// 1000 matches.
const continueBonus = 1000

// clearMOT computes the CLEAR MOT counts: a pair is eligible when its
// similarity is at least thr (less machine epsilon), and in each frame one
// maximum-weight assignment picks the matches. It stops with ctx's error.
func clearMOT(ctx context.Context, seq *sequence, thr float64, m *track.Assigner) (clearCounts, error) {
	var c clearCounts
	n := seq.numGT
	count := make([]int32, n)   // frames in which each gt id is present
	matched := make([]int32, n) // … and matched
	starts := make([]int32, n)  // times it went from untracked to tracked
	// lastTr is the tracker id a gt id was last matched to, at any earlier
	// frame (for ID switches); prevTr the one it was matched to in the
	// previous frame that held both gt and tracker boxes (for continuation
	// and fragmentation). -1 = none.
	lastTr := slices.Repeat([]int32{-1}, n)
	prevTr := slices.Repeat([]int32{-1}, n)
	var (
		prevSet []int32 // gt ids with prevTr set
		edges   []track.Pair
		rowTo   []int32
		nowSet  []int32
		poll    poller
	)
	for fi := range seq.frames {
		f := &seq.frames[fi]
		if err := poll.check(ctx, len(f.pairs)+1); err != nil {
			return c, err
		}
		if len(f.gt) == 0 {
			c.fp += len(f.tr)
			continue
		}
		if len(f.tr) == 0 {
			// The official evaluator skips such a frame entirely for the
			// previous-frame memory: prevTr is deliberately left as it is.
			c.fn += len(f.gt)
			for _, g := range f.gt {
				count[g]++
			}
			continue
		}
		edges = edges[:0]
		for _, p := range f.pairs {
			if p.sim < thr-eps {
				continue
			}
			w := p.sim
			if prevTr[f.gt[p.g]] == f.tr[p.t] {
				w += continueBonus
			}
			edges = append(edges, track.Pair{Row: p.g, Col: p.t, Weight: w})
		}
		rowTo = slices.Grow(rowTo[:0], len(f.gt))[:len(f.gt)]
		if err := m.AssignContext(ctx, len(f.gt), len(f.tr), edges, rowTo); err != nil {
			return c, fmt.Errorf("CLEAR matching: %w", err)
		}

		for _, g := range f.gt {
			count[g]++
		}
		nowSet = nowSet[:0]
		// A frame holds each (gt, tracker) pair once, so the pair a row is
		// matched to is the only one of the frame joining the two.
		for _, p := range f.pairs {
			if rowTo[p.g] != p.t {
				continue
			}
			g, t := f.gt[p.g], f.tr[p.t]
			if lastTr[g] >= 0 && lastTr[g] != t {
				c.idsw++
			}
			lastTr[g] = t
			matched[g]++
			if prevTr[g] < 0 {
				starts[g]++
			}
			nowSet = append(nowSet, g, t)
			c.tp++
			c.iouSum += p.sim
		}
		for _, g := range prevSet {
			prevTr[g] = -1
		}
		prevSet = prevSet[:0]
		for k := 0; k < len(nowSet); k += 2 {
			prevTr[nowSet[k]] = nowSet[k+1]
			prevSet = append(prevSet, nowSet[k])
		}
		nMatched := len(nowSet) / 2
		c.fn += len(f.gt) - nMatched
		c.fp += len(f.tr) - nMatched
	}
	for g := range n {
		if count[g] == 0 {
			continue
		}
		ratio := float64(matched[g]) / float64(count[g])
		switch {
		case ratio > 0.8: // 0.8 exactly is partly tracked
			c.mt++
		case ratio >= 0.2:
			c.pt++
		}
		if starts[g] > 1 {
			c.frag += int(starts[g]) - 1
		}
	}
	c.ml = n - c.mt - c.pt
	return c, nil
}
