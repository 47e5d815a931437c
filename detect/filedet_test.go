package detect

import (
	"os"
	"path/filepath"
	"reflect"
	"testing"

	"tallyd/internal/motfmt"
)

func TestFileDetector(t *testing.T) {
	rows := []motfmt.Row{
		{Frame: 1, ID: -1, X: 10, Y: 20, W: 30, H: 40, Conf: 0.9, Class: -1, Visibility: -1},
		{Frame: 1, ID: -1, X: 0, Y: 0, W: 5, H: 5, Conf: 0.2, Class: -1, Visibility: -1}, // below minScore
		{Frame: 3, ID: 4, X: 1, Y: 2, W: 3, H: 4, Conf: -1, Class: -1, Visibility: -1},   // no score: 1
		{Frame: 1, ID: -1, X: 7, Y: 8, W: 1, H: 2, Conf: 0.5, Class: 3, Visibility: 0.5}, // exactly minScore
		{Frame: 6, ID: -1, X: 7, Y: 8, W: 1, H: 2, Conf: 0.1, Class: -1, Visibility: -1}, // dropped, still counts for Frames
	}
	d := NewFileDetector(rows, "", 0.5)
	tests := []struct {
		frame int
		want  []Detection
	}{
		{1, []Detection{
			{Box: Box{10, 20, 40, 60}, Score: 0.9, Class: "object"},
			{Box: Box{7, 8, 8, 10}, Score: 0.5, Class: "object"},
		}},
		{2, nil},
		{3, []Detection{{Box: Box{1, 2, 4, 6}, Score: 1, Class: "object"}}},
		{6, nil},
		{0, nil},
		{-4, nil},
	}
	for _, tt := range tests {
		if got := d.Frame(tt.frame); !reflect.DeepEqual(got, tt.want) {
			t.Errorf("Frame(%d) = %+v, want %+v", tt.frame, got, tt.want)
		}
	}
	if got := d.Frames(); got != 6 {
		t.Errorf("Frames() = %d, want 6", got)
	}

	// The caller owns the returned slice.
	f1 := d.Frame(1)
	f1[0].Score = 0
	if d.Frame(1)[0].Score != 0.9 {
		t.Error("changing a returned detection changed the detector")
	}

	if got := NewFileDetector(rows, "person", 0).Frame(1)[1].Class; got != "person" {
		t.Errorf("class = %q, want person", got)
	}
	if got := NewFileDetector(nil, "", 0).Frames(); got != 0 {
		t.Errorf("empty detector Frames() = %d, want 0", got)
	}
}

func TestFileDetectorTUDCampus(t *testing.T) {
	path := filepath.Join("..", "..", "shared", "reference", "mot", "TUD-Campus", "gt.txt")
	if _, err := os.Stat(path); err != nil {
		t.Skipf("reference data not available: %v", err)
	}
	rows, err := motfmt.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	d := NewFileDetector(rows, "person", 0.5)
	n := 0
	for f := 1; f <= d.Frames(); f++ {
		n += len(d.Frame(f))
	}
	// Source: ../shared/reference/mot/README.md §4a (71 frames, asserted by
	// py-motmetrics) and §10 (359 GT boxes, all with flag 1).
	if d.Frames() != 71 || n != 359 {
		t.Errorf("replayed %d boxes over %d frames, want 359 over 71", n, d.Frames())
	}
}
