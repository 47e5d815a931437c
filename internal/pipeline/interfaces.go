package pipeline

import (
	"context"
	"time"

	"tallyd/capture"
	"tallyd/detect"
	"tallyd/track"
)

// Detector finds objects in a batch of frames, possibly from several sources.
// The result has one slice per frame, in batch order.
type Detector interface {
	Detect(ctx context.Context, batch []*capture.Frame) ([][]detect.Detection, error)
	Close() error
}

// Optional abilities of a Detector, found by type assertion.
type (
	// Preparer prepares a detector's input from a frame ahead of time, on
	// the source's capture goroutine, so that preparation overlaps
	// inference. It sets f.Prep.
	Preparer interface {
		Prepare(f *capture.Frame) error
	}
	// Forgetter keeps per-source state (a background model) and drops it
	// when a source reconnects.
	Forgetter interface {
		Forget(source string)
	}
	// BatchSizer runs several frames in one inference call.
	BatchSizer interface {
		BatchSize() int
	}
	// ClassLister names every class the detector can report, so that rules
	// asking for another class are refused at start.
	ClassLister interface {
		Classes() []string
	}
)

// Tracker links one source's detections over time.
type Tracker interface {
	Update(ts time.Duration, dets []detect.Detection) track.Result
}
