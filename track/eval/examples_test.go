package eval

import (
	"context"
	"fmt"
	"math"
	"testing"

	"tallyd/internal/motfmt"
)

// The worked examples of ../shared/reference/mot/worked_examples.md, one
// test per example, each value checked with its source beside it.

// x marks a pair that may not be matched ("–" in worked_examples.md).
var x = math.NaN()

// simFrame is one frame given as ids and a matrix, rows ground truth and
// columns tracker ids in the listed order.
type simFrame struct {
	gt, tr []int64
	m      [][]float64
}

// scoreSimilarities scores frames whose matrices are similarities (IoU-like,
// in [0, 1]; x = no overlap) with CLEAR/identity threshold thr.
func scoreSimilarities(t *testing.T, frames []simFrame, thr float64) (Metrics, *sequence) {
	t.Helper()
	b := newBuilder(len(frames), 0, 0)
	for _, f := range frames {
		if len(f.m) != len(f.gt) && len(f.tr) > 0 {
			t.Fatalf("matrix has %d rows for %d gt ids", len(f.m), len(f.gt))
		}
		var pairs []pair
		for i, row := range f.m {
			for j, s := range row {
				if s > 0 { // NaN (x) and 0 are no overlap
					pairs = append(pairs, pair{g: int32(i), t: int32(j), sim: s})
				}
			}
		}
		b.addFrame(f.gt, f.tr, pairs)
	}
	seq := b.finish()
	m, err := score(context.Background(), seq, thr)
	if err != nil {
		t.Fatal(err)
	}
	m.Frames = len(frames)
	return m, seq
}

// scoreDistances runs a py-motmetrics case given as distances (x = not
// allowed; every finite distance is allowed). Distances map to similarities
// s = 1 − d/k with k so large that every allowed pair is eligible and that,
// after the continuation bonus, more matches always beat a smaller total
// distance — py-motmetrics' "most pairs first, then least distance". It
// returns the metrics and the py-motmetrics MOTP (mean distance).
func scoreDistances(t *testing.T, frames []simFrame) (Metrics, float64) {
	t.Helper()
	dmax := 0.0
	for _, f := range frames {
		for _, row := range f.m {
			for _, d := range row {
				if !math.IsNaN(d) {
					dmax = max(dmax, d)
				}
			}
		}
	}
	k := 10 * (dmax + 1)
	sims := make([]simFrame, len(frames))
	for i, f := range frames {
		sims[i] = simFrame{gt: f.gt, tr: f.tr}
		for _, row := range f.m {
			r := make([]float64, len(row))
			for j, d := range row {
				r[j] = x
				if !math.IsNaN(d) {
					r[j] = 1 - d/k
				}
			}
			sims[i].m = append(sims[i].m, r)
		}
	}
	m, _ := scoreSimilarities(t, sims, 1e-9)
	return m, k * (1 - m.MOTP)
}

func ids(v ...int64) []int64 { return v }

