package capture

import (
	"fmt"
	"math"
	"time"

	"gocv.io/x/gocv"
)

// Video reads a recorded file or a stream URL through OpenCV's video I/O
// (FFmpeg backend): whatever container and codec that build reads.
type Video struct {
	name  string // for errors; passwords already redacted
	vc    *gocv.VideoCapture
	info  Info
	first gocv.Mat // frame read while probing, handed out by the first Read
	seq   int64
	last  time.Duration
}

// OpenVideo opens a file (live=false) or a stream URL (live=true) and reads
// its first frame, so that a file OpenCV cannot decode fails here, before
// anything starts. name is used in errors.
func OpenVideo(uri, name string, live bool) (*Video, error) {
	vc, err := gocv.OpenVideoCaptureWithAPI(uri, gocv.VideoCaptureFFmpeg)
	if err != nil || !vc.IsOpened() {
		if vc != nil {
			_ = vc.Close()
		}
		return nil, fmt.Errorf("open %s: not a video OpenCV can read", name)
	}
	v := &Video{name: name, vc: vc, first: gocv.NewMat()}
	if !vc.Read(&v.first) || v.first.Empty() {
		_ = v.Close()
		return nil, fmt.Errorf("open %s: no frame could be decoded", name)
	}
	if v.first.Type() != gocv.MatTypeCV8UC3 {
		_ = v.Close()
		return nil, fmt.Errorf("open %s: frames are of type %v, want 8-bit BGR", name, v.first.Type())
	}
	fps := vc.Get(gocv.VideoCaptureFPS)
	if math.IsNaN(fps) || fps <= 0 || fps > 1000 {
		fps = 0
	}
	n := int(vc.Get(gocv.VideoCaptureFrameCount))
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
	if v.first.Ptr() != nil {
		v.first.CopyTo(dst)
		_ = v.first.Close()
		v.first = gocv.Mat{}
	} else if !v.vc.Read(dst) || dst.Empty() {
		if v.info.Live {
			return 0, fmt.Errorf("read %s: %w", v.name, ErrDisconnected)
		}
		return 0, fmt.Errorf("read %s: %w", v.name, ErrEndOfStream)
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
		pts = time.Duration(v.vc.Get(gocv.VideoCapturePosMsec) * float64(time.Millisecond))
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
	if v.vc != nil {
		err := v.vc.Close()
		v.vc = nil
		return err
	}
	return nil
}
