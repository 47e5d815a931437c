package eval

import (
	"testing"

	"tallyd/internal/motfmt"
)

// Cases where the two reference implementations differ; this package
// follows the official evaluator (TrackEval) and each case pins that choice.

// A11 and README §7 trap 1: fragmentation after a frame without tracker
// boxes. The two references differ: py-motmetrics (2020, and the revision
// of test_num_fragmentations_ignores_leading_and_trailing_misses that
// asserts Frag 1) clears "tracked in the previous frame" on every frame;
// TrackEval, the official evaluator, skips frames that hold no tracker box
// (or no GT box) for that purpose and gives 0. This package follows
// TrackEval.
func TestExampleA11FragmentationSkipsFramesWithoutTrackerBoxes(t *testing.T) {
	frames := []simFrame{
		{gt: ids(1, 2), tr: ids()},
		{gt: ids(1, 2), tr: ids(1), m: [][]float64{{0.1}, {x}}},
		{gt: ids(1, 2), tr: ids()},
		{gt: ids(1, 2), tr: ids(1), m: [][]float64{{0.1}, {x}}},
		{gt: ids(1, 2), tr: ids()},
	}
	m, _ := scoreDistances(t, frames)
	same(t, "Frag", m.Frag, 0, "worked_examples.md A11: TrackEval gives 0 (py-motmetrics revision asserts 1)")

	// With one extra hypothesis in frame 3 that matches nothing, the frame
	// holds tracker boxes and both references give 1.
	frames[2] = simFrame{gt: ids(1, 2), tr: ids(9), m: [][]float64{{x}, {x}}}
	m, _ = scoreDistances(t, frames)
	same(t, "Frag with an unmatched box in frame 3", m.Frag, 1, "worked_examples.md A11: both references give 1")

	// The same with boxes, as README §7 trap 1 states it: one tracker box on
	// GT 1 with IoU 0.9 in frames 2 and 4 only.
	gt1 := motfmt.Row{ID: 1, X: 0, Y: 0, W: 100, H: 100, Conf: 1, Class: -1, Visibility: -1}
	gt2 := motfmt.Row{ID: 2, X: 500, Y: 0, W: 100, H: 100, Conf: 1, Class: -1, Visibility: -1}
	trk := motfmt.Row{ID: 7, X: 0, Y: 0, W: 100, H: 90, Conf: 1, Class: -1, Visibility: -1} // IoU 0.9
	stray := motfmt.Row{ID: 8, X: 900, Y: 900, W: 10, H: 10, Conf: 1, Class: -1, Visibility: -1}
	var gt, tracks []motfmt.Row
	for f := 1; f <= 5; f++ {
		for _, r := range []motfmt.Row{gt1, gt2} {
			r.Frame = f
			gt = append(gt, r)
		}
		if f == 2 || f == 4 {
			r := trk
			r.Frame = f
			tracks = append(tracks, r)
		}
	}
	e, err := Evaluate(gt, tracks, Options{Frames: 5})
	if err != nil {
		t.Fatal(err)
	}
	same(t, "Frag (boxes)", e.Frag, 0, "README §7 trap 1: TrackEval Frag = 0")
	stray.Frame = 3
	e, err = Evaluate(gt, append(tracks, stray), Options{Frames: 5})
	if err != nil {
		t.Fatal(err)
	}
	same(t, "Frag (boxes, unmatched box in frame 3)", e.Frag, 1, "README §7 trap 1: TrackEval also gives 1")
}

// The empty-frame memory also spans frames that hold tracker boxes but no
// GT box: the pair matched before such a frame still counts as continuing
// after it (TrackEval clear.py; README §3 "Previous frame" quirk).
func TestContinuationSurvivesFrameWithoutGT(t *testing.T) {
	// Frame 3 could pair GT 1 with H 2 (0.9) or keep H 1 (0.6); only the
	// continuation bonus keeps H 1, and it applies because frame 2 held no
	// GT box and so did not clear the memory.
	m, _ := scoreSimilarities(t, []simFrame{
		{gt: ids(1), tr: ids(1), m: [][]float64{{0.6}}},
		{gt: ids(), tr: ids(1, 2)},
		{gt: ids(1), tr: ids(1, 2), m: [][]float64{{0.6, 0.9}}},
	}, 0.5)
	same(t, "IDSW", m.IDSW, 0, "README §3: frames without GT do not reset the previous-frame memory")
	same(t, "Frag", m.Frag, 0, "README §3")
	near(t, "MOTP", m.MOTP, 0.6, 1e-12, "README §3: H 1 kept at IoU 0.6")
}

// Continuation looks at the previous evaluated frame only, while ID
// switches compare with the last match at any earlier frame (TrackEval
// clear.py). py-motmetrics (2020) continues from the last match at any
// time and would keep H 1 here without a switch.
func TestContinuationOnlyFromPreviousFrame(t *testing.T) {
	m, _ := scoreSimilarities(t, []simFrame{
		{gt: ids(1), tr: ids(1), m: [][]float64{{0.6}}},
		{gt: ids(1), tr: ids(1), m: [][]float64{{x}}}, // both present, no overlap: memory cleared
		{gt: ids(1), tr: ids(1, 2), m: [][]float64{{0.6, 0.9}}},
	}, 0.5)
	same(t, "IDSW", m.IDSW, 1, "TrackEval clear.py: best IoU wins without a previous-frame match, and differs from the last match")
	same(t, "Frag", m.Frag, 1, "TrackEval clear.py")
}

// README §7 trap 2: the CLEAR assignment maximises the sum of IoU among
// eligible pairs, not the number of matches: 0.9 + 0.9 beats
// 0.5 + 0.5 + 0.6. (py-motmetrics makes the most pairs first and would
// report 3 matches.)
func TestCLEARMaximisesIoUSumNotMatchCount(t *testing.T) {
	m, _ := scoreSimilarities(t, []simFrame{{
		gt: ids(1, 2, 3), tr: ids(1, 2, 3),
		m: [][]float64{{0.9, 0.5, x}, {x, 0.9, 0.5}, {0.6, x, x}},
	}}, 0.5)
	same(t, "TP", m.TP, 2, "README §7 trap 2 (TrackEval)")
	near(t, "MOTP", m.MOTP, 0.9, 1e-12, "README §7 trap 2 (TrackEval)")
}
