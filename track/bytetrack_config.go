package track

import (
	"errors"
	"fmt"
	"time"
)

// ByteTrackConfig tunes the ByteTrack tracker. Start from
// DefaultByteTrackConfig; the zero value is not valid.
type ByteTrackConfig struct {
	// HighScore splits detections: those scoring at least HighScore are
	// "high" and associated first, with every track.
	HighScore float64
	// LowScore is the least score a detection needs to be used at all;
	// detections in [LowScore, HighScore) only extend tracks.
	LowScore float64
	// NewTrackScore is the least score of an unmatched high detection for it
	// to start a tentative track; at least HighScore.
	NewTrackScore float64
	// MatchIoU is the overlap a high detection must exceed with a track's
	// predicted box to be linked to it, in [0, 1).
	MatchIoU float64
	// LowMatchIoU is the overlap a low detection must exceed with the
	// predicted box of a track left unmatched by the high ones, in [0, 1).
	LowMatchIoU float64
	// BirthHits is how many consecutive frames, counted from a track's first
	// detection, it must be matched in before it is confirmed and gets an ID.
	BirthHits int
	// LostTTL is how long a confirmed track is kept, predicted, after its last
	// matched detection: it can be found again under the same ID until then,
	// and ends on the first frame more than LostTTL after that detection.
	// 0 ends it on its first miss.
	LostTTL time.Duration
	// LostFrames bounds the same wait in frames of the source: a lost track
	// also ends once more than LostFrames frames have passed since its last
	// matched detection, whichever of the two limits is stricter at the
	// source's frame rate. Frames are counted on the source clock (the time
	// since the last match over the source's frame interval, the median of
	// recent steps between updates), so dropped frames still count.
	LostFrames int
	// Scores says how HighScore and NewTrackScore are chosen: as written
	// (ScoresFixed) or from the scores seen over a warm-up (ScoresWarmup).
	Scores ScoreCalibration
	// PerClass links detections only to tracks of the same class.
	PerClass bool
	// Motion tunes the Kalman filter that predicts where each track is.
	Motion MotionConfig
}

// Default ByteTrack settings. The score thresholds and IoU gates are those of
// the paper's reference code (yolox/tracker/byte_tracker.py: track_thresh
// 0.5, low scores above 0.1, new tracks from track_thresh + 0.1, IoU
// distance gates 0.8 for the first association and 0.5 for the second):
// they suit a detector whose scores are calibrated like YOLOX's, and
// ScoresWarmup replaces the two score thresholds for any other. A track is
// confirmed on its second consecutive match, as there. The gate for low
// detections is the stricter one: they are less reliable, and a looser gate
// (IoU 0.1 or 0.2) switched more identities in the fault study
// (track/eval/faults_test.go).
//
// A lost track waits at most DefaultLostTTL and DefaultLostFrames, whichever
// is stricter: the paper's track_buffer is 30 frames at 30 frames/s, one
// second; at low frame rates a second is only a few frames but the object
// moves farther per frame, so the prediction drifts off sooner in frames
// than in time, while at high frame rates a second bounds how long a
// stopped-looking prediction can sit in someone else's path. The values
// are those measured best across 7 to 30 frames/s (README, "Tracking").
const (
	DefaultHighScore          = 0.5
	DefaultLowScore           = 0.1
	DefaultNewTrackScore      = 0.6
	DefaultMatchIoU           = 0.2
	DefaultLowMatchIoU        = 0.5
	DefaultByteTrackBirthHits = 2
	DefaultLostTTL            = time.Second
	DefaultLostFrames         = 15
)

// DefaultByteTrackConfig returns the default ByteTrack settings.
func DefaultByteTrackConfig() ByteTrackConfig {
	return ByteTrackConfig{
		HighScore:     DefaultHighScore,
		LowScore:      DefaultLowScore,
		NewTrackScore: DefaultNewTrackScore,
		MatchIoU:      DefaultMatchIoU,
		LowMatchIoU:   DefaultLowMatchIoU,
		BirthHits:     DefaultByteTrackBirthHits,
		LostTTL:       DefaultLostTTL,
		LostFrames:    DefaultLostFrames,
		Scores:        DefaultScoreCalibration(),
		Motion:        DefaultMotionConfig(),
	}
}

// Validate reports every invalid setting at once, joined with errors.Join;
// each one is a *ConfigError whose Field is the setting's key in a site file
// (motion settings under "motion.").
func (c ByteTrackConfig) Validate() error { return errors.Join(c.problems("")...) }

// problems returns every invalid setting as a *ConfigError whose field is
// prefix + the setting's key.
func (c ByteTrackConfig) problems(prefix string) []error {
	var errs []error
	fail := func(field, format string, args ...any) {
		errs = append(errs, &ConfigError{Field: prefix + field, Msg: fmt.Sprintf(format, args...)})
	}
	lowOK := c.LowScore >= 0 && c.LowScore <= 1 // false for NaN
	if !lowOK {
		fail("low_score", "must be within [0, 1] (found %v)", c.LowScore)
	}
	highOK := c.HighScore > 0 && c.HighScore <= 1
	switch {
	case !highOK:
		fail("high_score", "must be within (0, 1] (found %v)", c.HighScore)
	case lowOK && c.HighScore < c.LowScore:
		fail("high_score", "must not be below low_score %v (found %v)", c.LowScore, c.HighScore)
	}
	switch {
	case !(c.NewTrackScore >= 0 && c.NewTrackScore <= 1):
		fail("new_track_score", "must be within [0, 1] (found %v)", c.NewTrackScore)
	case highOK && c.NewTrackScore < c.HighScore:
		fail("new_track_score", "must not be below high_score %v (found %v)", c.HighScore, c.NewTrackScore)
	}
	if !(c.MatchIoU >= 0 && c.MatchIoU < 1) {
		fail("match_iou", "must be within [0, 1) (found %v)", c.MatchIoU)
	}
	if !(c.LowMatchIoU >= 0 && c.LowMatchIoU < 1) {
		fail("low_match_iou", "must be within [0, 1) (found %v)", c.LowMatchIoU)
	}
	if c.BirthHits < 1 {
		fail("birth_hits", "must be at least 1 (found %d)", c.BirthHits)
	}
	if c.LostTTL < 0 {
		fail("lost_ttl", "must not be negative (found %v)", c.LostTTL)
	}
	if c.LostFrames < 0 || c.LostFrames > MaxLostFrames {
		fail("lost_frames", "must be within [0, %d] (found %d)", MaxLostFrames, c.LostFrames)
	}
	errs = append(errs, c.Scores.problems(prefix+"scores.")...)
	return append(errs, c.Motion.problems(prefix+"motion.")...)
}
