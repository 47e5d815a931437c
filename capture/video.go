package capture

import (
	"fmt"
	"math"
	"time"

	"gocv.io/x/gocv"
)

// Video reads a recorded file, a stream URL or a local camera through
// OpenCV's video I/O: whatever container and codec that build reads. Open
// makes one.
type Video struct {
	name        string // for errors; passwords already redacted
	cap         *cvCapture
	info        Info
	first       gocv.Mat // frame read while probing, handed out by the first Read
	seq         int64
	last        time.Duration
	readTimeout time.Duration // live sources: a read this long without a frame is a stall
	maxPixels   int
}

// openFFmpeg returns an opener for openVideo: name through the FFmpeg
// backend, with the OPENCV_FFMPEG_CAPTURE_OPTIONS value env (see envGate)
// and open-time parameters, FFmpeg's own log lines routed to ours.
func openFFmpeg(name, env string, params []int) func() (*cvCapture, error) {
	return func() (*cvCapture, error) {
		var (
			c   *cvCapture
			err error
		)
		routeFFmpegLog()
		ffmpegEnv.with(env, func() { c, err = openCVName(name, apiFFmpeg, params) })
		routeFFmpegLog() // again, in case the open replaced our callback
		return c, err
	}
}

// openVideo probes a capture opened by open: it checks the frame size the
// container declares, reads the first frame and checks that frames are
// 8-bit BGR and within maxPixels. Errors say what is wrong, without a name.
func openVideo(open func() (*cvCapture, error), live bool, readTimeout time.Duration, maxPixels int) (*Video, error) {
	c, err := open()
	if err != nil {
		return nil, err
	}
	v := &Video{cap: c, readTimeout: readTimeout, maxPixels: maxPixels}
	fail := func(err error) (*Video, error) {
		_ = v.Close()
		return nil, err
	}
	// Refuse a frame size the container declares before decoding a frame.
	w, err := c.get(gocv.VideoCaptureFrameWidth)
	if err != nil {
		return fail(err)
	}
	h, err := c.get(gocv.VideoCaptureFrameHeight)
	if err != nil {
		return fail(err)
	}
	if w > 0 && h > 0 && w < math.MaxInt32 && h < math.MaxInt32 {
		if err := checkSize(int(w), int(h), maxPixels); err != nil {
			return fail(err)
		}
	}
	v.first = gocv.NewMat()
	ok, err := c.read(&v.first)
	switch {
	case err != nil:
		return fail(err)
	case !ok || v.first.Empty():
		return fail(errNoFrame)
	case v.first.Type() != gocv.MatTypeCV8UC3:
		return fail(reasonf(ErrUnsupported, "frames are of type %v, want 8-bit BGR", v.first.Type()))
	}
	if err := checkSize(v.first.Cols(), v.first.Rows(), maxPixels); err != nil {
		return fail(err)
	}
	fps, err := c.get(gocv.VideoCaptureFPS)
	if err != nil {
		return fail(err)
	}
	if math.IsNaN(fps) || fps <= 0 || fps > 1000 {
		fps = 0
	}
	n, err := c.get(gocv.VideoCaptureFrameCount)
	if err != nil {
		return fail(err)
	}
	if live || !(n > 0 && n < math.MaxInt32) {
		n = 0
	}
	v.info = Info{Width: v.first.Cols(), Height: v.first.Rows(), FPS: fps, Frames: int(n), Live: live}
	return v, nil
}

// Info describes the opened source.
func (v *Video) Info() Info { return v.info }

// Read implements Reader. A recording that ends before the frame count its
// container declares returns an error matching both ErrEndOfStream and
// ErrEndedEarly; a frame over the pixel limit one matching ErrTooLarge.
func (v *Video) Read(dst *gocv.Mat) (time.Duration, error) {
	if v.cap == nil {
		return 0, fmt.Errorf("read %s: %w", v.name, errReaderClosed)
	}
	if v.first.Ptr() != nil {
		v.first.CopyTo(dst)
		_ = v.first.Close()
		v.first = gocv.Mat{}
	} else {
		start := time.Now()
		ok, err := v.cap.read(dst)
		if err != nil {
			return 0, fmt.Errorf("read %s: %w", v.name, err)
		}
		if !ok || dst.Empty() {
			return 0, v.endErr(time.Since(start))
		}
		// OpenCV 4.6's FFmpeg backend keeps a stream's first frame size (it
		// converts later frames to it); other backends and versions may not.
		if err := checkSize(dst.Cols(), dst.Rows(), v.maxPixels); err != nil {
			return 0, fmt.Errorf("read %s: %w", v.name, err)
		}
	}
	pts, err := v.timestamp()
	if err != nil {
		return 0, fmt.Errorf("read %s: %w", v.name, err)
	}
	v.seq++
	return pts, nil
}

// endErr says why no frame came after a read that took took.
func (v *Video) endErr(took time.Duration) error {
	switch {
	case !v.info.Live && endedEarly(v.seq, int64(v.info.Frames)):
		return fmt.Errorf("read %s: %w after %d of the %d frames its container declares: %w",
			v.name, ErrEndedEarly, v.seq, v.info.Frames, ErrEndOfStream)
	case !v.info.Live:
		return fmt.Errorf("read %s: %w", v.name, ErrEndOfStream)
	case v.readTimeout > 0 && took >= v.readTimeout*9/10:
		return fmt.Errorf("read %s: no frame within read_timeout %v (stalled): %w", v.name, v.readTimeout, ErrDisconnected)
	}
	return fmt.Errorf("read %s: stream ended or broke off: %w", v.name, ErrDisconnected)
}

// endedEarly reports whether a recording that declared declared frames and
// delivered read is missing more than containers get wrong: some estimate
// the count from the duration, so up to max(2, 1%) missing frames pass.
func endedEarly(read, declared int64) bool {
	return declared > 0 && float64(declared-read) > max(2, 0.01*float64(declared))
}

// timestamp prefers the frame index over the container clock for files with
// a known rate (exact and monotonic), and the decoder's clock otherwise.
func (v *Video) timestamp() (time.Duration, error) {
	var pts time.Duration
	if v.info.FPS > 0 && !v.info.Live {
		pts = time.Duration(float64(v.seq) / v.info.FPS * float64(time.Second))
	} else {
		ms, err := v.cap.get(gocv.VideoCapturePosMsec)
		if err != nil {
			return 0, err
		}
		if !(ms >= 0 && ms < 1e12) { // some streams (HTTP MJPEG) have no clock
			ms = 0
		}
		pts = time.Duration(ms * float64(time.Millisecond))
		if v.seq > 0 && pts <= v.last {
			pts = v.last + time.Millisecond
		}
	}
	v.last = pts
	return pts, nil
}

// Close implements Reader. It also logs FFmpeg problems still being summed.
func (v *Video) Close() error {
	if v.first.Ptr() != nil {
		_ = v.first.Close()
		v.first = gocv.Mat{}
	}
	var err error
	if v.cap != nil {
		err = v.cap.close()
		v.cap = nil
		flushFFmpegLog()
	}
	if err != nil {
		return fmt.Errorf("close %s: %w", v.name, err)
	}
	return nil
}
