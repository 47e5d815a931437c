package track

import (
	"math"
	"slices"
	"time"

	"tallyd/detect"
)

// ByteTrack is the tracker with a motion model: it predicts every track with
// a Kalman filter (see MotionConfig) and links detections to the predicted
// boxes in two stages, so that detections with a low score, often objects
// partly hidden, keep their tracks alive without starting false ones. It
// follows ByteTrack (Zhang, Sun, Jiang, Yu, Weng, Yuan, Luo, Liu, Wang,
// "ByteTrack: Multi-Object Tracking by Associating Every Detection Box",
// ECCV 2022). Each Update does the following.
//
//  1. Prediction. Every track's filter is moved to the frame's time: the
//     step is the real time since the track's last update, so dropped frames
//     and uneven frame rates only make a longer step. A timestamp that does
//     not advance predicts nothing.
//  2. First association. Detections scoring at least HighScore are linked
//     with all tracks (confirmed, lost and tentative, as in the paper's
//     algorithm) by optimal assignment on the cost 1 − IoU between a track's
//     predicted box and the detection; pairs whose IoU is not above MatchIoU
//     are never linked, and the assignment maximises the total of IoU −
//     MatchIoU over linked pairs (the cost_limit of the LAPJV solver used by
//     SORT and ByteTrack, where a track or detection left unmatched costs
//     half the limit). With PerClass, only pairs of the same class.
//  3. Second association. Detections scoring in [LowScore, HighScore) are
//     linked the same way with the confirmed tracks, lost or not, that are
//     still unmatched; the IoU must be above LowMatchIoU. Low detections left
//     over are dropped: they never start a track.
//  4. A matched track's filter is corrected with the detection, and it takes
//     the detection's box, score and time; Hits grows by one and Misses goes
//     back to 0. Without PerClass a track's class is the one it was matched
//     with most often (a tie keeps the current class).
//  5. Tentative tracks must be matched in every frame until confirmed: a
//     single miss removes them silently. After BirthHits consecutive matched
//     frames (counting the first) a track is confirmed and takes the next ID.
//  6. A confirmed track left unmatched is lost: Misses grows, its filter
//     keeps predicting it (its size no longer changes) and it can be found
//     again in step 2 or 3 under the same ID. Once the frame's time is more
//     than LostTTL after its last matched detection, or more than
//     LostFrames frames of the source have passed since (the frame interval
//     is the median step between recent updates), it is removed and
//     reported once in Result.Ended with its last matched box and time;
//     until then it is listed in Result.Lost, its prediction in Estimate.
//  7. Birth. Each high detection left unmatched that scores at least
//     NewTrackScore starts a tentative track with one hit (confirmed at once
//     with BirthHits 1). Only high detections can: a detection that only
//     extends tracks (step 3) never starts one.
//
// HighScore and NewTrackScore are those of the configuration, or, with
// ScoresWarmup, quantiles of the scores seen so far (see ScoreCalibration);
// Thresholds reports the ones in use. A track confirmed after more than one
// match lists its earlier boxes in Result.Born.
//
// IDs are taken on confirmation, as with IoU: dense (1, 2, 3, …) in
// confirmation order (tracks confirmed in the same frame in birth order),
// never reused. Result.Active holds the confirmed tracks matched in this
// frame, ordered by ID, each with the matched detection's box in Box (what
// the detector saw, what the rules test) and the filter's corrected box in
// Estimate (what a tracks file holds by default, see Output); lost tracks are in Result.Lost, never in
// Active. The result depends only on the input.
//
// The tracker differs from the paper's reference code in small ways:
// tentative tracks take part in the first association rather than in a
// third one of their own; lost tracks take part in the second; IoU is not
// weighted by the detection score; and a track found again is not checked
// for a duplicate among the others.
//
// A ByteTrack serves one source and is not safe for concurrent use; the
// worker that owns the source calls Update once a frame with non-decreasing
// timestamps.
type ByteTrack struct {
	cfg       ByteTrackConfig
	th        thresholds   // HighScore and NewTrackScore as used now
	steps     frameSteps   // the source's frame interval
	confirmed []*byteTrack // ordered by ID, lost ones included
	tentative []*byteTrack // ordered by birth
	lastID    int64

	// Scratch space reused across updates.
	order     []*byteTrack // confirmed then tentative
	pred      []detect.Box // per track in order: predicted box
	high, low []int        // detection indices by score band
	rows      []int        // second association: indices into order
	match     []int        // per track in order: detection index or -1
	used      []bool       // per detection: matched
	pairs     []Pair
	rowTo     []int32
	asg       Assigner
}

