package eval

// idCounts are the summable identity results of one sequence.
type idCounts struct {
	idtp, idfn, idfp int
}

// identity computes IDTP/IDFN/IDFP: the one-to-one matching of gt ids to
// tracker ids that maximises the number of frames in which the two are
// eligible, over the whole sequence and independent of the CLEAR matches.
func identity(seq *sequence, thr float64, m *matcher) idCounts {
	if seq.trDets == 0 || seq.gtDets == 0 {
		return idCounts{idfn: seq.gtDets, idfp: seq.trDets}
	}
	var edges []edge
	for k, n := range cooccurrence(seq, thr) {
		if n > 0 {
			edges = append(edges, edge{r: seq.pairGT[k], c: seq.pairTr[k], w: float64(n)})
		}
	}
	rowTo := make([]int32, seq.numGT)
	m.match(seq.numGT, seq.numTr, edges, rowTo)
	idtp := 0
	for _, e := range edges {
		if rowTo[e.r] == e.c {
			idtp += int(e.w)
		}
	}
	return idCounts{idtp: idtp, idfn: seq.gtDets - idtp, idfp: seq.trDets - idtp}
}

// cooccurrence counts, per pair key, the frames in which the pair is
// eligible: similarity at least thr (the official evaluator applies no
// epsilon here, unlike in its CLEAR matching).
func cooccurrence(seq *sequence, thr float64) []int32 {
	n := make([]int32, len(seq.pairGT))
	for fi := range seq.frames {
		for _, p := range seq.frames[fi].pairs {
			if p.sim >= thr {
				n[p.key]++
			}
		}
	}
	return n
}
