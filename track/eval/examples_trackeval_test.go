package eval

import (
	"fmt"
	"strings"
	"testing"

	"tallyd/internal/motfmt"
)

// Parts B to E of ../shared/reference/mot/worked_examples.md: TrackEval's
// unit-test sequences, tiny HOTA cases, MOTChallenge preprocessing and the
// geometry building blocks.

// presence builds Part B's sequences: for each frame (1-based) the present
// GT and tracker ids (0-based), and the pairs with similarity 1.
func presence(frames int, gt, tr map[int64][]int, ones map[[2]int64][]int) []simFrame {
	in := func(fs []int, f int) bool {
		for _, v := range fs {
			if v == f {
				return true
			}
		}
		return false
	}
	out := make([]simFrame, frames)
	for f := 1; f <= frames; f++ {
		var fr simFrame
		for id := int64(0); id < 10; id++ {
			if in(gt[id], f) {
				fr.gt = append(fr.gt, id)
			}
			if in(tr[id], f) {
				fr.tr = append(fr.tr, id)
			}
		}
		for _, g := range fr.gt {
			row := make([]float64, len(fr.tr))
			for j, h := range fr.tr {
				if in(ones[[2]int64{g, h}], f) {
					row[j] = 1
				}
			}
			fr.m = append(fr.m, row)
		}
		out[f-1] = fr
	}
	return out
}

// B1. TrackEval tests/test_metrics.py, sequence no_confusion.
func TestExampleB1NoConfusion(t *testing.T) {
	m, _ := scoreSimilarities(t, presence(5,
		map[int64][]int{0: {1, 2, 3, 4, 5}, 1: {1, 2, 3}},
		map[int64][]int{0: {1, 2, 3, 4}, 1: {1, 2, 3, 4, 5}},
		map[[2]int64][]int{{0, 1}: {4, 5}, {1, 0}: {1, 2}}), 0.5)
	const src = "TrackEval tests/test_metrics.py no_confusion (asserted)"
	same(t, "CLR_TP", m.TP, 4, src)
	same(t, "CLR_FN", m.FN, 4, src)
	same(t, "CLR_FP", m.FP, 5, src)
	same(t, "IDSW", m.IDSW, 0, src)
	near(t, "MOTA", m.MOTA, -0.125, 1e-12, src)
	same(t, "IDTP", m.IDTP, 4, src)
	same(t, "IDFN", m.IDFN, 4, src)
	same(t, "IDFP", m.IDFP, 5, src)
	near(t, "IDR", m.IDR, 4.0/8, 1e-12, src)
	near(t, "IDP", m.IDP, 4.0/9, 1e-12, src)
	near(t, "IDF1", m.IDF1, 8.0/17, 1e-12, src)
	const comp = "worked_examples.md B1 (computed with TrackEval)"
	near(t, "HOTA", m.HOTA, 0.316227766017, 1e-9, comp)
	near(t, "DetA", m.DetA, 4.0/13, 1e-9, comp)
	near(t, "AssA", m.AssA, 0.325, 1e-9, comp)
	near(t, "DetRe", m.DetRe, 0.5, 1e-9, comp)
	near(t, "DetPr", m.DetPr, 4.0/9, 1e-9, comp)
	near(t, "AssRe", m.AssRe, 0.533333333333, 1e-9, comp)
	near(t, "AssPr", m.AssPr, 0.45, 1e-9, comp)
	near(t, "LocA", m.LocA, 1, 1e-9, comp)
	same(t, "MT/PT/ML/Frag", [4]int{m.MT, m.PT, m.ML, m.Frag}, [4]int{0, 2, 0, 0}, comp)
	near(t, "MOTP", m.MOTP, 1, 1e-12, comp)
}