// A1. test_metrics.py::test_mota_motp (also test_metric_engine.py::test_mota_motp,
// test_mot.py::test_events) and test_metrics.py::test_extract_counts.
func TestExampleA1MOTAMOTP(t *testing.T) {
	frames := []simFrame{
		{gt: ids(), tr: ids(1, 2)},
		{gt: ids(1, 2), tr: ids()},
		{gt: ids(1, 2), tr: ids(1, 2), m: [][]float64{{1, 0.5}, {0.3, 1}}},
		{gt: ids(1, 2), tr: ids(1, 2), m: [][]float64{{0.2, x}, {x, 0.1}}},
		{gt: ids(1, 2), tr: ids(1, 2), m: [][]float64{{5, 1}, {1, 5}}},
		{},
	}
	m, motp := scoreDistances(t, frames)
	const src = "py-motmetrics test_metrics.py::test_mota_motp (asserted)"
	same(t, "matches", m.TP-m.IDSW, 4, src)
	same(t, "FP", m.FP, 2, src)
	same(t, "FN", m.FN, 2, src)
	same(t, "IDSW", m.IDSW, 2, src)
	same(t, "TP", m.TP, 6, src)
	same(t, "GT boxes", m.GT, 8, src)
	same(t, "H boxes", m.Pred, 8, src)
	same(t, "frames", m.Frames, 6, src)
	near(t, "MOTA", m.MOTA, 0.25, 1e-12, src)
	near(t, "MOTP (mean distance)", motp, 1.85, 1e-9, src)

	// Identity inputs: test_metrics.py::test_extract_counts (asserted) —
	// frames in which each (GT, H) pair is allowed.
	_, seq := scoreSimilarities(t, toSims(frames), 1e-9)
	together, err := cooccurrence(context.Background(), seq, 1e-9)
	if err != nil {
		t.Fatal(err)
	}
	got := map[[2]int64]int32{}
	gtID := []int64{1, 2} // dense ids follow first appearance: GT 1, 2 and H 1, 2
	trID := []int64{1, 2}
	for k, n := range together {
		got[[2]int64{gtID[seq.pairGT[k]], trID[seq.pairTr[k]]}] = n
	}
	const counts = "py-motmetrics test_metrics.py::test_extract_counts (asserted)"
	for pair, want := range map[[2]int64]int32{{1, 1}: 3, {1, 2}: 2, {2, 1}: 2, {2, 2}: 3} {
		same(t, fmt.Sprintf("frames allowed for (GT %d, H %d)", pair[0], pair[1]), got[pair], want, counts)
	}
	// Computed from those counts (worked_examples.md A1).
	same(t, "IDTP", m.IDTP, 6, "worked_examples.md A1 (computed)")
	near(t, "IDF1", m.IDF1, 0.75, 1e-12, "worked_examples.md A1 (computed)")
	near(t, "IDP", m.IDP, 0.75, 1e-12, "worked_examples.md A1 (computed)")
	near(t, "IDR", m.IDR, 0.75, 1e-12, "worked_examples.md A1 (computed)")
}

// toSims maps distance frames to 0/1 "allowed" similarities.
func toSims(frames []simFrame) []simFrame {
	out := make([]simFrame, len(frames))
	for i, f := range frames {
		out[i] = simFrame{gt: f.gt, tr: f.tr}
		for _, row := range f.m {
			r := make([]float64, len(row))
			for j, d := range row {
				r[j] = x
				if !math.IsNaN(d) {
					r[j] = 1
				}
			}
			out[i].m = append(out[i].m, r)
		}
	}
	return out
}

// A2. test_metrics.py::test_ids, test_metric_engine.py::test_identity_change_metrics.
func TestExampleA2IdentityChanges(t *testing.T) {
	m, motp := scoreDistances(t, []simFrame{
		{},
		{gt: ids(1, 2), tr: ids(1, 2), m: [][]float64{{1, 0}, {0, 1}}},
		{gt: ids(1, 2), tr: ids(1, 2), m: [][]float64{{0.4, x}, {x, 0.4}}},
		{gt: ids(1, 2), tr: ids(1, 2), m: [][]float64{{0, 1}, {1, 0}}},
		{gt: ids(1, 2), tr: ids(2, 3), m: [][]float64{{1, 0}, {0.4, 0.7}}},
		{gt: ids(1, 3), tr: ids(2, 3), m: [][]float64{{1, 0}, {0.4, 0.7}}},
		{},
	})
	const src = "py-motmetrics test_metrics.py::test_ids (asserted)"
	same(t, "matches", m.TP-m.IDSW, 7, src)
	same(t, "FP", m.FP, 0, src)
	same(t, "FN", m.FN, 0, src)
	same(t, "IDSW", m.IDSW, 3, src)
	same(t, "TP", m.TP, 10, src)
	same(t, "GT boxes", m.GT, 10, src)
	same(t, "H boxes", m.Pred, 10, src)
	same(t, "frames", m.Frames, 7, src)
	near(t, "MOTA", m.MOTA, 0.7, 1e-12, src)
	near(t, "MOTP (mean distance)", motp, 0.16, 1e-9, src)
	same(t, "IDTP", m.IDTP, 8, "worked_examples.md A2 (computed)")
	near(t, "IDF1", m.IDF1, 0.8, 1e-12, "worked_examples.md A2 (computed)")
}

// A3. test_metrics.py::test_correct_average (Bernardin & Stiefelhagen 2008, fig. 3).
func TestExampleA3MOTAIsNotAnAverage(t *testing.T) {
	var frames []simFrame
	for range 4 {
		frames = append(frames, simFrame{gt: ids(1, 2, 3, 4), tr: ids()})
	}
	for range 4 {
		frames = append(frames, simFrame{gt: ids(4), tr: ids(4), m: [][]float64{{0}}})
	}
	m, _ := scoreDistances(t, frames)
	near(t, "MOTA", m.MOTA, 0.2, 1e-12, "py-motmetrics test_metrics.py::test_correct_average (asserted)")
}

