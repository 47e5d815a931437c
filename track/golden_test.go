package track

import (
	"bytes"
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"tallyd/detect"
	"tallyd/internal/motfmt"
)

var update = flag.Bool("update", false, "rewrite the golden files under testdata/")

// TestIoUGolden replays each testdata/*.det.txt (MOTChallenge detections,
// hand-made) through the IoU tracker with the default settings at 10
// frames/s and compares two outputs with golden files:
//
//   - NAME.tracks.txt: Result.Active of every frame in MOTChallenge format,
//     as `tallyd` would write it for an evaluation tool;
//   - NAME.events.txt: every track reported in Result.Ended, then those
//     returned by Flush, with all their fields.
//
// Run `go test ./track -run Golden -update` after an intended change and
// read the diff.
func TestIoUGolden(t *testing.T) {
	inputs, err := filepath.Glob(filepath.Join("testdata", "*.det.txt"))
	if err != nil || len(inputs) == 0 {
		t.Fatalf("no testdata/*.det.txt inputs (err %v)", err)
	}
	for _, in := range inputs {
		name := strings.TrimSuffix(filepath.Base(in), ".det.txt")
		t.Run(name, func(t *testing.T) {
			tracks, events := replay(t, in, 0.3, NewIoU(DefaultIoUConfig()), describe)
			compareGolden(t, filepath.Join("testdata", name+".tracks.txt"), tracks)
			compareGolden(t, filepath.Join("testdata", name+".events.txt"), events)
		})
	}
}

// replay runs the detections file in (10 frames/s, scores from minScore)
// through tr and returns the two golden outputs: Result.Active of every
// frame in MOTChallenge format, and the tracks ended and flushed, each
// written with desc.
func replay(t *testing.T, in string, minScore float64, tr interface {
	Tracker
	Flush() []Track
}, desc func(Track) string) (tracks, events []byte) {
	t.Helper()
	rows, err := motfmt.ReadFile(in)
	if err != nil {
		t.Fatal(err)
	}
	src := detect.NewFileDetector(rows, "person", minScore)
	var out []motfmt.Row
	var ev bytes.Buffer
	for f := 1; f <= src.Frames(); f++ {
		res := tr.Update(ts(f), src.Frame(f))
		out = append(out, ToRows(f, res.Active)...)
		for _, e := range res.Ended {
			fmt.Fprintf(&ev, "frame %d ended %s\n", f, desc(e))
		}
	}
	for _, e := range tr.Flush() {
		fmt.Fprintf(&ev, "flush %s\n", desc(e))
	}
	var buf bytes.Buffer
	if err := motfmt.Write(&buf, out); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes(), ev.Bytes()
}

func describe(t Track) string {
	b := t.Box
	return fmt.Sprintf("id=%d class=%s box=%g,%g,%g,%g score=%g hits=%d misses=%d confirmed=%t first=%v last=%v",
		t.ID, t.Class, b.X1, b.Y1, b.W(), b.H(), t.Score, t.Hits, t.Misses, t.Confirmed, t.FirstSeen, t.LastSeen)
}

func compareGolden(t *testing.T, path string, got []byte) {
	t.Helper()
	if *update {
		if err := os.WriteFile(path, got, 0o644); err != nil {
			t.Fatal(err)
		}
		return
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run with -update to create it)", err)
	}
	if !bytes.Equal(got, want) {
		t.Errorf("%s differs (run with -update and read the diff)\n--- got\n%s--- want\n%s", path, got, want)
	}
}