// B2. TrackEval tests/test_metrics.py, sequence with_confusion.
func TestExampleB2WithConfusion(t *testing.T) {
	m, _ := scoreSimilarities(t, presence(5,
		map[int64][]int{0: {1, 2, 3, 4, 5}, 1: {1, 2, 3}},
		map[int64][]int{0: {1, 2, 3, 4}, 1: {1, 2, 3, 4, 5}},
		map[[2]int64][]int{{0, 1}: {4, 5}, {1, 0}: {1, 2}, {0, 0}: {3}, {1, 1}: {2}}), 0.5)
	const src = "TrackEval tests/test_metrics.py with_confusion (asserted)"
	same(t, "CLR_TP", m.TP, 5, src)
	same(t, "CLR_FN", m.FN, 3, src)
	same(t, "CLR_FP", m.FP, 4, src)
	same(t, "IDSW", m.IDSW, 1, src)
	near(t, "MOTA", m.MOTA, 0, 1e-12, src)
	same(t, "IDTP", m.IDTP, 4, src)
	same(t, "IDFN", m.IDFN, 4, src)
	same(t, "IDFP", m.IDFP, 5, src)
	near(t, "IDF1", m.IDF1, 8.0/17, 1e-12, src)
	const comp = "worked_examples.md B2 (computed with TrackEval)"
	near(t, "HOTA", m.HOTA, 0.344601218802, 1e-9, comp)
	near(t, "DetA", m.DetA, 5.0/12, 1e-9, comp)
	near(t, "AssA", m.AssA, 0.285, 1e-9, comp)
	near(t, "DetRe", m.DetRe, 0.625, 1e-9, comp)
	near(t, "DetPr", m.DetPr, 5.0/9, 1e-9, comp)
	near(t, "AssRe", m.AssRe, 0.466666666667, 1e-9, comp)
	near(t, "AssPr", m.AssPr, 0.41, 1e-9, comp)
	same(t, "MT/PT/ML/Frag", [4]int{m.MT, m.PT, m.ML, m.Frag}, [4]int{0, 2, 0, 0}, comp)
	near(t, "MODA", m.MODA, 0.125, 1e-12, comp)
}

// B3. TrackEval tests/test_metrics.py, sequence split_tracks.
func TestExampleB3SplitTracks(t *testing.T) {
	m, _ := scoreSimilarities(t, presence(5,
		map[int64][]int{0: {1, 2, 4, 5}, 1: {1, 2, 3, 4, 5}},
		map[int64][]int{0: {1, 2}, 1: {3, 4, 5}, 2: {5}, 3: {3, 4, 5}, 4: {1, 2}},
		map[[2]int64][]int{{0, 0}: {1, 2}, {0, 3}: {4, 5}, {1, 1}: {3, 4}, {1, 2}: {5}, {1, 4}: {1, 2}}), 0.5)
	const src = "TrackEval tests/test_metrics.py split_tracks (asserted)"
	same(t, "CLR_TP", m.TP, 9, src)
	same(t, "CLR_FN", m.FN, 0, src)
	same(t, "CLR_FP", m.FP, 2, src)
	same(t, "IDSW", m.IDSW, 3, src)
	near(t, "MOTA", m.MOTA, 1-5.0/9, 1e-12, src)
	same(t, "IDTP", m.IDTP, 4, src)
	same(t, "IDFN", m.IDFN, 5, src)
	same(t, "IDFP", m.IDFP, 7, src)
	near(t, "IDR", m.IDR, 4.0/9, 1e-12, src)
	near(t, "IDP", m.IDP, 4.0/11, 1e-12, src)
	near(t, "IDF1", m.IDF1, 0.4, 1e-12, src)
	const comp = "worked_examples.md B3 (computed with TrackEval)"
	near(t, "HOTA", m.HOTA, 0.561383572214, 1e-9, comp)
	near(t, "DetA", m.DetA, 9.0/11, 1e-9, comp)
	near(t, "AssA", m.AssA, 0.385185185185, 1e-9, comp)
	near(t, "AssRe", m.AssRe, 0.422222222222, 1e-9, comp)
	near(t, "AssPr", m.AssPr, 0.851851851852, 1e-9, comp)
	// GT 0 is absent in frame 3, which holds other boxes, so its track restarts.
	same(t, "MT/PT/ML/Frag", [4]int{m.MT, m.PT, m.ML, m.Frag}, [4]int{2, 0, 0, 1}, comp)
}

