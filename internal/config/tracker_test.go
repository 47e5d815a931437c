package config

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"tallyd/track"
)

// TestTrackerScoresByDetector: scores mode auto becomes fixed for the
// motion and onnx detectors and warmup for detections files; a mode
// written out is kept; the other bytetrack defaults are the tracker's own.
func TestTrackerScoresByDetector(t *testing.T) {
	dir := t.TempDir()
	if err := os.WriteFile(filepath.Join(dir, "det.txt"), []byte("1,-1,1,2,3,4,0.9,-1,-1,-1\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	file := "detector:\n  kind: file\n  file:\n    paths: {walkway: det.txt}\n"
	for _, tt := range []struct {
		name, extra string
		want        track.ScoreMode
	}{
		{"motion", "", track.ScoresFixed},
		{"file", file, track.ScoresWarmup},
		{"file, fixed written", file + "tracker:\n  bytetrack:\n    scores: {mode: fixed}\n", track.ScoresFixed},
		{"motion, warmup written", "tracker:\n  bytetrack:\n    scores: {mode: warmup, warmup_detections: 50}\n", track.ScoresWarmup},
	} {
		t.Run(tt.name, func(t *testing.T) {
			path := filepath.Join(dir, "site.yaml")
			if err := os.WriteFile(path, []byte(base+tt.extra), 0o644); err != nil {
				t.Fatal(err)
			}
			cfg, err := Load(path)
			if err != nil {
				t.Fatal(err)
			}
			bt, def := cfg.Tracker.ByteTrack, track.DefaultByteTrackConfig()
			if bt.Scores.Mode != tt.want {
				t.Errorf("scores mode %q, want %q", bt.Scores.Mode, tt.want)
			}
			if bt.LostFrames != def.LostFrames || bt.Scores.HighQuantile != def.Scores.HighQuantile ||
				bt.Scores.NewQuantile != def.Scores.NewQuantile {
				t.Errorf("bytetrack %+v: defaults not the tracker's", bt)
			}
			if strings.Contains(tt.extra, "warmup_detections") && bt.Scores.WarmupDetections != 50 {
				t.Errorf("warmup_detections %d, want 50", bt.Scores.WarmupDetections)
			}
		})
	}
}
