package motion

/*
#cgo !windows pkg-config: opencv4
#cgo CXXFLAGS: --std=c++11
#include <stdlib.h>
#include "mog2.h"
*/
import "C"

import (
	"errors"
	"fmt"
	"strings"
	"unsafe"

	"gocv.io/x/gocv"
)

// mog2 is OpenCV's Gaussian-mixture background model (Zivkovic 2004/2006)
// with an explicit learning rate, through the shim in mog2.cpp, which turns
// OpenCV's C++ exceptions into errors.
type mog2 struct{ p C.TallydMOG2 }

// errOpenCV is wrapped by every error the shim reports.
var errOpenCV = errors.New("opencv")

func newMOG2(history int, varThreshold float64, shadows bool) (*mog2, error) {
	s := 0
	if shadows {
		s = 1
	}
	var cErr *C.char
	p := C.tallyd_mog2_new(C.int(history), C.double(varThreshold), C.int(s), &cErr)
	if p == nil {
		return nil, cvError("mog2 new", cErr)
	}
	return &mog2{p: p}, nil
}

// apply updates the model with src and writes the foreground mask to dst
// (255 foreground, 127 shadow, 0 background). rate < 0 lets OpenCV choose.
func (m *mog2) apply(src gocv.Mat, dst *gocv.Mat, rate float64) error {
	var cErr *C.char
	if C.tallyd_mog2_apply(m.p, unsafe.Pointer(src.Ptr()), unsafe.Pointer(dst.Ptr()), C.double(rate), &cErr) != 0 {
		return cvError("mog2 apply", cErr)
	}
	return nil
}

// close releases the model; safe to call twice.
func (m *mog2) close() error {
	if m.p == nil {
		return nil
	}
	var cErr *C.char
	rc := C.tallyd_mog2_close(m.p, &cErr)
	m.p = nil
	if rc != 0 {
		return cvError("mog2 close", cErr)
	}
	return nil
}

// cvError turns a message the shim allocated into an error and frees it.
func cvError(op string, msg *C.char) error {
	s := "unknown error"
	if msg != nil {
		s = strings.TrimSpace(C.GoString(msg))
		C.free(unsafe.Pointer(msg))
	}
	return fmt.Errorf("%w %s: %s", errOpenCV, op, s)
}
