package detect

import (
	"tallyd/internal/motfmt"
)

// FileDetector replays precomputed detections read from a MOTChallenge text
// file, frame by frame. It is how trackers are compared on public
// detections: every tracker sees exactly the same boxes.
type FileDetector struct {
	frames map[int][]Detection
	last   int
}

// NewFileDetector indexes rows by frame. Every detection gets the class name
// class ("object" when empty), because the files' class column is a number.
// A negative Conf means "no score" (ground truth and MOT15 files write -1)
// and becomes a score of 1; rows scoring below minScore are dropped.
func NewFileDetector(rows []motfmt.Row, class string, minScore float64) *FileDetector {
	if class == "" {
		class = "object"
	}
	d := &FileDetector{frames: make(map[int][]Detection)}
	for _, r := range rows {
		d.last = max(d.last, r.Frame)
		score := r.Conf
		if score < 0 {
			score = 1
		}
		if score < minScore {
			continue
		}
		d.frames[r.Frame] = append(d.frames[r.Frame], Detection{Box: BoxXYWH(r.X, r.Y, r.W, r.H), Score: score, Class: class})
	}
	return d
}

// Frame returns the detections of a 1-based frame number in file order, in a
// slice the caller owns; nil when the frame has none.
func (d *FileDetector) Frame(frame int) []Detection {
	dets := d.frames[frame]
	if len(dets) == 0 {
		return nil
	}
	return append([]Detection(nil), dets...)
}

// Frames is the highest frame number in the rows given to NewFileDetector,
// including rows dropped by the score threshold, so that a replay covers the
// whole sequence; 0 when there were no rows.
func (d *FileDetector) Frames() int { return d.last }
