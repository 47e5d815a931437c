package pipeline

import (
	"errors"
	"path/filepath"
	"testing"

	"tallyd/detect/onnx"
	"tallyd/internal/config"
)

// TestONNXErrorLocated: ONNX start-up errors are located in the site file
// like every other bad input (config.ErrInvalid, file:line: key: ...).
func TestONNXErrorLocated(t *testing.T) {
	model, err := filepath.Abs("../../testdata/onnx/bad-layout.onnx")
	if err != nil {
		t.Fatal(err)
	}
	site := "site: s\nsources:\n  - id: a\n    scene: {seed: 1}\ndetector:\n  kind: onnx\n  onnx:\n    model: " + model + "\n    engine: opencv\n"
	cfg, err := config.Parse("site.yaml", []byte(site))
	if err != nil {
		t.Fatal(err)
	}
	_, err = onnx.New(onnxConfig(cfg))
	err = onnxError(cfg, err)
	want := `site.yaml:7: detector.onnx.layout: "` + model + `": output shapes output [batch,10] fit none of the supported layouts: ` +
		"yolox-grid [B,N,5+C] (N = grid cells at strides 8/16/32), rows-obj [B,N,5+C], rows-noobj-chw [B,4+C,N], boxes-scores [B,N,1,4] + [B,N,C], e2e [B,K,6], " +
		"anchor-heads 1-3 x [B,A*(5+C),H,W], anchor-heads-last 1-3 x [B,H,W,A*(5+C)]"
	if !errors.Is(err, config.ErrInvalid) || err.Error() != want {
		t.Fatalf("error\n got: %v\nwant: %s", err, want)
	}
}
