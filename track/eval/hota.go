package eval

import (
	"context"
	"fmt"
	"slices"

	"tallyd/track"
)

// numAlphas is the number of localisation thresholds HOTA averages over.
const numAlphas = 19

// alphas are the HOTA localisation thresholds 0.05, 0.10, …, 0.95, made
// the way the official evaluator makes them (start + i·step).
var alphas = func() (a [numAlphas]float64) {
	for i := range a {
		a[i] = 0.05 + float64(i)*0.05
	}
	return a
}()

// alphaSums are the summable HOTA results of one or more sequences at one
// threshold α. The association sums are TP-weighted (the sum over true
// positives of their pair's score), so that sequences combine by adding.
type alphaSums struct {
	tp, fn, fp         int
	assA, assRe, assPr float64
	iouSum             float64 // Σ IoU of the true positives (LocA numerator)
}

// hota computes the HOTA sums at every α. First every (gt id, tracker id)
// pair gets a global alignment score from soft per-frame overlaps; then in
// each frame one assignment maximising alignment × IoU picks the matches,
// and each α keeps those with IoU ≥ α. It stops with ctx's error.
func hota(ctx context.Context, seq *sequence, m *track.Assigner) ([numAlphas]alphaSums, error) {
	var res [numAlphas]alphaSums
	if seq.trDets == 0 || seq.gtDets == 0 {
		for a := range res {
			res[a].fn, res[a].fp = seq.gtDets, seq.trDets
		}
		return res, nil
	}
	var poll poller
	gtCount := make([]float64, seq.numGT)
	trCount := make([]float64, seq.numTr)
	soft := make([]float64, len(seq.pairGT)) // per pair key
	var rowSum, colSum []float64
	for fi := range seq.frames {
		f := &seq.frames[fi]
		if err := poll.check(ctx, len(f.pairs)+1); err != nil {
			return res, err
		}
		for _, g := range f.gt {
			gtCount[g]++
		}
		for _, t := range f.tr {
			trCount[t]++
		}
		rowSum = slices.Grow(rowSum[:0], len(f.gt))[:len(f.gt)]
		colSum = slices.Grow(colSum[:0], len(f.tr))[:len(f.tr)]
		clear(rowSum)
		clear(colSum)
		for _, p := range f.pairs {
			rowSum[p.g] += p.sim
			colSum[p.t] += p.sim
		}
		for _, p := range f.pairs {
			if d := rowSum[p.g] + colSum[p.t] - p.sim; d > eps {
				soft[p.key] += p.sim / d
			}
		}
	}
	align := make([]float64, len(soft))
	for k, s := range soft {
		align[k] = s / (gtCount[seq.pairGT[k]] + trCount[seq.pairTr[k]] - s)
	}

	matches := make([][numAlphas]int32, len(soft)) // per pair key and α: frames matched
	var (
		edges []track.Pair
		rowTo []int32
	)
	for fi := range seq.frames {
		f := &seq.frames[fi]
		if err := poll.check(ctx, len(f.pairs)+1); err != nil {
			return res, err
		}
		if len(f.gt) == 0 || len(f.tr) == 0 {
			for a := range res {
				res[a].fn += len(f.gt)
				res[a].fp += len(f.tr)
			}
			continue
		}
		edges = edges[:0]
		for _, p := range f.pairs {
			if w := align[p.key] * p.sim; w > 0 {
				edges = append(edges, track.Pair{Row: p.g, Col: p.t, Weight: w})
			}
		}
		rowTo = slices.Grow(rowTo[:0], len(f.gt))[:len(f.gt)]
		if err := m.AssignContext(ctx, len(f.gt), len(f.tr), edges, rowTo); err != nil {
			return res, fmt.Errorf("HOTA matching: %w", err)
		}
		var n [numAlphas]int
		for _, p := range f.pairs { // each (gt, tracker) pair once per frame
			if rowTo[p.g] != p.t {
				continue
			}
			for a := 0; a < numAlphas && p.sim >= alphas[a]-eps; a++ {
				n[a]++
				res[a].iouSum += p.sim
				matches[p.key][a]++
			}
		}
		for a := range res {
			res[a].tp += n[a]
			res[a].fn += len(f.gt) - n[a]
			res[a].fp += len(f.tr) - n[a]
		}
	}
	for k := range matches {
		cg, ct := gtCount[seq.pairGT[k]], trCount[seq.pairTr[k]]
		for a, mc := range matches[k] {
			if mc == 0 {
				continue
			}
			c := float64(mc)
			res[a].assA += c * c / max(1, cg+ct-c)
			res[a].assRe += c * c / max(1, cg)
			res[a].assPr += c * c / max(1, ct)
		}
	}
	return res, nil
}
