package track

import (
	"fmt"
	"path/filepath"
	"strings"
	"testing"
)

// TestByteTrackGolden replays the baseline's inputs (testdata/*.det.txt) and
// those made for ByteTrack (testdata/bytetrack/*.det.txt) through ByteTrack
// with the default settings at 10 frames/s, keeping detections from
// DefaultLowScore up, and compares two outputs with golden files under
// testdata/bytetrack/:
//
//   - NAME.tracks.txt: Result.Active of every frame in MOTChallenge format;
//   - NAME.events.txt: every track reported in Result.Ended, then those
//     returned by Flush, with all their fields and the filter's box.
//
// testdata/bytetrack/README.md says what each file should show. Run
// `go test ./track -run Golden -update` after an intended change and read
// the diff.
func TestByteTrackGolden(t *testing.T) {
	var inputs []string
	for _, pattern := range []string{"*.det.txt", filepath.Join("bytetrack", "*.det.txt")} {
		found, err := filepath.Glob(filepath.Join("testdata", pattern))
		if err != nil || len(found) == 0 {
			t.Fatalf("no testdata/%s inputs (err %v)", pattern, err)
		}
		inputs = append(inputs, found...)
	}
	for _, in := range inputs {
		name := strings.TrimSuffix(filepath.Base(in), ".det.txt")
		t.Run(name, func(t *testing.T) {
			tracks, events := replay(t, in, DefaultLowScore, NewByteTrack(DefaultByteTrackConfig()), describeEstimate)
			dir := filepath.Join("testdata", "bytetrack")
			compareGolden(t, filepath.Join(dir, name+".tracks.txt"), tracks)
			compareGolden(t, filepath.Join(dir, name+".events.txt"), events)
		})
	}
}

// describeEstimate is describe plus the filter's box, rounded to 0.01 px so
// that the files do not depend on the last bits of floating point.
func describeEstimate(t Track) string {
	e := t.Estimate
	return fmt.Sprintf("%s est=%.2f,%.2f,%.2f,%.2f", describe(t), e.X1, e.Y1, e.W(), e.H())
}
