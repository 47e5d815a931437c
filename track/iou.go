package track

import (
	"cmp"
	"errors"
	"fmt"
	"slices"
	"time"

	"tallyd/detect"
)

// IoUConfig tunes the IoU tracker. Start from DefaultIoUConfig; the zero
// value is not valid.
type IoUConfig struct {
	// MinIoU is the least overlap between a track's last box and a detection
	// for the two to be linked, in (0, 1].
	MinIoU float64
	// BirthHits is how many consecutive frames, counted from a track's first
	// detection, it must be matched in before it is confirmed and gets an ID.
	BirthHits int
	// MaxMisses is how many consecutive frames a confirmed track may go
	// unmatched; it ends on the next miss. 0 ends it on its first miss.
	MaxMisses int
	// PerClass links detections only to tracks of the same class.
	PerClass bool
}

// Default IoU tracker settings, tuned for detections at 5-30 frames/s.
const (
	DefaultMinIoU    = 0.3
	DefaultBirthHits = 3
	DefaultMaxMisses = 5
)

// DefaultIoUConfig returns the default IoU tracker settings.
func DefaultIoUConfig() IoUConfig {
	return IoUConfig{MinIoU: DefaultMinIoU, BirthHits: DefaultBirthHits, MaxMisses: DefaultMaxMisses}
}

// Validate reports every invalid setting at once, joined with errors.Join;
// each one is a *ConfigError.
func (c IoUConfig) Validate() error { return errors.Join(c.problems("")...) }

// problems returns every invalid setting as a *ConfigError whose field is
// prefix + the setting's key.
func (c IoUConfig) problems(prefix string) []error {
	var errs []error
	fail := func(field, format string, args ...any) {
		errs = append(errs, &ConfigError{Field: prefix + field, Msg: fmt.Sprintf(format, args...)})
	}
	if !(c.MinIoU > 0 && c.MinIoU <= 1) { // also catches NaN
		fail("min_iou", "must be within (0, 1] (found %v)", c.MinIoU)
	}
	if c.BirthHits < 1 {
		fail("birth_hits", "must be at least 1 (found %d)", c.BirthHits)
	}
	if c.MaxMisses < 0 {
		fail("max_misses", "must not be negative (found %d)", c.MaxMisses)
	}
	return errs
}

// IoU is the baseline tracker: it links each detection to the track whose
// last box overlaps it most, with no motion model. The algorithm is described
// in the package documentation. An IoU serves one source and is not safe for
// concurrent use; the worker that owns the source calls Update once a frame.
type IoU struct {
	cfg       IoUConfig
	confirmed []*iouTrack // ordered by ID
	tentative []*iouTrack // ordered by birth
	lastID    int64

	// Scratch space reused across updates.
	order []*iouTrack
	pairs []iouPair
	match []int // per track in order: detection index or -1
	used  []bool
}

type iouTrack struct {
	Track
	votes map[string]int // matched frames per class; nil until a second class is seen
}

type iouPair struct {
	iou        float64
	track, det int
}

// NewIoU returns an empty tracker. It panics if cfg.Validate fails: settings
// are checked when the site file is loaded, so a bad one here is a bug.
func NewIoU(cfg IoUConfig) *IoU {
	if err := cfg.Validate(); err != nil {
		panic("track: NewIoU: " + err.Error())
	}
	return &IoU{cfg: cfg}
}

