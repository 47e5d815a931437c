package track

import (
	"fmt"
	"math"
	"slices"
	"strings"

	"tallyd/detect"
)

// ScoreMode says how ByteTrack chooses its two score thresholds.
type ScoreMode string

// Score modes, as a site file and the command line spell them.
const (
	// ScoresAuto leaves the choice to whoever knows the detector
	// (ScoreCalibration.ForDetector): fixed thresholds for a detector whose
	// scores are calibrated like the ones the defaults assume, the warm-up
	// otherwise. A tracker built with it, unresolved, uses the fixed
	// thresholds.
	ScoresAuto ScoreMode = "auto"
	// ScoresFixed uses HighScore and NewTrackScore as written.
	ScoresFixed ScoreMode = "fixed"
	// ScoresWarmup derives HighScore and NewTrackScore from the scores of
	// the first detections (see ScoreCalibration).
	ScoresWarmup ScoreMode = "warmup"
)

// ScoreModes lists the accepted modes, default first.
var ScoreModes = []ScoreMode{ScoresAuto, ScoresFixed, ScoresWarmup}

// ScoreCalibration derives ByteTrack's score thresholds from the scores a
// detector actually gives. Detectors disagree on what a score means: a
// YOLO-family model scores a clearly seen person 0.7 to 0.9 and a doubtful
// one 0.2 to 0.4, while other detectors (two-stage ones, trained with
// another loss, or filtered at another threshold) put nearly every
// detection above 0.9 and their mistakes between 0.5 and 0.9. Fixed
// thresholds tuned for the first kind then let the second kind's mistakes
// start tracks. What the two have in common is the shape: most detections
// are confident, and the doubtful ones, where the false ones are, form the
// lower tail. So in warm-up mode, over the first WarmupDetections
// detections scoring at least LowScore, HighScore becomes the HighQuantile
// quantile of their scores and NewTrackScore the NewQuantile quantile (never
// below LowScore, NewTrackScore never below HighScore); until the sample is
// full the thresholds follow the scores seen so far (the fixed values before
// the first one), then they stay. LowScore is not calibrated: it only
// removes noise, and detections below HighScore never start a track.
type ScoreCalibration struct {
	Mode             ScoreMode
	WarmupDetections int     // how many detections the thresholds are taken from
	HighQuantile     float64 // quantile of the warm-up scores that becomes HighScore, in [0, 1]
	NewQuantile      float64 // quantile that becomes NewTrackScore, in [HighQuantile, 1]
}

// Score calibration defaults: see ByteTrackConfig's defaults and the
// measurements in README ("Tracking").
const (
	DefaultWarmupDetections = 500
	DefaultHighQuantile     = 0.1
	DefaultNewQuantile      = 0.2
	// MaxWarmupDetections bounds the sample a tracker keeps (8 bytes each).
	MaxWarmupDetections = 100_000
	// MaxLostFrames bounds LostFrames: an hour at 30 frames/s.
	MaxLostFrames = 108_000
)

// DefaultScoreCalibration is auto with the default warm-up.
func DefaultScoreCalibration() ScoreCalibration {
	return ScoreCalibration{Mode: ScoresAuto, WarmupDetections: DefaultWarmupDetections,
		HighQuantile: DefaultHighQuantile, NewQuantile: DefaultNewQuantile}
}

// ForDetector resolves auto: fixed when the detector's scores are known to
// be calibrated like the fixed thresholds assume (calibrated), warm-up
// otherwise. Other modes are returned as they are.
func (c ScoreCalibration) ForDetector(calibrated bool) ScoreCalibration {
	if c.Mode == ScoresAuto {
		c.Mode = ScoresWarmup
		if calibrated {
			c.Mode = ScoresFixed
		}
	}
	return c
}

func (c ScoreCalibration) problems(prefix string) []error {
	var errs []error
	fail := func(field, format string, args ...any) {
		errs = append(errs, &ConfigError{Field: prefix + field, Msg: fmt.Sprintf(format, args...)})
	}
	if !slices.Contains(ScoreModes, c.Mode) {
		names := make([]string, len(ScoreModes))
		for i, m := range ScoreModes {
			names[i] = string(m)
		}
		fail("mode", "want %s (found %q)", strings.Join(names, ", "), string(c.Mode))
	}
	if c.WarmupDetections < 1 || c.WarmupDetections > MaxWarmupDetections {
		fail("warmup_detections", "must be within [1, %d] (found %d)", MaxWarmupDetections, c.WarmupDetections)
	}
	hiOK := c.HighQuantile >= 0 && c.HighQuantile <= 1
	if !hiOK {
		fail("high_quantile", "must be within [0, 1] (found %v)", c.HighQuantile)
	}
	switch {
	case !(c.NewQuantile >= 0 && c.NewQuantile <= 1):
		fail("new_quantile", "must be within [0, 1] (found %v)", c.NewQuantile)
	case hiOK && c.NewQuantile < c.HighQuantile:
		fail("new_quantile", "must not be below high_quantile %v (found %v)", c.HighQuantile, c.NewQuantile)
	}
	return errs
}

// quantile is the q-quantile of sorted values, interpolated linearly
// between the two nearest ranks (the common default, "type 7").
func quantile(sorted []float64, q float64) float64 {
	if len(sorted) == 0 {
		return math.NaN()
	}
	pos := q * float64(len(sorted)-1)
	i := int(pos)
	if i >= len(sorted)-1 {
		return sorted[len(sorted)-1]
	}
	f := pos - float64(i)
	return sorted[i] + f*(sorted[i+1]-sorted[i])
}

// thresholds are the score thresholds a ByteTrack uses now.
type thresholds struct {
	high, newTrack float64
	sample         []float64 // warm-up scores, sorted; nil once frozen or when fixed
	warming        bool
}

func newThresholds(c ByteTrackConfig) thresholds {
	return thresholds{high: c.HighScore, newTrack: c.NewTrackScore, warming: c.Scores.Mode == ScoresWarmup}
}

// observe adds a frame's detections to the warm-up sample and recomputes
// the thresholds.
func (th *thresholds) observe(c *ByteTrackConfig, dets []detect.Detection) {
	if !th.warming {
		return
	}
	n := len(th.sample)
	for i := range dets {
		if s := dets[i].Score; s >= c.LowScore && len(th.sample) < c.Scores.WarmupDetections {
			th.sample = append(th.sample, s)
		}
	}
	if len(th.sample) == n {
		return
	}
	slices.Sort(th.sample)
	th.high = max(c.LowScore, quantile(th.sample, c.Scores.HighQuantile))
	th.newTrack = max(th.high, quantile(th.sample, c.Scores.NewQuantile))
	if len(th.sample) >= c.Scores.WarmupDetections {
		th.warming, th.sample = false, nil
	}
}
