// Package eval scores tracker output against ground truth with the standard
// multi-object-tracking metrics: CLEAR MOT (MOTA, MOTP, ID switches,
// fragmentations, mostly tracked/lost; Bernardin and Stiefelhagen 2008),
// the identity metrics IDF1/IDP/IDR (Ristani et al. 2016) and HOTA with
// DetA and AssA (Luiten et al. 2021).
//
// Numbers follow the official MOTChallenge evaluator (TrackEval) wherever
// the common implementations differ, so that a score computed here can be
// compared with a published benchmark table:
//
//   - MOTP is the mean IoU of matched pairs (higher is better), not 1−IoU.
//   - In each frame the CLEAR matching first keeps as many of the previous
//     frame's pairs as possible, then maximises the sum of IoU.
//   - A frame without any ground-truth box or without any tracker box does
//     not clear the memory of which pairs were matched "in the previous
//     frame", which affects continuation and fragmentation only.
//   - Ratios whose denominator is zero use 1 instead (MOTA of a sequence
//     without ground truth is −FP, not NaN), so every value is finite.
//   - Under the mot17 rules tracker boxes sitting on distractor classes are
//     dropped before scoring, and only active pedestrian rows are scored.
//     The ground truth's flag (column 7) is read as a whole number, so 0.5
//     counts as 0. Tracker rows are never filtered by score or class.
//
// Evaluate scores one sequence (EvaluateContext when it must stop on a
// signal); Combine (or an Accumulator) merges several sequences into one
// result the way the benchmark's overall row is made.
//
// Memory grows with the rows and the overlapping pairs of boxes, never with
// frame numbers or ids: frames without any row cost nothing. MaxOverlaps
// and the assignment limit bound what a hostile file can make it hold.
package eval

import (
	"context"
	"errors"
	"fmt"
	"slices"

	"tallyd/internal/motfmt"
)

// Rules selects which rows are scored, following the MOTChallenge
// benchmarks' evaluation protocols.
type Rules string

const (
	// RulesAuto picks mot17 when the ground truth carries MOTChallenge
	// classes and mot15 otherwise; see DetectRules.
	RulesAuto Rules = "auto"
	// RulesMOT15 scores every ground-truth row whose flag (column 7) is not
	// 0 and every tracker row; classes are ignored. This is also the
	// choice for footage scored with the project's own ground truth.
	RulesMOT15 Rules = "mot15"
	// RulesMOT17 (also MOT16) drops tracker boxes matched to a ground-truth
	// box of a distractor class (2 person on vehicle, 7 static person,
	// 8 distractor, 12 reflection) and scores only ground-truth rows of
	// class 1 (pedestrian) whose flag is not 0.
	RulesMOT17 Rules = "mot17"
	// RulesMOT20 is RulesMOT17 with class 6 (non-motorised vehicle) also a
	// distractor.
	RulesMOT20 Rules = "mot20"
)

// DefaultIoU is the overlap a tracker box needs with a ground-truth box to
// count as a match in the CLEAR and identity metrics.
const DefaultIoU = 0.5

// Limits of one evaluation. Beyond them Evaluate fails with an error that
// names the limit rather than exhaust memory or run for hours. The
// assignment solver has its own: a group of ground-truth and tracker boxes
// (or ids, for IDF1) linked by eligible pairs is one assignment problem,
// and one of more than track.MaxAssignCells cells (8,192 × 8,192) fails
// the evaluation with an error wrapping track.ErrAssignTooLarge.
const (
	// MaxFrames is the longest sequence Options.Frames may ask for: the
	// frame limit of the MOTChallenge reader (motfmt.MaxFrame).
	MaxFrames = motfmt.MaxFrame
	// MaxOverlaps is the most pairs of overlapping ground-truth and tracker
	// boxes a sequence may hold, summed over its frames (24 bytes each, so
	// about 1.2 GB at the limit). Real sequences hold fewer pairs than rows
	// (MOT17-04-SDP scored with the Lif_T tracker: 102,847 pairs for
	// 145,509 rows); the limit stops files with thousands of boxes stacked
	// in one place.
	MaxOverlaps = 50_000_000
)

