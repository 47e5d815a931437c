//go:build matprofile

package onnx

import (
	"context"
	"strings"
	"testing"

	"gocv.io/x/gocv"

	"tallyd/capture"
)

// TestNoMatLeak prepares and detects frames of several sizes (resized and
// not) with both engines and checks that every Mat the detector made was
// closed. Run with `go test -tags matprofile` (make test does for the
// pipeline; scripts/bench_onnx.sh does not need it).
func TestNoMatLeak(t *testing.T) {
	before := gocv.MatProfile.Count()
	for _, eng := range engines(t) {
		cfg := testConfig(t, fixture("e2e.onnx"), eng)
		d := mustNew(t, cfg)
		for _, sz := range [][2]int{{64, 48}, {128, 96}, {333, 100}} {
			f := uniformFrame(sz[0], sz[1], 200)
			if err := d.Prepare(f); err != nil {
				t.Fatal(err)
			}
			g := uniformFrame(sz[0], sz[1], 10)
			if _, err := d.Detect(context.Background(), []*capture.Frame{f, g}); err != nil {
				t.Fatal(err)
			}
			f.Close()
			g.Close()
		}
		bad := &capture.Frame{Mat: gocv.NewMatWithSize(10, 10, gocv.MatTypeCV8UC1)}
		if _, err := d.Detect(context.Background(), []*capture.Frame{bad}); err == nil {
			t.Fatal("grey frame accepted")
		}
		bad.Close()
		_ = d.Close()
	}
	if n := gocv.MatProfile.Count() - before; n != 0 {
		var b strings.Builder
		_ = gocv.MatProfile.WriteTo(&b, 1)
		t.Fatalf("%d Mats left open:\n%s", n, b.String())
	}
}