// C1–C4. Tiny HOTA cases, computed with TrackEval (worked_examples.md Part C).
func TestExampleCTinyHOTA(t *testing.T) {
	const src = "worked_examples.md Part C (computed with TrackEval)"
	one := func(iou float64) Metrics {
		m, _ := scoreSimilarities(t, []simFrame{{gt: ids(1), tr: ids(1), m: [][]float64{{iou}}}}, 0.5)
		return m
	}
	t.Run("C1 IoU 0.3", func(t *testing.T) {
		m := one(0.3)
		near(t, "HOTA", m.HOTA, 6.0/19, 1e-9, src) // α ≤ 0.30 succeed
		near(t, "DetA", m.DetA, 6.0/19, 1e-9, src)
		near(t, "AssA", m.AssA, 6.0/19, 1e-9, src)
		near(t, "LocA", m.LocA, 0.778947368421, 1e-9, src)
		same(t, "FN/FP", [2]int{m.FN, m.FP}, [2]int{1, 1}, src)
		near(t, "MOTA", m.MOTA, -1, 1e-12, src)
		near(t, "IDF1", m.IDF1, 0, 1e-12, src)
	})
	t.Run("C2 IoU 0.8", func(t *testing.T) {
		m := one(0.8)
		near(t, "HOTA", m.HOTA, 16.0/19, 1e-9, src)
		near(t, "DetA", m.DetA, 16.0/19, 1e-9, src)
		near(t, "AssA", m.AssA, 16.0/19, 1e-9, src)
		near(t, "LocA", m.LocA, 0.831578947368, 1e-9, src)
		same(t, "TP", m.TP, 1, src)
		near(t, "MOTA", m.MOTA, 1, 1e-12, src)
		near(t, "MOTP", m.MOTP, 0.8, 1e-12, src)
		near(t, "IDF1", m.IDF1, 1, 1e-12, src)
	})
	t.Run("C3 IoU 0.9", func(t *testing.T) {
		m := one(0.9)
		near(t, "HOTA", m.HOTA, 18.0/19, 1e-9, src)
		near(t, "DetA", m.DetA, 18.0/19, 1e-9, src)
		near(t, "AssA", m.AssA, 18.0/19, 1e-9, src)
		near(t, "LocA", m.LocA, 0.905263157895, 1e-9, src)
		same(t, "TP", m.TP, 1, src)
		near(t, "MOTP", m.MOTP, 0.9, 1e-12, src)
	})
	t.Run("C4 identities swap", func(t *testing.T) {
		m, _ := scoreSimilarities(t, []simFrame{
			{gt: ids(0, 1), tr: ids(0, 1), m: [][]float64{{0.8, 0.1}, {0.1, 0.8}}},
			{gt: ids(0, 1), tr: ids(0, 1), m: [][]float64{{0.1, 0.8}, {0.8, 0.1}}},
		}, 0.5)
		near(t, "HOTA", m.HOTA, 0.486189700370, 1e-9, src)
		near(t, "DetA", m.DetA, 0.842105263158, 1e-9, src)
		near(t, "AssA", m.AssA, 0.280701754386, 1e-9, src)
		near(t, "LocA", m.LocA, 0.831578947368, 1e-9, src)
		same(t, "TP", m.TP, 4, src)
		same(t, "IDSW", m.IDSW, 2, src)
		near(t, "MOTA", m.MOTA, 0.5, 1e-12, src)
		near(t, "MOTP", m.MOTP, 0.8, 1e-12, src)
		near(t, "sMOTA", m.SMOTA, 0.3, 1e-12, src)
		same(t, "IDTP", m.IDTP, 2, src)
		near(t, "IDF1", m.IDF1, 0.5, 1e-12, src)
	})
}