type byteTrack struct {
	Track
	early []detect.Box // while tentative: detection and filtered box of each match, in pairs
	kf    kalman
	at    time.Duration  // the time the filter state refers to
	votes map[string]int // matched frames per class; nil until a second class is seen
}

// NewByteTrack returns an empty tracker. It panics if cfg.Validate fails:
// settings are checked when the site file is loaded, so a bad one here is a
// bug.
func NewByteTrack(cfg ByteTrackConfig) *ByteTrack {
	if err := cfg.Validate(); err != nil {
		panic("track: NewByteTrack: " + err.Error())
	}
	return &ByteTrack{cfg: cfg, th: newThresholds(cfg)}
}

// Thresholds returns the high and new-track score thresholds in use: the
// configured ones, or those the warm-up derived so far.
func (t *ByteTrack) Thresholds() (high, newTrack float64) { return t.th.high, t.th.newTrack }

// Update consumes the detections of one frame taken at source time ts and
// returns the confirmed tracks matched in it and those that ended with it.
// The returned slices belong to the caller.
func (t *ByteTrack) Update(ts time.Duration, dets []detect.Detection) Result {
	nc := len(t.confirmed)
	t.steps.observe(ts)
	if t.th.warming {
		t.th.observe(&t.cfg, dets)
	}
	t.order = append(append(t.order[:0], t.confirmed...), t.tentative...)
	t.predict(ts)
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
		tr.Estimate = t.pred[i]
		if tr.Misses == 1 {
			tr.kf.stopSize()
		}
		if t.expired(tr, ts) {
			res.Ended = append(res.Ended, tr.Track)
			continue
		}
		res.Lost = append(res.Lost, tr.Track)
		kept = append(kept, tr)
	}
	clear(t.confirmed[len(kept):])
	t.confirmed = kept

	stillTentative := t.tentative[:0]
	for i, tr := range t.order[nc:] {
		di := t.match[nc+i]
		if di < 0 {
			continue // a miss before confirmation ends a tentative track
		}
		before := tr.early
		t.hit(tr, ts, dets[di])
		if t.tryConfirm(tr) {
			res.Active = append(res.Active, tr.Track)
			res.Born = append(res.Born, birth(tr.ID, before))
			tr.early = nil
			continue
		}
		tr.early = append(tr.early, tr.Box, tr.Estimate)
		stillTentative = append(stillTentative, tr)
	}
	clear(t.tentative[len(stillTentative):])
	t.tentative = stillTentative

	for _, di := range t.high {
		d := &dets[di]
		if t.used[di] || !(d.Score >= t.th.newTrack) {
			continue
		}
		tr := &byteTrack{
			Track: Track{Box: d.Box, Class: d.Class, Score: d.Score, Hits: 1, FirstSeen: ts, LastSeen: ts},
			kf:    newKalman(d.Box, t.cfg.Motion),
			at:    ts,
		}
		tr.Estimate = tr.kf.box()
		if t.tryConfirm(tr) {
			res.Active = append(res.Active, tr.Track)
			continue
		}
		tr.early = make([]detect.Box, 0, 2*(t.cfg.BirthHits-1))
		tr.early = append(tr.early, tr.Box, tr.Estimate)
		t.tentative = append(t.tentative, tr)
	}
	clear(t.order) // drop references to removed tracks
	return res
}

// Flush ends every track at the end of a stream and returns the confirmed
// ones, ordered by ID, as they were after the last Update (including lost
// ones). The tracker is empty afterwards; IDs keep counting.
func (t *ByteTrack) Flush() []Track {
	var out []Track
	for _, tr := range t.confirmed {
		out = append(out, tr.Track)
	}
	clear(t.confirmed)
	clear(t.tentative)
	t.confirmed, t.tentative = t.confirmed[:0], t.tentative[:0]
	return out
}

// expired reports whether the lost track tr has waited too long at time
// ts: more than LostTTL, or more than LostFrames frames of the source.
func (t *ByteTrack) expired(tr *byteTrack, ts time.Duration) bool {
	since := ts - tr.LastSeen
	if since > t.cfg.LostTTL {
		return true
	}
	frames := tr.Misses
	if step := t.steps.interval(); step > 0 {
		frames = max(frames, int(math.Round(float64(since)/float64(step))))
	}
	return frames > t.cfg.LostFrames
}

// predict moves every track's filter to time ts and fills t.pred.
func (t *ByteTrack) predict(ts time.Duration) {
	t.pred = t.pred[:0]
	for _, tr := range t.order {
		if ts > tr.at {
			tr.kf.predict((ts - tr.at).Seconds(), t.cfg.Motion)
			tr.at = ts
		}
		t.pred = append(t.pred, tr.kf.box())
	}
}

