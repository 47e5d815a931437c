// Package pipeline wires the stages of tallyd together for one site: capture
// workers feed a detector, a tracker per source, the rules per source and
// the publishers.
package pipeline

import (
	"context"
	"fmt"
	"time"

	"tallyd/capture"
	"tallyd/detect"
	"tallyd/events"
	"tallyd/track"
)

// Detector finds objects in a batch of frames, possibly from several sources.
// The result has one slice per frame, in batch order.
type Detector interface {
	Detect(ctx context.Context, batch []*capture.Frame) ([][]detect.Detection, error)
	Close() error
}

// Preparer is a detector that can prepare its input from a frame ahead of
// time, on the source's capture goroutine, so that preparation overlaps
// inference. It sets f.Prep.
type Preparer interface {
	Prepare(f *capture.Frame) error
}

// Tracker links one source's detections over time.
type Tracker interface {
	Update(ts time.Duration, dets []detect.Detection) track.Result
}

// Publisher delivers events somewhere (NATS, a file).
type Publisher interface {
	Publish(ctx context.Context, ev events.Event) error
}

// fileDetector replays precomputed detections, one file per source.
type fileDetector struct {
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

func (d *fileDetector) Close() error { return nil }