// C5. py-motmetrics 2026 test_evaluation.py::test_hota_is_invariant_to_zero_tracker_id.
func TestExampleC5TrackerIDInvariance(t *testing.T) {
	box := func(f int, id int64, l, top float64) motfmt.Row {
		return motfmt.Row{Frame: f, ID: id, X: l, Y: top, W: 10, H: 10, Conf: 1, Class: -1, Visibility: -1}
	}
	gt := []motfmt.Row{box(1, 1, 24, 36), box(1, 2, 36, 0), box(2, 1, 12, 24), box(2, 2, 24, 36), box(3, 1, 12, 12),
		box(3, 2, 36, 0), box(4, 1, 36, 36), box(4, 2, 0, 24), box(5, 2, 12, 24), box(6, 1, 24, 0),
		box(7, 1, 24, 24), box(7, 2, 36, 12)}
	tracks := []motfmt.Row{
		box(1, 0, 12.090215403896158, 38.0103228683318), box(1, 2, 36.535330512240094, 12.158121373496847),
		box(2, 0, 22.065693390322537, 21.237397443312403), box(2, 1, 36.40689653823255, 24.23512662993634),
		box(2, 2, 35.191960656230044, 11.927248581898391), box(3, 0, 37.59134793507912, 22.788697987002156),
		box(3, 1, 23.124599350885045, 35.83244707562376), box(4, 0, 0.17903103854487185, 23.03779440883917),
		box(4, 1, 22.201066646842165, 24.111774343157194), box(4, 2, 1.024365400792809, -0.09977598022412335),
		box(5, 0, 24.190902616838745, 22.21920820822479), box(5, 1, 1.3481458081506117, 13.717833011181199),
		box(5, 2, 0.9703551338601327, 21.01137032373826), box(6, 0, 23.44713615885006, 35.62470689922311),
		box(6, 1, 35.544479417452905, 36.5288836009279), box(7, 0, 23.9637845804851, 1.0025715349010158),
		box(7, 1, 11.99190065899256, 12.87507353127062), box(7, 2, 33.467693823950185, -3.0529934174098985),
	}
	m, err := Evaluate(gt, tracks, Options{})
	if err != nil {
		t.Fatal(err)
	}
	shifted := make([]motfmt.Row, len(tracks))
	for i, r := range tracks {
		r.ID += 100
		shifted[i] = r
	}
	s, err := Evaluate(gt, shifted, Options{})
	if err != nil {
		t.Fatal(err)
	}
	const inv = "py-motmetrics test_evaluation.py::test_hota_is_invariant_to_zero_tracker_id (asserted: exact equality)"
	same(t, "HOTA family after +100 on tracker ids",
		[9]float64{s.HOTA, s.DetA, s.AssA, s.DetRe, s.DetPr, s.AssRe, s.AssPr, s.LocA, s.OWTA},
		[9]float64{m.HOTA, m.DetA, m.AssA, m.DetRe, m.DetPr, m.AssRe, m.AssPr, m.LocA, m.OWTA}, inv)

	const src = "worked_examples.md C5 (computed with TrackEval)"
	near(t, "IoU of GT 2 and tracker 0 in frame 4", boxIoU(&gt[7], &tracks[7]), 0.797912776670, 1e-9, src)
	near(t, "HOTA", m.HOTA, 0.042320231638, 1e-9, src)
	near(t, "DetA", m.DetA, 0.027223230490, 1e-9, src)
	near(t, "AssA", m.AssA, 0.065789473684, 1e-9, src)
	for _, a := range []int{4, 9, 14} { // α = 0.25, 0.50, 0.75
		near(t, "HOTA@α", m.Alphas[a].HOTA, 0.053605626742, 1e-9, src)
		near(t, "DetA@α", m.Alphas[a].DetA, 1.0/29, 1e-9, src)
		near(t, "AssA@α", m.Alphas[a].AssA, 1.0/12, 1e-9, src)
	}
	same(t, "TP/FN/FP", [3]int{m.TP, m.FN, m.FP}, [3]int{1, 11, 17}, src)
	near(t, "MOTA", m.MOTA, -4.0/3, 1e-12, src)
	near(t, "IDF1", m.IDF1, 1.0/15, 1e-12, src)
}

// readMOT parses MOTChallenge lines given inline.
func readMOT(t *testing.T, lines ...string) []motfmt.Row {
	t.Helper()
	rows, err := motfmt.Read(strings.NewReader(strings.Join(lines, "\n")), "inline")
	if err != nil {
		t.Fatal(err)
	}
	return rows
}