// associate fills t.high, t.low, t.match and t.used: the two association
// stages of t.order (predicted in t.pred) against dets.
func (t *ByteTrack) associate(dets []detect.Detection) {
	t.high, t.low = t.high[:0], t.low[:0]
	for i := range dets {
		switch s := dets[i].Score; {
		case s >= t.th.high:
			t.high = append(t.high, i)
		case s >= t.cfg.LowScore:
			t.low = append(t.low, i)
		}
	}
	t.match = t.match[:0]
	for range t.order {
		t.match = append(t.match, -1)
	}
	t.used = slices.Grow(t.used[:0], len(dets))[:len(dets)]
	clear(t.used)

	t.rows = t.rows[:0]
	for i := range t.order {
		t.rows = append(t.rows, i)
	}
	t.link(dets, t.rows, t.high, t.cfg.MatchIoU)

	t.rows = t.rows[:0]
	for i := range t.confirmed {
		if t.match[i] < 0 {
			t.rows = append(t.rows, i)
		}
	}
	t.link(dets, t.rows, t.low, t.cfg.LowMatchIoU)
}

// link assigns the tracks t.order[rows] to the detections dets[cols] on
// their IoU, only above minIoU, and records the pairs in t.match and t.used.
func (t *ByteTrack) link(dets []detect.Detection, rows, cols []int, minIoU float64) {
	n, m := len(rows), len(cols)
	if n == 0 || m == 0 {
		return
	}
	t.pairs = t.pairs[:0]
	for r, ti := range rows {
		p := t.pred[ti]
		tr := t.order[ti]
		// A lost track is also compared at its last matched box: the
		// prediction runs on along the old heading while the object is
		// unseen, so someone who turned or stopped meanwhile is still found
		// where they were last seen.
		last, lost := tr.Box, tr.Misses > 0
		for c, di := range cols {
			d := &dets[di]
			if t.cfg.PerClass && d.Class != tr.Class {
				continue
			}
			iou := overlapIoU(p, d.Box)
			if lost {
				iou = max(iou, overlapIoU(last, d.Box))
			}
			if iou > minIoU { // false for NaN
				// What linking the pair saves below the cost limit 1 − minIoU.
				t.pairs = append(t.pairs, Pair{Row: int32(r), Col: int32(c), Weight: iou - minIoU})
			}
		}
	}
	t.rowTo = slices.Grow(t.rowTo[:0], n)[:n]
	t.asg.Assign(n, m, t.pairs, t.rowTo)
	for r, c := range t.rowTo {
		if c >= 0 {
			ti, di := rows[r], cols[c]
			t.match[ti] = di
			t.used[di] = true
		}
	}
}

// birth splits a tentative track's early pairs of boxes into a Birth.
func birth(id int64, early []detect.Box) Birth {
	b := Birth{ID: id, Boxes: make([]detect.Box, 0, len(early)/2), Estimates: make([]detect.Box, 0, len(early)/2)}
	for i := 0; i+1 < len(early); i += 2 {
		b.Boxes = append(b.Boxes, early[i])
		b.Estimates = append(b.Estimates, early[i+1])
	}
	return b
}

// hit records a matched detection.
func (t *ByteTrack) hit(tr *byteTrack, ts time.Duration, d detect.Detection) {
	tr.kf.update(d.Box, t.cfg.Motion)
	tr.Estimate = tr.kf.box()
	tr.Box, tr.Score, tr.LastSeen = d.Box, d.Score, ts
	tr.Misses = 0
	voteClass(&tr.Track, &tr.votes, d.Class)
	tr.Hits++
}

// tryConfirm gives a tentative track its ID once it has enough hits and
// moves it to the confirmed list; it reports whether it did.
func (t *ByteTrack) tryConfirm(tr *byteTrack) bool {
	if tr.Hits < t.cfg.BirthHits {
		return false
	}
	t.lastID++
	tr.ID, tr.Confirmed = t.lastID, true
	t.confirmed = append(t.confirmed, tr)
	return true
}

// overlapIoU is a.IoU(b), skipping the division for boxes that do not
// overlap (most pairs in a busy scene).
func overlapIoU(a, b detect.Box) float64 {
	if a.X2 <= b.X1 || b.X2 <= a.X1 || a.Y2 <= b.Y1 || b.Y2 <= a.Y1 {
		return 0
	}
	return a.IoU(b)
}
