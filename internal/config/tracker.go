package config

import "tallyd/track"

// fillTrackerDefaults resolves what depends on the detector: score
// thresholds calibrated over a warm-up for detections read from files
// (their detector's score scale is unknown), fixed for the onnx and motion
// detectors (YOLO-family scores, for which the fixed defaults are made, and
// the motion detector's constant 1).
func (c *Config) fillTrackerDefaults() {
	s := &c.Tracker.ByteTrack.Scores
	if s.Mode == track.ScoresAuto {
		s.Mode = track.ScoresFixed
		if c.Detector.Kind == DetectorFile {
			s.Mode = track.ScoresWarmup
		}
	}
}
