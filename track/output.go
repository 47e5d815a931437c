package track

import (
	"cmp"
	"fmt"
	"math"
	"slices"

	"tallyd/detect"
	"tallyd/internal/motfmt"
)

// BoxChoice says which box of a matched track a tracks file holds.
type BoxChoice string

// Box choices, as a site file and the command line spell them.
const (
	// BoxFiltered is the motion model's corrected box (Track.Estimate):
	// the detection smoothed by the track's history, what SORT writes. A
	// tracker without a motion model has none and gives the detection.
	BoxFiltered BoxChoice = "filtered"
	// BoxDetection is the matched detection's box as the detector gave it.
	BoxDetection BoxChoice = "detection"
)

// BoxChoices lists the accepted choices, default first.
var BoxChoices = []BoxChoice{BoxFiltered, BoxDetection}

// OutputConfig says what a tracks file holds.
type OutputConfig struct {
	// Box is the box written for a track matched in a frame.
	Box BoxChoice
	// Interpolate fills the frames in which a track was lost with boxes
	// interpolated linearly between the last box written before the gap and
	// the first after it. They are written when the track is matched again,
	// at the frame that ends the gap, never before and never for a track
	// that ends without coming back: a tracks file only holds where an
	// object was seen or was certainly between two sightings. Without it
	// lost tracks write nothing.
	Interpolate bool
	// Births writes, when a track is confirmed, its boxes of the frames in
	// which it was matched before (Result.Born): the same detections that
	// confirmed it, written once they are known to belong to a real track.
	// At most maxBirthFrames frames are written back.
	Births bool
	// Width and Height are the frame size in pixels: written boxes are
	// clipped inside it. 0 clips at the left and top edges only.
	Width, Height float64
}

// DefaultOutputConfig writes the filtered box of matched tracks, their
// frames before confirmation once confirmed, and nothing for lost tracks.
func DefaultOutputConfig() OutputConfig { return OutputConfig{Box: BoxFiltered, Births: true} }

// Validate reports an unknown Box or a negative frame size.
func (c OutputConfig) Validate() error {
	if !slices.Contains(BoxChoices, c.Box) {
		return &ConfigError{Field: "box", Msg: fmt.Sprintf("want filtered or detection (found %q)", string(c.Box))}
	}
	if !(c.Width >= 0 && c.Height >= 0) {
		return &ConfigError{Field: "frame_size", Msg: fmt.Sprintf("must not be negative (found %vx%v)", c.Width, c.Height)}
	}
	return nil
}

// Output turns each frame's Result into the rows of a tracks file
// (MOTChallenge text format), as its OutputConfig says. One Output serves
// one tracker; frames must be given in increasing order.
type Output struct {
	cfg    OutputConfig
	last   map[int64]written // per live track: the last row written
	recent []int             // the frames of the last calls, oldest first
}

// maxBirthFrames bounds how far back Births writes.
const maxBirthFrames = 64

type written struct {
	frame int
	box   detect.Box
}

// NewOutput returns an Output for cfg; it panics if cfg.Validate fails.
func NewOutput(cfg OutputConfig) *Output {
	if err := cfg.Validate(); err != nil {
		panic("track: NewOutput: " + err.Error())
	}
	return &Output{cfg: cfg, last: map[int64]written{}}
}

// Rows returns the rows for one 1-based frame: every matched track, and
// with Interpolate or Births the boxes of earlier frames a track just came
// back from or was confirmed after, ordered by frame and then by ID. Call
// it once for each Update, frames in increasing order.
func (o *Output) Rows(frame int, res Result) []motfmt.Row {
	rows := make([]motfmt.Row, 0, len(res.Active))
	var gaps []motfmt.Row
	if o.cfg.Births {
		for _, b := range res.Born {
			n := min(len(b.Boxes), len(o.recent))
			for i := len(b.Boxes) - n; i < len(b.Boxes); i++ {
				f := o.recent[len(o.recent)-len(b.Boxes)+i]
				bx := o.box(Track{Box: b.Boxes[i], Estimate: b.Estimates[i]})
				gaps = append(gaps, row(f, b.ID, bx))
				if o.cfg.Interpolate {
					o.last[b.ID] = written{f, bx}
				}
			}
		}
		if len(o.recent) == maxBirthFrames {
			o.recent = append(o.recent[:0], o.recent[1:]...)
		}
		o.recent = append(o.recent, frame)
	}
	for _, t := range res.Active {
		b := o.box(t)
		if o.cfg.Interpolate {
			if w, ok := o.last[t.ID]; ok && frame-w.frame > 1 {
				n := frame - w.frame
				for f := w.frame + 1; f < frame; f++ {
					a := float64(f-w.frame) / float64(n)
					gaps = append(gaps, row(f, t.ID, lerp(w.box, b, a)))
				}
			}
			o.last[t.ID] = written{frame, b}
		}
		rows = append(rows, row(frame, t.ID, b))
	}
	for _, t := range res.Ended {
		delete(o.last, t.ID)
	}
	if len(gaps) > 0 {
		slices.SortStableFunc(gaps, func(a, b motfmt.Row) int {
			return cmp.Or(cmp.Compare(a.Frame, b.Frame), cmp.Compare(a.ID, b.ID))
		})
		rows = append(gaps, rows...)
	}
	return rows
}

// box is the box written for a matched track, clipped inside the frame.
func (o *Output) box(t Track) detect.Box {
	b := t.Box
	if o.cfg.Box == BoxFiltered && t.Estimate.Area() > 0 {
		b = t.Estimate
	}
	w, h := o.cfg.Width, o.cfg.Height
	if w <= 0 {
		w = math.Inf(1)
	}
	if h <= 0 {
		h = math.Inf(1)
	}
	return detect.Box{X1: clamp(b.X1, w), Y1: clamp(b.Y1, h), X2: clamp(b.X2, w), Y2: clamp(b.Y2, h)}
}

func clamp(v, hi float64) float64 { return min(max(v, 0), hi) }

func lerp(a, b detect.Box, t float64) detect.Box {
	l := func(x, y float64) float64 { return x + t*(y-x) }
	return detect.Box{X1: l(a.X1, b.X1), Y1: l(a.Y1, b.Y1), X2: l(a.X2, b.X2), Y2: l(a.Y2, b.Y2)}
}

func row(frame int, id int64, b detect.Box) motfmt.Row {
	return motfmt.Row{Frame: frame, ID: id, X: b.X1, Y: b.Y1, W: b.W(), H: b.H(), Conf: 1, Class: -1, Visibility: -1}
}
