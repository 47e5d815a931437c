package eval

import (
	"context"
	"fmt"

	"tallyd/track"
)

// idCounts are the summable identity results of one sequence.
type idCounts struct {
	idtp, idfn, idfp int
}

// identity computes IDTP/IDFN/IDFP: the one-to-one matching of gt ids to
// tracker ids that maximises the number of frames in which the two are
// eligible, over the whole sequence and independent of the CLEAR matches.
// It stops with ctx's error.
func identity(ctx context.Context, seq *sequence, thr float64, m *track.Assigner) (idCounts, error) {
	if seq.trDets == 0 || seq.gtDets == 0 {
		return idCounts{idfn: seq.gtDets, idfp: seq.trDets}, nil
	}
	n, err := cooccurrence(ctx, seq, thr)
	if err != nil {
		return idCounts{}, err
	}
	var edges []track.Pair
	for k, c := range n {
		if c > 0 {
			edges = append(edges, track.Pair{Row: seq.pairGT[k], Col: seq.pairTr[k], Weight: float64(c)})
		}
	}
	rowTo := make([]int32, seq.numGT)
	if err := m.AssignContext(ctx, seq.numGT, seq.numTr, edges, rowTo); err != nil {
		return idCounts{}, fmt.Errorf("identity matching: %w", err)
	}
	idtp := 0
	for _, e := range edges {
		if rowTo[e.Row] == e.Col {
			idtp += int(e.Weight)
		}
	}
	return idCounts{idtp: idtp, idfn: seq.gtDets - idtp, idfp: seq.trDets - idtp}, nil
}

// cooccurrence counts, per pair key, the frames in which the pair is
// eligible: similarity at least thr (the official evaluator applies no
// epsilon here, unlike in its CLEAR matching).
func cooccurrence(ctx context.Context, seq *sequence, thr float64) ([]int32, error) {
	n := make([]int32, len(seq.pairGT))
	var poll poller
	for fi := range seq.frames {
		if err := poll.check(ctx, len(seq.frames[fi].pairs)+1); err != nil {
			return nil, err
		}
		for _, p := range seq.frames[fi].pairs {
			if p.sim >= thr {
				n[p.key]++
			}
		}
	}
	return n, nil
}
