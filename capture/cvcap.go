package capture

/*
#cgo !windows pkg-config: opencv4
#cgo CXXFLAGS: --std=c++11
#include <stdlib.h>
#include "cvcap.h"
*/
import "C"

import (
	"time"
	"unsafe"

	"gocv.io/x/gocv"
)

// cvCapture is an OpenCV video capture opened through the shim in cvcap.cpp,
// which can pass the FFmpeg backend's open and read timeouts.
type cvCapture struct{ p C.TallydCapture }

// OpenCV API preferences (cv::VideoCaptureAPIs).
const (
	apiFFmpeg = int(gocv.VideoCaptureFFmpeg)
	apiV4L2   = int(gocv.VideoCaptureV4L2)
)

// openCVName opens a file, URL or device path; it reports false when OpenCV
// could not open it. Zero timeouts leave the backend's defaults.
func openCVName(name string, api int, openTimeout, readTimeout time.Duration) (*cvCapture, bool) {
	cs := C.CString(name)
	defer C.free(unsafe.Pointer(cs))
	p := C.tallyd_cap_open_name(cs, C.int(api), C.int(openTimeout.Milliseconds()), C.int(readTimeout.Milliseconds()))
	if p == nil {
		return nil, false
	}
	return &cvCapture{p: p}, true
}

// openCVIndex opens a local camera by index.
func openCVIndex(index, api int) (*cvCapture, bool) {
	p := C.tallyd_cap_open_index(C.int(index), C.int(api))
	if p == nil {
		return nil, false
	}
	return &cvCapture{p: p}, true
}

// read decodes the next frame into dst; false when there is none.
func (c *cvCapture) read(dst *gocv.Mat) bool {
	return C.tallyd_cap_read(c.p, unsafe.Pointer(dst.Ptr())) != 0
}

func (c *cvCapture) get(prop gocv.VideoCaptureProperties) float64 {
	return float64(C.tallyd_cap_get(c.p, C.int(prop)))
}

func (c *cvCapture) close() {
	if c != nil && c.p != nil {
		C.tallyd_cap_close(c.p)
		c.p = nil
	}
}
