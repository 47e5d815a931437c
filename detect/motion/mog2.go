package motion

/*
#cgo !windows pkg-config: opencv4
#cgo CXXFLAGS: --std=c++11
#include <stdlib.h>
#include "mog2.h"
*/
import "C"

import (
	"unsafe"

	"gocv.io/x/gocv"
)

// mog2 is OpenCV's Gaussian-mixture background model (Zivkovic 2004/2006)
// with an explicit learning rate.
type mog2 struct{ p C.TallydMOG2 }

func newMOG2(history int, varThreshold float64, shadows bool) *mog2 {
	s := 0
	if shadows {
		s = 1
	}
	return &mog2{p: C.tallyd_mog2_new(C.int(history), C.double(varThreshold), C.int(s))}
}

// apply updates the model with src and writes the foreground mask to dst
// (255 foreground, 127 shadow, 0 background). rate < 0 lets OpenCV choose.
func (m *mog2) apply(src gocv.Mat, dst *gocv.Mat, rate float64) {
	C.tallyd_mog2_apply(m.p, unsafe.Pointer(src.Ptr()), unsafe.Pointer(dst.Ptr()), C.double(rate))
}

func (m *mog2) close() {
	if m.p != nil {
		C.tallyd_mog2_close(m.p)
		m.p = nil
	}
}
