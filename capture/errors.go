package capture

import (
	"errors"
	"fmt"
)

// Sentinel errors for why a source could not be opened; callers and tests
// branch on them with errors.Is. Messages wrapping them say what was found.
var (
	// ErrUnreachable: nothing answers at the stream's host and port.
	ErrUnreachable = errors.New("cannot connect")
	// ErrUnauthorized: the server wants credentials, or refused the ones given.
	ErrUnauthorized = errors.New("credentials refused")
	// ErrNotFound: the server has no stream at the URL's path.
	ErrNotFound = errors.New("no stream at this path")
	// ErrNotVideo: the server answered with something that is not video.
	ErrNotVideo = errors.New("not a video stream")
	// ErrTimeout: the server accepted the connection but sent nothing in time.
	ErrTimeout = errors.New("timed out")
	// ErrNoDevice: the local camera does not exist.
	ErrNoDevice = errors.New("no such device")
	// ErrEmptyFolder: an image folder holds no images.
	ErrEmptyFolder = errors.New("no images in folder")
	// ErrUnsupported: the source can never work as configured (a scheme or a
	// pixel format tallyd does not read); a reconnecting source gives up.
	ErrUnsupported = errors.New("unsupported source")
	// ErrTooLarge: the source's frames have more pixels than the limit
	// (SourceSpec.MaxFramePixels). It also matches ErrUnsupported, so a
	// reconnecting source gives up.
	ErrTooLarge = errors.New("frame too large")
	// ErrEndedEarly: a recording reached its end after fewer frames than its
	// container declared (a cut or damaged file). It comes wrapped together
	// with ErrEndOfStream.
	ErrEndedEarly = errors.New("recording ended early")
)

var (
	errNotReadable  = errors.New("not a video OpenCV can read")
	errNoFrame      = errors.New("no frame could be decoded")
	errReaderClosed = errors.New("reader closed")
)

// reason is a message that matches a sentinel with errors.Is.
type reason struct {
	kind error
	msg  string
}

func (r *reason) Error() string        { return r.msg }
func (r *reason) Is(target error) bool { return target == r.kind }

func reasonf(kind error, format string, args ...any) error {
	return &reason{kind: kind, msg: fmt.Sprintf(format, args...)}
}

// sizeError is a frame over the pixel limit; it matches ErrTooLarge and
// ErrUnsupported.
type sizeError struct{ w, h, limit int }

func (e *sizeError) Error() string {
	return fmt.Sprintf("frame size %dx%d (%.1f megapixels) is over the limit of %.1f megapixels (max_frame_pixels)",
		e.w, e.h, float64(e.w)*float64(e.h)/1e6, float64(e.limit)/1e6)
}

func (e *sizeError) Is(target error) bool { return target == ErrTooLarge || target == ErrUnsupported }

// checkSize returns a *sizeError when a w x h frame has more than limit
// pixels.
func checkSize(w, h, limit int) error {
	if int64(w)*int64(h) > int64(limit) {
		return &sizeError{w: w, h: h, limit: limit}
	}
	return nil
}

// SourceError is a failure of one source: which source, which step and why.
// Target never holds a password.
type SourceError struct {
	Source string // source ID ("" when not known)
	Op     string // "open" or "read"
	Target string // what was opened: path, device or URL with the password hidden
	Err    error
}

func (e *SourceError) Error() string {
	s := e.Op + " " + e.Target + ": " + e.Err.Error()
	if e.Source != "" {
		s = "source " + e.Source + ": " + s
	}
	return s
}

// Unwrap returns the reason.
func (e *SourceError) Unwrap() error { return e.Err }
