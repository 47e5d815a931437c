package eval

import (
	"context"
	"math"

	"tallyd/track"
)

// Metrics is the score of one sequence, or of several combined. Ratios are
// fractions (0.7228, not 72.28 %); every value is finite. What `tallyd score
// --json` prints is its Summary.
type Metrics struct {
	Rules     Rules   // rules applied; "" when combined sequences used different ones
	IoU       float64 // CLEAR/identity threshold; 0 when combined sequences used different ones
	Sequences int
	Frames    int

	// CLEAR MOT.
	MOTA      float64 // 1 − (FN + FP + IDSW) / GT
	MOTP      float64 // mean IoU of the matched pairs (higher is better)
	MODA      float64 // 1 − (FN + FP) / GT
	SMOTA     float64 // (Σ IoU of matches − FP − IDSW) / GT
	Recall    float64 // TP / GT
	Precision float64 // TP / (TP + FP)
	CLRF1     float64 // TP / (TP + (FN + FP) / 2)

	GT         int // ground-truth boxes scored
	Pred       int // tracker boxes scored (after suppression)
	GTIDs      int // distinct ground-truth ids scored
	PredIDs    int // distinct tracker ids scored
	Suppressed int // tracker boxes dropped on distractors (mot17 rules)
	TP         int // matched pairs, switches included
	FP         int
	FN         int
	IDSW       int
	Frag       int
	MT         int // matched in more than 80 % of their frames
	PT         int // the rest
	ML         int // matched in less than 20 % of their frames

	// Identity (global one-to-one matching of ids).
	IDF1 float64
	IDP  float64
	IDR  float64
	IDTP int
	IDFP int
	IDFN int

	// HOTA family: the mean over the 19 thresholds in Alphas.
	HOTA   float64
	DetA   float64
	AssA   float64
	DetRe  float64
	DetPr  float64
	AssRe  float64
	AssPr  float64
	LocA   float64
	OWTA   float64 // √(DetRe·AssA)
	Alphas []AlphaScore
}

// AlphaScore is the HOTA family at one localisation threshold α: a match
// needs IoU ≥ α.
type AlphaScore struct {
	Alpha float64
	HOTA  float64
	DetA  float64
	AssA  float64
	DetRe float64
	DetPr float64
	AssRe float64
	AssPr float64
	LocA  float64 // mean IoU of the matches; 1 when there are none
	TP    int
	FN    int
	FP    int
}

// Accumulator combines the scores of several sequences the way the
// benchmark's overall row is made: counts are added and ratios recomputed
// from the sums (so MOTA is not a mean of per-sequence MOTAs); per α, HOTA's
// TP, FN and FP are added, AssA, AssRe, AssPr and LocA are averaged weighted
// by TP, and DetA and HOTA are recomputed. The zero value is empty.
type Accumulator struct {
	seqs, frames                       int
	gt, pred, gtIDs, predIDs, suppr    int
	tp, fp, fn, idsw, frag, mt, pt, ml int
	iouSum                             float64
	id                                 idCounts
	alpha                              [numAlphas]alphaSums
	rules                              Rules
	iou                                float64
}

// Add adds one sequence's score (or an earlier combination).
func (a *Accumulator) Add(m Metrics) {
	if a.seqs == 0 {
		a.rules, a.iou = m.Rules, m.IoU
	} else {
		if a.rules != m.Rules {
			a.rules = ""
		}
		if a.iou != m.IoU {
			a.iou = 0
		}
	}
	a.seqs += max(m.Sequences, 1)
	a.frames += m.Frames
	a.gt += m.GT
	a.pred += m.Pred
	a.gtIDs += m.GTIDs
	a.predIDs += m.PredIDs
	a.suppr += m.Suppressed
	a.tp += m.TP
	a.fp += m.FP
	a.fn += m.FN
	a.idsw += m.IDSW
	a.frag += m.Frag
	a.mt += m.MT
	a.pt += m.PT
	a.ml += m.ML
	a.iouSum += m.MOTP * float64(m.TP)
	a.id.idtp += m.IDTP
	a.id.idfp += m.IDFP
	a.id.idfn += m.IDFN
	for i, s := range m.Alphas {
		if i >= numAlphas {
			break
		}
		w := float64(s.TP)
		x := &a.alpha[i]
		x.tp += s.TP
		x.fn += s.FN
		x.fp += s.FP
		x.assA += s.AssA * w
		x.assRe += s.AssRe * w
		x.assPr += s.AssPr * w
		x.iouSum += s.LocA * w
	}
}