// Options tunes an evaluation. The zero value evaluates with the default
// threshold, auto-detected rules and the sequence length taken from the data.
type Options struct {
	// IoU is the least overlap for a CLEAR or identity match, in (0, 1];
	// 0 means DefaultIoU. HOTA does not use it (it averages over 19
	// thresholds of its own).
	IoU float64
	// Rules picks the rows to score; "" means RulesAuto.
	Rules Rules
	// Frames is the sequence length (seqLength in MOTChallenge's
	// seqinfo.ini); rows beyond it are an error. 0 means the last frame
	// found in either input.
	Frames int
	// Classes replaces the scored ground-truth classes of the mot17/mot20
	// rules (default {1}, pedestrian), for data sets with other class ids.
	Classes []int
	// Distractors replaces the distractor classes of the mot17/mot20 rules
	// when not nil; an empty non-nil slice drops no tracker box.
	Distractors []int
	// SuppressIoU is the least overlap at which a tracker box counts as
	// sitting on a distractor, in (0, 1]; 0 means 0.5.
	SuppressIoU float64
}

// OptionError is one invalid evaluation option.
type OptionError struct {
	Field string // option name as the command line spells it, e.g. "iou"
	Msg   string // the rule and the value found
}

// Error formats the problem as "field: rule (found value)".
func (e *OptionError) Error() string { return e.Field + ": " + e.Msg }

// InputError is a row that cannot be evaluated, located by input, frame
// and id.
type InputError struct {
	Input string // "truth" or "tracks"
	Frame int
	ID    int64
	Msg   string // the rule and the value found
}

// Error formats the problem as "input: frame F, id I: rule (found value)".
func (e *InputError) Error() string {
	return fmt.Sprintf("%s: frame %d, id %d: %s", e.Input, e.Frame, e.ID, e.Msg)
}

// MOTChallenge class ids (MOT16/17/20 ground truth, column 8).
const (
	minMOTClass = 1  // pedestrian
	maxMOTClass = 13 // crowd (MOT20)
)

// DetectRules picks the rules for a ground truth: mot17 when every row
// carries a MOTChallenge class (1 to 13 in column 8, as in MOT16/17/20
// ground truth), mot15 otherwise (no class column, as in MOT15 files and
// most tracker output, or classes of some other scheme).
func DetectRules(gt []motfmt.Row) Rules {
	if len(gt) == 0 {
		return RulesMOT15
	}
	for _, r := range gt {
		if r.Class < minMOTClass || r.Class > maxMOTClass {
			return RulesMOT15
		}
	}
	return RulesMOT17
}

// settings are Options resolved against the data: defaults filled in,
// rules detected, class lists chosen.
type settings struct {
	iou, suppressIoU float64
	rules            Rules
	frames           int
	byClass          bool  // mot17/mot20: suppress distractors, score only classes
	classes          []int // scored ground-truth classes
	distractors      []int
	checkClasses     bool // every ground-truth class must be a MOTChallenge one
	maxOverlaps      int  // MaxOverlaps (lowered by tests)
}

// resolve validates opt, reporting every invalid option at once, and fills
// in what depends on the data.
func (opt Options) resolve(gt, tracks []motfmt.Row) (settings, error) {
	var errs []error
	fail := func(field, format string, args ...any) {
		errs = append(errs, &OptionError{Field: field, Msg: fmt.Sprintf(format, args...)})
	}
	s := settings{iou: opt.IoU, suppressIoU: opt.SuppressIoU, rules: opt.Rules, frames: opt.Frames, maxOverlaps: MaxOverlaps}
	if s.iou == 0 {
		s.iou = DefaultIoU
	}
	if !(s.iou > 0 && s.iou <= 1) { // also catches NaN
		fail("iou", "want a number within (0, 1] (found %v)", opt.IoU)
	}
	if s.suppressIoU == 0 {
		s.suppressIoU = 0.5
	}
	if !(s.suppressIoU > 0 && s.suppressIoU <= 1) {
		fail("suppress_iou", "want a number within (0, 1] (found %v)", opt.SuppressIoU)
	}
	switch {
	case s.frames < 0:
		fail("frames", "want 0 (from the data) or a positive sequence length (found %d)", opt.Frames)
	case s.frames > MaxFrames:
		fail("frames", "want a sequence length of at most %d frames (found %d)", MaxFrames, opt.Frames)
	}
	switch s.rules {
	case "", RulesAuto:
		s.rules = DetectRules(gt)
	case RulesMOT15, RulesMOT17, RulesMOT20:
	default:
		fail("rules", "want one of mot15, mot17, mot20, auto (found %q)", string(opt.Rules))
	}
	if len(errs) > 0 {
		return s, errors.Join(errs...)
	}
	if s.frames == 0 {
		for _, rows := range [][]motfmt.Row{gt, tracks} {
			for _, r := range rows {
				s.frames = max(s.frames, r.Frame)
			}
		}
	}
	if s.rules == RulesMOT17 || s.rules == RulesMOT20 {
		s.byClass = true
		s.classes = []int{1}
		s.distractors = []int{2, 7, 8, 12}
		if s.rules == RulesMOT20 {
			s.distractors = append(s.distractors, 6)
		}
		s.checkClasses = opt.Classes == nil && opt.Distractors == nil
		if len(opt.Classes) > 0 {
			s.classes = slices.Clone(opt.Classes)
		}
		if opt.Distractors != nil {
			s.distractors = slices.Clone(opt.Distractors)
		}
	}
	return s, nil
}

