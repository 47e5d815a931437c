package onnx

import (
	"os"
	"strings"
	"testing"
)

// TestCVEngineForwardError runs OpenCV DNN through the shim in cvdnn.cpp on
// an input of the wrong shape: OpenCV throws, and the shim hands the message
// back as an error instead of the process aborting. The engine still works
// afterwards.
func TestCVEngineForwardError(t *testing.T) {
	path := fixture("e2e.onnx") // images [batch,3,48,64] -> GlobalAveragePool -> 1x1 Conv over 3 channels
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	mi, err := ParseModel(data)
	if err != nil {
		t.Fatal(err)
	}
	e, err := newCVEngine(path, mi.Inputs[0], mi.Outputs, 48, 64)
	if err != nil {
		t.Fatal(err)
	}
	defer e.close()

	e.c = 1 // one channel where the model's convolution wants three
	_, err = e.run(make([]float32, 48*64), 1)
	if err == nil {
		t.Fatal("forward of a 1-channel input succeeded")
	}
	// OpenCV 4.6's convolution layer checks the input channels against its
	// weights (modules/dnn/src/layers/convolution_layer.cpp, getMemoryShapes).
	for _, want := range []string{"opencv forward: OpenCV(4.6.0) ",
		"Number of input channels should be multiple of 3 but got 1 in function 'getMemoryShapes'"} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("error %q lacks %q", err, want)
		}
	}
	if strings.HasSuffix(err.Error(), "\n") {
		t.Errorf("error ends with a newline: %q", err)
	}

	e.c = 3
	outs, err := e.run(make([]float32, 3*48*64), 1)
	if err != nil || len(outs) != len(mi.Outputs) {
		t.Fatalf("forward after the error: %d outputs, %v", len(outs), err)
	}
}
