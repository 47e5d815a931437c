package capture

/*
#cgo !windows pkg-config: opencv4
#cgo CXXFLAGS: --std=c++11
#include <stdlib.h>
#include "cvcap.h"
*/
import "C"

import (
	"errors"
	"fmt"
	"strings"
	"time"
	"unsafe"

	"gocv.io/x/gocv"
)

// cvCapture is an OpenCV video capture opened through the shim in cvcap.cpp,
// which passes open-time parameters and turns OpenCV's C++ exceptions into
// errors.
type cvCapture struct{ p C.TallydCapture }

// OpenCV API preferences (cv::VideoCaptureAPIs).
const (
	apiFFmpeg = int(gocv.VideoCaptureFFmpeg)
	apiV4L2   = int(gocv.VideoCaptureV4L2)
)

// timeoutParams are the FFmpeg backend's open-time timeouts as OpenCV
// parameters; zero leaves the backend's default.
func timeoutParams(open, read time.Duration) []int {
	var p []int
	if open > 0 {
		p = append(p, C.TALLYD_CAP_PROP_OPEN_TIMEOUT_MSEC, int(open.Milliseconds()))
	}
	if read > 0 {
		p = append(p, C.TALLYD_CAP_PROP_READ_TIMEOUT_MSEC, int(read.Milliseconds()))
	}
	return p
}

// openCVName opens a file, URL or device path with open-time parameters
// (property, value pairs). It returns errNotReadable when the backend could
// not open it, and OpenCV's message when OpenCV threw.
func openCVName(name string, api int, params []int) (*cvCapture, error) {
	cs := C.CString(name)
	defer C.free(unsafe.Pointer(cs))
	cp := make([]C.int, len(params)+1) // never empty: &cp[0] must exist
	for i, v := range params {
		cp[i] = C.int(v)
	}
	var cErr *C.char
	p := C.tallyd_cap_open_name(cs, C.int(api), &cp[0], C.int(len(params)), &cErr)
	return opened(p, cErr)
}

// openCVIndex opens a local camera by index; errors as openCVName.
func openCVIndex(index, api int) (*cvCapture, error) {
	var cErr *C.char
	return opened(C.tallyd_cap_open_index(C.int(index), C.int(api), &cErr), cErr)
}

func opened(p C.TallydCapture, cErr *C.char) (*cvCapture, error) {
	switch {
	case cErr != nil:
		return nil, cvError("open", cErr)
	case p == nil:
		return nil, errNotReadable
	}
	return &cvCapture{p: p}, nil
}

// read decodes the next frame into dst; false when there is none.
func (c *cvCapture) read(dst *gocv.Mat) (bool, error) {
	var cErr *C.char
	switch C.tallyd_cap_read(c.handle(), unsafe.Pointer(dst.Ptr()), &cErr) {
	case 1:
		return true, nil
	case 0:
		return false, nil
	}
	return false, cvError("read", cErr)
}

// get reads a property.
func (c *cvCapture) get(prop gocv.VideoCaptureProperties) (float64, error) {
	var v C.double
	var cErr *C.char
	if C.tallyd_cap_get(c.handle(), C.int(prop), &v, &cErr) != 0 {
		return 0, cvError("get", cErr)
	}
	return float64(v), nil
}

// close releases the capture; safe to call twice.
func (c *cvCapture) close() error {
	if c == nil || c.p == nil {
		return nil
	}
	var cErr *C.char
	rc := C.tallyd_cap_close(c.p, &cErr)
	c.p = nil
	if rc != 0 {
		return cvError("close", cErr)
	}
	return nil
}

// handle is the shim's handle; nil (which the shim reports as an error)
// once closed.
func (c *cvCapture) handle() C.TallydCapture {
	if c == nil {
		return nil
	}
	return c.p
}

// errOpenCV is wrapped by every error the shim reports.
var errOpenCV = errors.New("opencv")

// cvError turns a message the shim allocated into an error and frees it.
func cvError(op string, msg *C.char) error {
	s := "unknown error"
	if msg != nil {
		s = strings.TrimSpace(C.GoString(msg))
		C.free(unsafe.Pointer(msg))
	}
	return fmt.Errorf("%w %s: %s", errOpenCV, op, s)
}
