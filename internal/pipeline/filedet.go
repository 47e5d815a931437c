package pipeline

import (
	"context"
	"fmt"

	"tallyd/capture"
	"tallyd/detect"
)

// fileDetector replays precomputed detections, one file per source.
type fileDetector struct {
	class    string
	bySource map[string]*detect.FileDetector
}

func (d *fileDetector) Detect(_ context.Context, batch []*capture.Frame) ([][]detect.Detection, error) {
	out := make([][]detect.Detection, len(batch))
	for i, f := range batch {
		fd, ok := d.bySource[f.Source]
		if !ok {
			return nil, fmt.Errorf("detections file: no file for source %q", f.Source)
		}
		// MOTChallenge frame numbers start at 1.
		out[i] = fd.Frame(int(f.Seq) + 1)
	}
	return out, nil
}

// Classes is the one class every replayed box gets.
func (d *fileDetector) Classes() []string { return []string{d.class} }

func (d *fileDetector) Close() error { return nil }
