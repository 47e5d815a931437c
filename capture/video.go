package capture

import (
	"fmt"
	"math"
	"time"

	"gocv.io/x/gocv"
)

// Video reads a recorded file, a stream URL or a local camera through
// OpenCV's video I/O: whatever container and codec that build reads.
type Video struct {
	name        string // for errors; passwords already redacted
	cap         *cvCapture
	info        Info
	first       gocv.Mat // frame read while probing, handed out by the first Read
	seq         int64
	last        time.Duration
	readTimeout time.Duration // live sources: a read this long without a frame is a stall
}

// OpenVideo opens a file (live=false) or a stream URL (live=true) through the
// FFmpeg backend and reads its first frame, so that a file OpenCV cannot
// decode fails here, before anything starts. name is used in errors. Streams
// get the default open and read timeouts; Open takes them from a SourceSpec.
func OpenVideo(uri, name string, live bool) (*Video, error) {
	var openTO, readTO time.Duration
	if live {
		openTO, readTO = DefaultOpenTimeout, DefaultReadTimeout
	}
	v, err := openVideo(func() (*cvCapture, bool) {
		var c *cvCapture
		var ok bool
		ffmpegEnv.with("", func() { c, ok = openCVName(uri, apiFFmpeg, openTO, readTO) })
		return c, ok
	}, live, readTO)
	if err != nil {
		return nil, fmt.Errorf("open %s: %w", name, err)
	}
	v.name = name
	return v, nil
}

// openVideo probes a capture opened by open: it reads the first frame and
// checks that frames are 8-bit BGR. Errors say what is wrong, without a name.
func openVideo(open func() (*cvCapture, bool), live bool, readTimeout time.Duration) (*Video, error) {
	c, ok := open()
	if !ok {
		return nil, errNotReadable
	}
	v := &Video{cap: c, first: gocv.NewMat(), readTimeout: readTimeout}
	if !c.read(&v.first) || v.first.Empty() {
		_ = v.Close()
		return nil, errNoFrame
	}
	if v.first.Type() != gocv.MatTypeCV8UC3 {
		t := v.first.Type()
		_ = v.Close()
		return nil, reasonf(ErrUnsupported, "frames are of type %v, want 8-bit BGR", t)
	}
	fps := c.get(gocv.VideoCaptureFPS)
	if math.IsNaN(fps) || fps <= 0 || fps > 1000 {
		fps = 0
	}
	n := int(c.get(gocv.VideoCaptureFrameCount))
	if live || n < 0 {
		n = 0
	}
	v.info = Info{Width: v.first.Cols(), Height: v.first.Rows(), FPS: fps, Frames: n, Live: live}
	return v, nil
}

// Info describes the opened source.
func (v *Video) Info() Info { return v.info }

// Read implements Reader.
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
		if !v.cap.read(dst) || dst.Empty() {
			if !v.info.Live {
				return 0, fmt.Errorf("read %s: %w", v.name, ErrEndOfStream)
			}
			if v.readTimeout > 0 && time.Since(start) >= v.readTimeout*9/10 {
				return 0, fmt.Errorf("read %s: no frame within read_timeout %v (stalled): %w", v.name, v.readTimeout, ErrDisconnected)
			}
			return 0, fmt.Errorf("read %s: stream ended or broke off: %w", v.name, ErrDisconnected)
		}
	}
	pts := v.timestamp()
	v.seq++
	return pts, nil
}

// timestamp prefers the frame index over the container clock for files with
// a known rate (exact and monotonic), and the decoder's clock otherwise.
func (v *Video) timestamp() time.Duration {
	var pts time.Duration
	if v.info.FPS > 0 && !v.info.Live {
		pts = time.Duration(float64(v.seq) / v.info.FPS * float64(time.Second))
	} else {
		ms := v.cap.get(gocv.VideoCapturePosMsec)
		if !(ms >= 0 && ms < 1e12) { // some streams (HTTP MJPEG) have no clock
			ms = 0
		}
		pts = time.Duration(ms * float64(time.Millisecond))
		if v.seq > 0 && pts <= v.last {
			pts = v.last + time.Millisecond
		}
	}
	v.last = pts
	return pts
}

// Close implements Reader.
func (v *Video) Close() error {
	if v.first.Ptr() != nil {
		_ = v.first.Close()
		v.first = gocv.Mat{}
	}
	if v.cap != nil {
		v.cap.close()
		v.cap = nil
	}
	return nil
}