// A4. test_metrics.py: test_assignment_metrics_with_empty_groundtruth,
// …_empty_predictions, …_both_empty, test_metrics_with_no_events.
func TestExampleA4EmptyInputs(t *testing.T) {
	four := func(gt, tr []int64) []simFrame {
		f := make([]simFrame, 4)
		for i := range f {
			f[i] = simFrame{gt: gt, tr: tr}
		}
		return f
	}
	t.Run("no GT", func(t *testing.T) {
		m, _ := scoreDistances(t, four(ids(), ids(1, 2, 3, 4)))
		const src = "py-motmetrics test_metrics.py::test_assignment_metrics_with_empty_groundtruth (asserted)"
		same(t, "matches", m.TP, 0, src)
		same(t, "FP", m.FP, 16, src)
		same(t, "FN", m.FN, 0, src)
		same(t, "IDTP", m.IDTP, 0, src)
		same(t, "IDFP", m.IDFP, 16, src)
		same(t, "IDFN", m.IDFN, 0, src)
		same(t, "frames", m.Frames, 4, src)
	})
	t.Run("no hypotheses", func(t *testing.T) {
		m, _ := scoreDistances(t, four(ids(1, 2, 3, 4), ids()))
		const src = "py-motmetrics test_metrics.py::test_assignment_metrics_with_empty_predictions (asserted)"
		same(t, "matches", m.TP, 0, src)
		same(t, "FP", m.FP, 0, src)
		same(t, "FN", m.FN, 16, src)
		same(t, "IDTP", m.IDTP, 0, src)
		same(t, "IDFP", m.IDFP, 0, src)
		same(t, "IDFN", m.IDFN, 16, src)
		same(t, "frames", m.Frames, 4, src)
		same(t, "ML", m.ML, 4, "TrackEval clear.py: every gt id is mostly lost")
	})
	t.Run("both empty", func(t *testing.T) {
		m, _ := scoreDistances(t, four(ids(), ids()))
		const src = "py-motmetrics test_metrics.py::test_assignment_metrics_with_both_empty (asserted)"
		same(t, "counts", [...]int{m.TP, m.FP, m.FN, m.IDSW, m.IDTP, m.IDFP, m.IDFN, m.GT, m.Pred}, [9]int{}, src)
		same(t, "frames", m.Frames, 4, src)
	})
	// Nothing added at all. py-motmetrics reports MOTA and MOTP as NaN
	// (asserted in test_metrics_with_no_events); the official evaluator
	// divides by max(1, ·) and reports 0, which also keeps JSON valid. This
	// package follows the official evaluator; the counts agree.
	t.Run("nothing added, TrackEval convention", func(t *testing.T) {
		m, _ := scoreDistances(t, nil)
		const src = "py-motmetrics test_metrics.py::test_metrics_with_no_events (asserted counts)"
		same(t, "H boxes", m.Pred, 0, src)
		same(t, "GT boxes", m.GT, 0, src)
		same(t, "TP", m.TP, 0, src)
		same(t, "frames", m.Frames, 0, src)
		same(t, "MOTA (py-motmetrics: NaN)", m.MOTA, 0.0, "TrackEval clear.py _compute_final_fields: / max(1, TP+FN)")
		same(t, "MOTP (py-motmetrics: NaN)", m.MOTP, 0.0, "TrackEval clear.py: MOTP_sum / max(1, TP)")
		same(t, "HOTA", m.HOTA, 0.0, "TrackEval hota.py: DetA = TP / max(1, ·)")
		same(t, "LocA", m.LocA, 1.0, "TrackEval hota.py: LocA = 1 without matches")
	})
}

// A5. test_metric_engine.py::test_accumulator_keeps_all_metrics_in_compact_state.
func TestExampleA5SwitchInTwoFrames(t *testing.T) {
	m, motp := scoreDistances(t, []simFrame{
		{gt: ids(1, 2), tr: ids(10, 20), m: [][]float64{{0.1, x}, {x, 0.2}}},
		{gt: ids(1, 2), tr: ids(10, 30), m: [][]float64{{0.1, x}, {x, 0.2}}},
	})
	const src = "py-motmetrics test_metric_engine.py::test_accumulator_keeps_all_metrics_in_compact_state (asserted)"
	same(t, "frames", m.Frames, 2, src)
	same(t, "IDSW", m.IDSW, 1, src)
	same(t, "IDTP", m.IDTP, 3, src)
	near(t, "MOTA", m.MOTA, 0.75, 1e-12, "worked_examples.md A5 (computed)")
	near(t, "MOTP (mean distance)", motp, 0.15, 1e-9, "worked_examples.md A5 (computed)")
	near(t, "IDF1", m.IDF1, 0.75, 1e-12, "worked_examples.md A5 (computed)")
}