// D1. py-motmetrics 2026 test_evaluation.py::test_motchallenge_preprocessing_suppresses_distractor_matches.
func TestExampleD1DistractorSuppression(t *testing.T) {
	gt := readMOT(t, "1,1,1,1,10,10,1,1,1", "1,2,21,1,10,10,0,8,1", "1,3,41,1,10,10,0,6,1")
	tracks := readMOT(t, "1,10,1,1,10,10,1,1,1", "1,20,21,1,10,10,1,1,1", "1,30,41,1,10,10,1,1,1", "1,40,61,1,10,10,1,1,1")
	const src = "py-motmetrics test_evaluation.py::test_motchallenge_preprocessing_suppresses_distractor_matches (asserted)"
	const comp = "worked_examples.md D1 (computed with TrackEval)"
	for _, c := range []struct {
		rules    Rules
		fp       int
		mota     float64
		idf1     float64
		hota     float64
		assertFP bool
	}{
		{RulesMOT17, 2, -1, 0.5, 0.577350269190, true}, // box 20 removed; 30 (class 6) and 40 are FP
		{RulesMOT20, 1, 0, 2.0 / 3, 0.707106781187, true},
		{RulesMOT15, 3, -2, 0.4, 0.5, true},
	} {
		t.Run(string(c.rules), func(t *testing.T) {
			m, err := Evaluate(gt, tracks, Options{Rules: c.rules})
			if err != nil {
				t.Fatal(err)
			}
			same(t, "GT ids scored", m.GTIDs, 1, src)
			same(t, "FP", m.FP, c.fp, src)
			same(t, "TP", m.TP, 1, comp)
			same(t, "FN", m.FN, 0, comp)
			near(t, "MOTA", m.MOTA, c.mota, 1e-12, comp)
			near(t, "IDF1", m.IDF1, c.idf1, 1e-12, comp)
			near(t, "HOTA", m.HOTA, c.hota, 1e-9, comp)
		})
	}
	same(t, "auto-detected rules", DetectRules(gt), RulesMOT17, "README §2: class column holds MOTChallenge classes")
}

// D2. py-motmetrics 2026 test_evaluation.py::test_custom_class_preprocessing_supports_benchmark_specific_ids.
func TestExampleD2ConfigurableClasses(t *testing.T) {
	gt := readMOT(t, "1,1,1,1,10,10,1,42,1", "1,2,21,1,10,10,1,43,1", "1,3,41,1,10,10,0,99,1", "1,4,61,1,10,10,0,100,1")
	tracks := readMOT(t, "1,10,1,1,10,10,1,42,1", "1,20,21,1,10,10,1,43,1", "1,30,43,1,10,10,1,99,1", "1,40,61,1,10,10,1,100,1")
	const src = "py-motmetrics test_evaluation.py::test_custom_class_preprocessing_supports_benchmark_specific_ids (asserted)"
	near(t, "IoU of box 30 with GT 3", boxIoU(&gt[2], &tracks[2]), 80.0/120, 1e-12, src)
	for _, c := range []struct {
		name string
		opt  Options
		fp   int
	}{
		{"distractor 99", Options{Rules: RulesMOT17, Classes: []int{42, 43}, Distractors: []int{99}}, 1},
		{"no distractors", Options{Rules: RulesMOT17, Classes: []int{42, 43}, Distractors: []int{}}, 2},
		{"suppression IoU 0.75", Options{Rules: RulesMOT17, Classes: []int{42, 43}, Distractors: []int{99}, SuppressIoU: 0.75}, 2},
	} {
		t.Run(c.name, func(t *testing.T) {
			m, err := Evaluate(gt, tracks, c.opt)
			if err != nil {
				t.Fatal(err)
			}
			same(t, "GT ids", m.GTIDs, 2, src)
			same(t, "FP", m.FP, c.fp, src)
		})
	}
}