// Evaluate scores the tracker rows of one sequence against its ground truth.
// Row order within a frame is kept (it can only matter between exactly tied
// assignments). It returns an *InputError for rows that cannot be scored
// (an id twice in one frame, a frame beyond Options.Frames, a box with a
// negative or non-finite size, a class outside the MOTChallenge list under
// the mot17 rules, more than MaxOverlaps overlapping pairs) and
// *OptionError values for invalid options.
func Evaluate(gt, tracks []motfmt.Row, opt Options) (Metrics, error) {
	return EvaluateContext(context.Background(), gt, tracks, opt)
}

// EvaluateContext is Evaluate that gives up soon after ctx is done, with
// an error that wraps ctx.Err(): what `tallyd score` calls so that a signal
// stops it. It looks at ctx about every millisecond of work, and no step
// between two looks takes more than a fraction of a second on inputs
// within motfmt's limits.
func EvaluateContext(ctx context.Context, gt, tracks []motfmt.Row, opt Options) (Metrics, error) {
	s, err := opt.resolve(gt, tracks)
	if err != nil {
		return Metrics{}, fmt.Errorf("score options: %w", err)
	}
	seq, err := prepare(ctx, gt, tracks, s)
	if err == nil {
		var m Metrics
		if m, err = score(ctx, seq, s.iou); err == nil {
			m.Rules = s.rules
			m.Frames = s.frames
			m.Suppressed = seq.suppressed
			return m, nil
		}
	}
	if cerr := ctx.Err(); cerr != nil {
		return Metrics{}, fmt.Errorf("evaluation interrupted: %w", cerr)
	}
	return Metrics{}, err
}

// pollWork is how much work (pairs and frames) a loop does between two
// looks at its context: about a millisecond.
const pollWork = 1 << 16

// poller lets a long loop notice that its context is done without paying
// for a look on every pass. The zero value is ready.
type poller struct{ work int }

// check adds work units done since the last call and returns ctx.Err()
// once ctx is done, looking at it only every pollWork units.
func (p *poller) check(ctx context.Context, work int) error {
	if p.work += work; p.work < pollWork {
		return nil
	}
	p.work = 0
	return ctx.Err()
}

// eps is the float64 machine epsilon; the official evaluator widens its
// thresholds by it (IoU ≥ 0.5 − eps counts as 0.5).
const eps = 0x1p-52

// box is a row's corners and area, computed once per frame.
type box struct{ x0, y0, x1, y1, area float64 }

func boxOf(r *motfmt.Row) box {
	x1, y1 := r.X+r.W, r.Y+r.H
	return box{r.X, r.Y, x1, y1, (x1 - r.X) * (y1 - r.Y)}
}

// iou is the intersection over union of two boxes, computed the way the
// official evaluator computes it (right/bottom from left+width first, areas
// from the corners, degenerate boxes overlapping nothing) so that pairs on
// a threshold fall on the same side. Inputs are finite.
func iou(a, b *box) float64 {
	iw := min(a.x1, b.x1) - max(a.x0, b.x0)
	if iw <= 0 {
		return 0
	}
	ih := min(a.y1, b.y1) - max(a.y0, b.y0)
	if ih <= 0 || a.area <= eps || b.area <= eps {
		return 0
	}
	inter := iw * ih
	union := a.area + b.area - inter
	if union <= eps {
		return 0
	}
	return inter / union
}

// boxIoU is the IoU of two rows' boxes.
func boxIoU(a, b *motfmt.Row) float64 {
	ba, bb := boxOf(a), boxOf(b)
	return iou(&ba, &bb)
}