// A6. test_accumulator.py::test_consecutive_matches_preserve_identity.
func TestExampleA6ContinuingMatch(t *testing.T) {
	m, motp := scoreDistances(t, []simFrame{
		{gt: ids(1), tr: ids(1), m: [][]float64{{0.1}}},
		{gt: ids(1), tr: ids(1), m: [][]float64{{0.2}}},
	})
	const src = "py-motmetrics test_accumulator.py::test_consecutive_matches_preserve_identity (asserted)"
	same(t, "frames", m.Frames, 2, src)
	same(t, "matches", m.TP-m.IDSW, 2, src)
	near(t, "MOTP (mean distance)", motp, 0.15, 1e-9, src)
	near(t, "IDF1", m.IDF1, 1, 1e-12, src)
}

// A7. test_accumulator.py::test_changed_prediction_is_a_switch.
func TestExampleA7ChangedHypothesisIsASwitch(t *testing.T) {
	m, _ := scoreDistances(t, []simFrame{
		{gt: ids(1), tr: ids(1), m: [][]float64{{0.1}}},
		{gt: ids(1), tr: ids(2), m: [][]float64{{0.1}}},
	})
	const src = "py-motmetrics test_accumulator.py::test_changed_prediction_is_a_switch (asserted)"
	same(t, "matches", m.TP-m.IDSW, 1, src)
	same(t, "IDSW", m.IDSW, 1, src)
}

// A8. test_accumulator.py::test_empty_frames_are_counted.
func TestExampleA8EmptyFrameCounts(t *testing.T) {
	m, _ := scoreDistances(t, []simFrame{{}})
	same(t, "frames", m.Frames, 1, "py-motmetrics test_accumulator.py::test_empty_frames_are_counted (asserted)")

	// The same through Evaluate: Options.Frames sets the length even when
	// the last frames hold no box.
	rows := []motfmt.Row{{Frame: 1, ID: 1, W: 10, H: 10, Conf: 1, Class: -1, Visibility: -1}}
	e, err := Evaluate(rows, rows, Options{Frames: 3})
	if err != nil {
		t.Fatal(err)
	}
	same(t, "frames via Evaluate", e.Frames, 3, "Options.Frames")
}

// A9. test_metric_engine.py::test_trackeval_clear_derivatives; similarity = 1 − distance.
func TestExampleA9TrackEvalDerivedScores(t *testing.T) {
	m, _ := scoreSimilarities(t, []simFrame{
		{gt: ids(1), tr: ids(1), m: [][]float64{{0.8}}},
		{gt: ids(1, 2), tr: ids(1), m: [][]float64{{0.9}, {x}}},
		{gt: ids(), tr: ids(2)},
	}, 0.5)
	const src = "py-motmetrics test_metric_engine.py::test_trackeval_clear_derivatives (asserted)"
	same(t, "TP", m.TP, 2, src)
	same(t, "FN", m.FN, 1, src)
	same(t, "FP", m.FP, 1, src)
	near(t, "MODA", m.MODA, 1.0/3, 1e-12, src)
	near(t, "sMOTA", m.SMOTA, 0.7/3, 1e-12, src)
	near(t, "MTR", float64(m.MT)/float64(m.GTIDs), 0.5, 1e-12, src)
	near(t, "PTR", float64(m.PT)/float64(m.GTIDs), 0, 1e-12, src)
	near(t, "MLR", float64(m.ML)/float64(m.GTIDs), 0.5, 1e-12, src)
	near(t, "CLR_F1", m.CLRF1, 2.0/3, 1e-12, src)
	near(t, "FP per frame", float64(m.FP)/float64(m.Frames), 1.0/3, 1e-12, src)
}