// D3. py-motmetrics 2026 test_trackeval_parity.py::test_public_evaluator_matches_full_trackeval_mot17_protocol.
func TestExampleD3FiveFrameMOT17(t *testing.T) {
	gt := readMOT(t,
		"1,1,1,1,10,10,1,1,1", "1,90,101,1,10,10,0,8,1", "2,1,2,1,10,10,1,1,1", "2,91,201,1,10,10,0,7,1",
		"2,3,301,1,10,10,0,1,1", "3,2,401,1,10,10,1,1,1", "3,92,501,1,10,10,0,2,1", "3,93,601,1,10,10,0,12,1",
		"3,94,701,1,10,10,0,3,1", "4,2,402,1,10,10,1,1,1", "5,2,403,1,10,10,1,1,1")
	tracks := readMOT(t,
		"1,10,1,1,10,10,1,1,1", "1,20,101,1,10,10,1,1,1", "1,90,801,1,10,10,1,1,1", "2,10,2,1,10,10,1,1,1",
		"2,20,201,1,10,10,1,1,1", "2,30,301,1,10,10,1,1,1", "3,40,401,1,10,10,1,1,1", "3,50,501,1,10,10,1,1,1",
		"3,60,601,1,10,10,1,1,1", "3,70,701,1,10,10,1,1,1", "5,40,403,1,10,10,1,1,1")
	m, err := Evaluate(gt, tracks, Options{Frames: 5})
	if err != nil {
		t.Fatal(err)
	}
	const src = "worked_examples.md D3 (computed with TrackEval, MOT17 protocol, sequence length 5)"
	same(t, "rules", m.Rules, RulesMOT17, "auto-detection")
	same(t, "TP/FN/FP/IDSW", [4]int{m.TP, m.FN, m.FP, m.IDSW}, [4]int{4, 1, 3, 0}, src)
	near(t, "MOTA", m.MOTA, 0.2, 1e-12, src)
	near(t, "MODA", m.MODA, 0.2, 1e-12, src)
	near(t, "MOTP", m.MOTP, 1, 1e-12, src)
	near(t, "recall", m.Recall, 0.8, 1e-12, src)
	near(t, "precision", m.Precision, 4.0/7, 1e-12, src)
	same(t, "MT/PT/ML", [3]int{m.MT, m.PT, m.ML}, [3]int{1, 1, 0}, src)
	// Frame 4 holds no tracker box, so the empty-frame rule keeps GT 2 "tracked".
	same(t, "Frag", m.Frag, 0, src)
	same(t, "IDTP/IDFN/IDFP", [3]int{m.IDTP, m.IDFN, m.IDFP}, [3]int{4, 1, 3}, src)
	near(t, "IDF1", m.IDF1, 2.0/3, 1e-12, src)
	near(t, "IDP", m.IDP, 4.0/7, 1e-12, src)
	near(t, "IDR", m.IDR, 0.8, 1e-12, src)
	near(t, "HOTA", m.HOTA, 0.645497224368, 1e-9, src)
	near(t, "DetA", m.DetA, 0.5, 1e-9, src)
	near(t, "AssA", m.AssA, 0.833333333333, 1e-9, src)
	near(t, "AssRe", m.AssRe, 0.833333333333, 1e-9, src)
	near(t, "AssPr", m.AssPr, 1, 1e-9, src)
	same(t, "GT ids", m.GTIDs, 2, src)
	same(t, "tracker ids kept", m.PredIDs, 5, src)
	same(t, "tracker boxes kept", m.Pred, 7, src)
	same(t, "GT boxes", m.GT, 5, src)
	same(t, "tracker boxes suppressed", m.Suppressed, 4, src) // 20 twice, 50, 60
}

// E1. py-motmetrics test_distances.py::test_iou_matrix (tolerance 1e-4).
func TestExampleE1IoU(t *testing.T) {
	a := motfmt.Row{X: 0, Y: 0, W: 1, H: 2}
	bs := []motfmt.Row{{X: 0, Y: 0, W: 1, H: 2}, {X: 0, Y: 0, W: 1, H: 1}, {X: 1, Y: 1, W: 1, H: 1}, {X: 0.5, Y: 0, W: 1, H: 1}, {X: 0, Y: 1, W: 1, H: 1}}
	want := []float64{1, 0.5, 0, 0.2, 0.5}
	const src = "py-motmetrics test_distances.py::test_iou_matrix (asserted)"
	for i := range bs {
		near(t, fmt.Sprintf("IoU(a, b%d)", i), boxIoU(&a, &bs[i]), want[i], 1e-4, src)
	}
	// With a maximum distance of 0.5, IoU exactly 0.5 is allowed: one frame
	// per box b, GT a against tracker b.
	var gt, tracks []motfmt.Row
	for i, b := range bs {
		g, h := a, b
		g.Frame, g.ID, g.Conf, g.Class = i+1, 1, 1, -1
		h.Frame, h.ID, h.Class = i+1, 1, -1
		gt, tracks = append(gt, g), append(tracks, h)
	}
	m, err := Evaluate(gt, tracks, Options{})
	if err != nil {
		t.Fatal(err)
	}
	same(t, "matches (boxes 0, 1 and 4)", m.TP, 3, src)
}