// Metrics returns the combined score.
func (a *Accumulator) Metrics() Metrics {
	m := Metrics{
		Rules: a.rules, IoU: a.iou, Sequences: a.seqs, Frames: a.frames,
		GT: a.gt, Pred: a.pred, GTIDs: a.gtIDs, PredIDs: a.predIDs, Suppressed: a.suppr,
		TP: a.tp, FP: a.fp, FN: a.fn, IDSW: a.idsw, Frag: a.frag, MT: a.mt, PT: a.pt, ML: a.ml,
		IDTP: a.id.idtp, IDFP: a.id.idfp, IDFN: a.id.idfn,
	}
	tp, fp, fn := float64(a.tp), float64(a.fp), float64(a.fn)
	gt := max(1, tp+fn)
	m.MOTA = (tp - fp - float64(a.idsw)) / gt
	m.MODA = (tp - fp) / gt
	m.MOTP = a.iouSum / max(1, tp)
	m.SMOTA = (a.iouSum - fp - float64(a.idsw)) / gt
	m.Recall = tp / gt
	m.Precision = tp / max(1, tp+fp)
	m.CLRF1 = tp / max(1, tp+0.5*fn+0.5*fp)

	idtp, idfp, idfn := float64(a.id.idtp), float64(a.id.idfp), float64(a.id.idfn)
	m.IDR = idtp / max(1, idtp+idfn)
	m.IDP = idtp / max(1, idtp+idfp)
	m.IDF1 = idtp / max(1, idtp+0.5*idfp+0.5*idfn)

	m.Alphas = make([]AlphaScore, numAlphas)
	for i, x := range a.alpha {
		tp, fn, fp := float64(x.tp), float64(x.fn), float64(x.fp)
		s := AlphaScore{Alpha: alphas[i], TP: x.tp, FN: x.fn, FP: x.fp}
		s.DetRe = tp / max(1, tp+fn)
		s.DetPr = tp / max(1, tp+fp)
		s.DetA = tp / max(1, tp+fn+fp)
		s.AssA = x.assA / max(1, tp)
		s.AssRe = x.assRe / max(1, tp)
		s.AssPr = x.assPr / max(1, tp)
		s.LocA = max(1e-10, x.iouSum) / max(1e-10, tp) // 1 without matches
		s.HOTA = math.Sqrt(s.DetA * s.AssA)
		m.Alphas[i] = s

		m.HOTA += s.HOTA
		m.DetA += s.DetA
		m.AssA += s.AssA
		m.DetRe += s.DetRe
		m.DetPr += s.DetPr
		m.AssRe += s.AssRe
		m.AssPr += s.AssPr
		m.LocA += s.LocA
		m.OWTA += math.Sqrt(s.DetRe * s.AssA)
	}
	for _, v := range []*float64{&m.HOTA, &m.DetA, &m.AssA, &m.DetRe, &m.DetPr, &m.AssRe, &m.AssPr, &m.LocA, &m.OWTA} {
		*v /= numAlphas
	}
	return m
}

// Combine merges the scores of several sequences into one, as an
// Accumulator does.
func Combine(seqs ...Metrics) Metrics {
	var a Accumulator
	for _, m := range seqs {
		a.Add(m)
	}
	return a.Metrics()
}

// score computes every metric of a prepared sequence. It stops with ctx's
// error.
func score(ctx context.Context, seq *sequence, thr float64) (Metrics, error) {
	var m track.Assigner
	c, err := clearMOT(ctx, seq, thr, &m)
	if err != nil {
		return Metrics{}, err
	}
	id, err := identity(ctx, seq, thr, &m)
	if err != nil {
		return Metrics{}, err
	}
	alpha, err := hota(ctx, seq, &m)
	if err != nil {
		return Metrics{}, err
	}
	a := Accumulator{
		seqs: 1, gt: seq.gtDets, pred: seq.trDets, gtIDs: seq.numGT, predIDs: seq.numTr,
		tp: c.tp, fp: c.fp, fn: c.fn, idsw: c.idsw, frag: c.frag, mt: c.mt, pt: c.pt, ml: c.ml,
		iouSum: c.iouSum,
		id:     id,
		alpha:  alpha,
		iou:    thr,
	}
	return a.Metrics(), nil
}