// A10. test_metric_engine.py::test_track_quality_boundary_matches_trackeval.
func TestExampleA10MostlyTrackedBoundary(t *testing.T) {
	var frames []simFrame
	for range 4 {
		frames = append(frames, simFrame{gt: ids(1), tr: ids(1), m: [][]float64{{0}}})
	}
	frames = append(frames, simFrame{gt: ids(1), tr: ids()})
	m, _ := scoreDistances(t, frames)
	const src = "py-motmetrics test_metric_engine.py::test_track_quality_boundary_matches_trackeval (asserted)"
	same(t, "MT", m.MT, 0, src)
	same(t, "PT", m.PT, 1, src)
	same(t, "ML", m.ML, 0, src)
}

// A12. test_utils.py::test_annotations_xor_predictions_present: 1-D
// positions, allowed when the squared distance is at most 2.
func TestExampleA12OneSidedFrames(t *testing.T) {
	gtPos := map[int64]map[int]float64{1: {1: 0, 2: 2, 3: 4, 4: 6}, 2: {3: 0, 4: 2, 5: 4}}
	hPos := map[int]float64{3: 3, 4: 5, 5: 7, 6: 7, 7: 7}
	var frames []simFrame
	for f := 1; f <= 7; f++ {
		var fr simFrame
		for _, g := range []int64{1, 2} {
			if _, ok := gtPos[g][f]; ok {
				fr.gt = append(fr.gt, g)
			}
		}
		hp, hOK := hPos[f]
		if hOK {
			fr.tr = ids(1)
			for _, g := range fr.gt {
				d := (gtPos[g][f] - hp) * (gtPos[g][f] - hp)
				if d > 2 {
					d = x
				}
				fr.m = append(fr.m, []float64{d})
			}
		}
		frames = append(frames, fr)
	}
	m, _ := scoreDistances(t, frames)
	const src = "py-motmetrics test_utils.py::test_annotations_xor_predictions_present (asserted)"
	same(t, "GT boxes", m.GT, 7, src)
	same(t, "hypothesis boxes", m.Pred, 5, src)
	same(t, "unique GT ids", m.GTIDs, 2, src)
}

// A13. test_issue19.py::test_issue19 (no values asserted; a crash regression).
func TestExampleA13MoreHypothesesThanGT(t *testing.T) {
	m, motp := scoreDistances(t, []simFrame{
		{gt: ids(0, 1), tr: ids(0, 1), m: [][]float64{{0.2, x}, {x, 0.2}}},
		{gt: ids(2, 3), tr: ids(2, 3, 4, 5), m: [][]float64{{0.28571429, 0.5, 0.0, x}, {x, 0.44444444, x, 0.0}}},
	})
	const src = "worked_examples.md A13 (computed with py-motmetrics 2020)"
	same(t, "TP", m.TP, 4, src)
	same(t, "FP", m.FP, 2, src)
	same(t, "FN", m.FN, 0, src)
	same(t, "IDSW", m.IDSW, 0, src)
	near(t, "MOTA", m.MOTA, 0.5, 1e-12, src)
	near(t, "MOTP (mean distance)", motp, 0.1, 1e-9, src)
	near(t, "IDF1", m.IDF1, 0.8, 1e-12, src)
}

// A14. test_metrics.py::test_paper_metrics (no values asserted).
func TestExampleA14PaperMetrics(t *testing.T) {
	m, motp := scoreDistances(t, []simFrame{
		{gt: ids(1, 2), tr: ids(1, 2, 3), m: [][]float64{{0.1, x, 0.3}, {0.5, 0.2, 0.3}}},
		{gt: ids(1, 2), tr: ids(1), m: [][]float64{{0.2}, {0.4}}},
		{gt: ids(1, 2), tr: ids(1, 3), m: [][]float64{{0.6, 0.2}, {0.1, 0.6}}},
	})
	const src = "worked_examples.md A14 (computed with py-motmetrics 2020)"
	same(t, "TP", m.TP, 5, src)
	same(t, "FP", m.FP, 1, src)
	same(t, "FN", m.FN, 1, src)
	same(t, "IDSW", m.IDSW, 1, src)
	near(t, "MOTA", m.MOTA, 0.5, 1e-12, src)
	near(t, "MOTP (mean distance)", motp, 0.34, 1e-9, src)
	near(t, "precision", m.Precision, 5.0/6, 1e-12, src)
	near(t, "recall", m.Recall, 5.0/6, 1e-12, src)
	same(t, "Frag", m.Frag, 1, src)
	near(t, "IDF1", m.IDF1, 5.0/6, 1e-12, src)
}