// Update consumes the detections of one frame taken at source time ts and
// returns the confirmed tracks matched in it and those that ended with it.
// The returned slices belong to the caller.
func (t *IoU) Update(ts time.Duration, dets []detect.Detection) Result {
	// Matching order: confirmed tracks by ID, then tentative ones by birth.
	nc := len(t.confirmed)
	t.order = append(append(t.order[:0], t.confirmed...), t.tentative...)
	t.associate(dets)

	var res Result
	if len(dets) > 0 {
		res.Active = make([]Track, 0, len(dets)) // every active track took one detection
	}
	kept := t.confirmed[:0]
	for i, tr := range t.order[:nc] {
		if di := t.match[i]; di >= 0 {
			t.hit(tr, ts, dets[di])
			res.Active = append(res.Active, tr.Track)
			kept = append(kept, tr)
			continue
		}
		tr.Misses++
		if tr.Misses > t.cfg.MaxMisses {
			res.Ended = append(res.Ended, tr.Track)
			continue
		}
		kept = append(kept, tr)
	}
	clear(t.confirmed[len(kept):])
	t.confirmed = kept

	// Tentative tracks must be matched in every frame until confirmed.
	stillTentative := t.tentative[:0]
	for i, tr := range t.order[nc:] {
		di := t.match[nc+i]
		if di < 0 {
			continue
		}
		t.hit(tr, ts, dets[di])
		if t.tryConfirm(tr) {
			res.Active = append(res.Active, tr.Track)
			continue
		}
		stillTentative = append(stillTentative, tr)
	}
	clear(t.tentative[len(stillTentative):])
	t.tentative = stillTentative

	for di, d := range dets {
		if t.used[di] {
			continue
		}
		tr := &iouTrack{Track: Track{Box: d.Box, Class: d.Class, Score: d.Score, Hits: 1, FirstSeen: ts, LastSeen: ts}}
		if t.tryConfirm(tr) {
			res.Active = append(res.Active, tr.Track)
			continue
		}
		t.tentative = append(t.tentative, tr)
	}
	clear(t.order) // drop references to removed tracks
	return res
}

// Flush ends every track at the end of a stream and returns the confirmed
// ones, ordered by ID, as they were after the last Update (including those
// currently missed). The tracker is empty afterwards; IDs keep counting.
func (t *IoU) Flush() []Track {
	var out []Track
	for _, tr := range t.confirmed {
		out = append(out, tr.Track)
	}
	clear(t.confirmed)
	clear(t.tentative)
	t.confirmed, t.tentative = t.confirmed[:0], t.tentative[:0]
	return out
}

// associate fills t.match and t.used: greedy matching of t.order against
// dets by descending IoU.
func (t *IoU) associate(dets []detect.Detection) {
	t.pairs = t.pairs[:0]
	for ti, tr := range t.order {
		for di := range dets {
			d := &dets[di]
			if t.cfg.PerClass && d.Class != tr.Class {
				continue
			}
			// Boxes that do not overlap have IoU 0, below any valid MinIoU;
			// this cheap test spares most IoU computations in busy scenes.
			if tr.Box.X2 <= d.Box.X1 || d.Box.X2 <= tr.Box.X1 || tr.Box.Y2 <= d.Box.Y1 || d.Box.Y2 <= tr.Box.Y1 {
				continue
			}
			if iou := tr.Box.IoU(d.Box); iou >= t.cfg.MinIoU { // false for NaN
				t.pairs = append(t.pairs, iouPair{iou: iou, track: ti, det: di})
			}
		}
	}
	slices.SortFunc(t.pairs, func(a, b iouPair) int {
		if c := cmp.Compare(b.iou, a.iou); c != 0 {
			return c
		}
		if a.track != b.track {
			return a.track - b.track
		}
		return a.det - b.det
	})

	t.match = slices.Grow(t.match[:0], len(t.order))[:len(t.order)]
	for i := range t.match {
		t.match[i] = -1
	}
	t.used = slices.Grow(t.used[:0], len(dets))[:len(dets)]
	clear(t.used)
	left := min(len(t.order), len(dets))
	for _, p := range t.pairs {
		if left == 0 {
			break
		}
		if t.match[p.track] >= 0 || t.used[p.det] {
			continue
		}
		t.match[p.track] = p.det
		t.used[p.det] = true
		left--
	}
}

// hit records a matched detection.
func (t *IoU) hit(tr *iouTrack, ts time.Duration, d detect.Detection) {
	tr.Box, tr.Score, tr.LastSeen = d.Box, d.Score, ts
	tr.Misses = 0
	voteClass(&tr.Track, &tr.votes, d.Class)
	tr.Hits++
}

// tryConfirm gives a tentative track its ID once it has enough hits and
// moves it to the confirmed list; it reports whether it did.
func (t *IoU) tryConfirm(tr *iouTrack) bool {
	if tr.Hits < t.cfg.BirthHits {
		return false
	}
	t.lastID++
	tr.ID, tr.Confirmed = t.lastID, true
	t.confirmed = append(t.confirmed, tr)
	return true
}
