// Package capture reads frames from recorded files, streams and generated
// scenes, paces them, and hands them on through a one-slot mailbox where the
// newest frame wins.
package capture

import (
	"errors"
	"time"

	"gocv.io/x/gocv"
)

// Sentinel errors a Reader returns; callers branch on them with errors.Is.
var (
	// ErrEndOfStream: a recorded or generated source has no more frames.
	ErrEndOfStream = errors.New("end of stream")
	// ErrDisconnected: a live source stopped delivering frames; reconnect.
	ErrDisconnected = errors.New("source disconnected")
)

// Frame is one decoded image with where and when it came from. The receiver
// of a Frame owns its Mat and must Close it.
type Frame struct {
	Source   string        // source ID from the site file
	Seq      int64         // 0-based index of the frame in its source (before any drop)
	PTS      time.Duration // source timestamp from the start of the stream
	Captured time.Time     // wall-clock time the frame was read
	Mat      gocv.Mat      // 8-bit BGR
	// Conn numbers the connection of a live source the frame came on: 1 for
	// the first, +1 after each reconnect (0 for other sources). A change
	// means the source was lost in between (see Worker.OnLost).
	Conn int64
	// Prep holds what a detector prepared from Mat on the capture goroutine
	// (e.g. a letterboxed input tensor), so that preparing the next frame
	// overlaps inference of this one. Nil when the detector prepares nothing.
	Prep Prepared
}

// Prepared is detector input made ahead of time; Close releases it.
type Prepared interface{ Close() error }

// Close releases the frame's image and prepared input; safe to call twice.
func (f *Frame) Close() {
	if f == nil {
		return
	}
	if f.Mat.Ptr() != nil {
		_ = f.Mat.Close()
	}
	if f.Prep != nil {
		_ = f.Prep.Close()
		f.Prep = nil
	}
}

// Reader delivers frames of one source in order.
type Reader interface {
	// Read decodes the next frame into dst and returns its source timestamp.
	// It returns ErrEndOfStream or ErrDisconnected (wrapped) when it cannot.
	Read(dst *gocv.Mat) (time.Duration, error)
	// Close releases the source; safe to call twice.
	Close() error
}

// Info describes a source once it is open.
type Info struct {
	Width, Height int
	FPS           float64 // nominal frames per second (0 when unknown)
	Frames        int     // frame count when known (files, scenes), else 0
	Live          bool    // frames arrive on the source's own clock (streams)
}
