package onnx

/*
#cgo !windows pkg-config: opencv4
#cgo CXXFLAGS: --std=c++11
#include <stdlib.h>
#include "cvdnn.h"
*/
import "C"

import (
	"errors"
	"fmt"
	"strings"
	"unsafe"
)

// tensor is one output of an inference: its dimensions, batch first, and
// its values. It stays valid until the engine's next run or close.
type tensor struct {
	dims []int
	data []float32
}

// engine runs a model on a batch of prepared images.
type engine interface {
	// run infers n images of 3 x h x w values stored back to back in input
	// and returns one tensor per model output, in the model's output order.
	run(input []float32, n int) ([]tensor, error)
	// version names the engine and its version, e.g. "ONNX Runtime 1.24.1".
	version() string
	close() error
}

// cvEngine runs a model with OpenCV's DNN module through a small C++ shim
// that turns OpenCV's exceptions into errors.
type cvEngine struct {
	p         C.TallydDNN
	inputName string
	c, h, w   int
	nOut      int
}

// newCVEngine opens an ONNX model, or a Darknet cfg (path ending in .cfg)
// with the .weights file beside it.
func newCVEngine(path string, input TensorInfo, outputs []TensorInfo, h, w int) (*cvEngine, error) {
	cPath := C.CString(path)
	defer C.free(unsafe.Pointer(cPath))
	names := make([]*C.char, len(outputs))
	for i, o := range outputs {
		names[i] = C.CString(o.Name)
	}
	defer func() {
		for _, n := range names {
			C.free(unsafe.Pointer(n))
		}
	}()
	var cWeights *C.char
	if isDarknetPath(path) {
		cWeights = C.CString(darknetWeights(path))
		defer C.free(unsafe.Pointer(cWeights))
	}
	var cErr *C.char
	p := C.tallyd_dnn_open(cPath, cWeights, (**C.char)(unsafe.Pointer(&names[0])), C.int(len(names)), &cErr)
	if p == nil {
		return nil, errors.New(takeCString(cErr))
	}
	return &cvEngine{p: p, inputName: input.Name, c: 3, h: h, w: w, nOut: len(outputs)}, nil
}

func (e *cvEngine) run(input []float32, n int) ([]tensor, error) {
	if e.p == nil {
		return nil, errors.New("opencv engine: closed")
	}
	if len(input) < n*e.c*e.h*e.w || n < 1 {
		return nil, fmt.Errorf("opencv engine: %d values for %d images of %dx%dx%d", len(input), n, e.c, e.h, e.w)
	}
	cName := C.CString(e.inputName)
	defer C.free(unsafe.Pointer(cName))
	var cErr *C.char
	// The shim copies input before OpenCV sees it: no Go memory is kept.
	if C.tallyd_dnn_forward(e.p, (*C.float)(unsafe.Pointer(&input[0])), C.int(n), C.int(e.c), C.int(e.h), C.int(e.w), cName, &cErr) != 0 {
		return nil, fmt.Errorf("opencv forward: %s", takeCString(cErr))
	}
	outs := make([]tensor, e.nOut)
	for i := range outs {
		var data *C.float
		var dims [8]C.int
		var nd C.int
		if C.tallyd_dnn_output(e.p, C.int(i), &data, &dims[0], &nd) != 0 {
			return nil, fmt.Errorf("opencv forward: output %d is missing or not float32", i)
		}
		t := tensor{dims: make([]int, int(nd))}
		size := 1
		for k := range t.dims {
			t.dims[k] = int(dims[k])
			size *= t.dims[k]
		}
		if size > 0 {
			t.data = unsafe.Slice((*float32)(unsafe.Pointer(data)), size)
		}
		outs[i] = t
	}
	return outs, nil
}

func (e *cvEngine) version() string {
	return "OpenCV DNN " + C.GoString(C.tallyd_dnn_version())
}

func (e *cvEngine) close() error {
	if e.p != nil {
		C.tallyd_dnn_close(e.p)
		e.p = nil
	}
	return nil
}

// takeCString copies and frees a message the shim allocated.
func takeCString(s *C.char) string {
	if s == nil {
		return "unknown error"
	}
	defer C.free(unsafe.Pointer(s))
	return strings.TrimSpace(C.GoString(s))
}
