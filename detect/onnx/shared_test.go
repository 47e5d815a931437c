package onnx

import (
	"fmt"
	"math"
	"testing"

	"gocv.io/x/gocv"

	"tallyd/detect"
)

// readFrames decodes the given frame numbers of ../shared/footage/vtest.avi.
func readFrames(t testing.TB, want ...int) []gocv.Mat {
	t.Helper()
	vc, err := gocv.VideoCaptureFile(sharedFile(t, "footage/vtest.avi"))
	if err != nil {
		t.Fatal(err)
	}
	defer vc.Close()
	var out []gocv.Mat
	m := gocv.NewMat()
	defer m.Close()
	for i := 0; len(out) < len(want); i++ {
		if !vc.Read(&m) || m.Empty() {
			t.Fatalf("vtest.avi ended at frame %d", i)
		}
		for _, w := range want {
			if w == i {
				out = append(out, m.Clone())
			}
		}
	}
	return out
}

// TestEnginesAgree runs the shared YOLOX-Nano model on frames of vtest.avi
// with ONNX Runtime and with OpenCV DNN, two independent engines: the output
// tensors agree within 1e-3 (../shared/models/README.md measured 6e-5), and
// after decoding and NMS every box has a twin of the same class with
// IoU >= 0.99.
func TestEnginesAgree(t *testing.T) {
	model := sharedFile(t, "models/yolox_nano_coco_416.onnx")
	names := sharedFile(t, "models/coco80.names")
	cfgORT := testConfig(t, model, EngineORT)
	cfgORT.Names, cfgORT.IntraThreads = names, 2
	cfgCV := cfgORT
	cfgCV.Engine = EngineOpenCV
	ortDet, cvDet := mustNew(t, cfgORT), mustNew(t, cfgCV)
	if ortDet.Info().Layout != LayoutYOLOXGrid || len(ortDet.Info().Classes) != 80 {
		t.Fatalf("info %+v", ortDet.Info())
	}
	frames := readFrames(t, 0, 100, 400, 700)
	for i, m := range frames {
		defer m.Close()
		t.Run(fmt.Sprint([]int{0, 100, 400, 700}[i]), func(t *testing.T) {
			buf := make([]float32, ortDet.pre.size())
			g, err := ortDet.pre.fill(m, buf)
			if err != nil {
				t.Fatal(err)
			}
			a, err := ortDet.eng.run(buf, 1)
			if err != nil {
				t.Fatal(err)
			}
			b, err := cvDet.eng.run(buf, 1)
			if err != nil {
				t.Fatal(err)
			}
			if fmt.Sprint(a[0].dims) != "[1 3549 85]" || fmt.Sprint(b[0].dims) != "[1 3549 85]" {
				t.Fatalf("shapes %v and %v", a[0].dims, b[0].dims)
			}
			maxDiff := 0.0
			for k := range a[0].data {
				maxDiff = math.Max(maxDiff, math.Abs(float64(a[0].data[k]-b[0].data[k])))
			}
			if maxDiff > 1e-3 {
				t.Fatalf("output tensors differ by up to %g, want <= 1e-3", maxDiff)
			}
			da := finishFor(t, ortDet, a, g)
			db := finishFor(t, cvDet, b, g)
			people := 0
			for _, d := range da {
				if d.Class == "person" {
					people++
				}
			}
			if people < 3 {
				t.Errorf("only %d people found in a busy plaza: %v", people, da)
			}
			matchBoxes(t, da, db)
			matchBoxes(t, db, da)
			t.Logf("max tensor difference %.2g, %d detections (%d people)", maxDiff, len(da), people)
		})
	}
}

func finishFor(t *testing.T, d *Detector, outs []tensor, g Geometry) []detect.Detection {
	t.Helper()
	cands, err := d.dec.decode(outs, 0, nil)
	if err != nil {
		t.Fatal(err)
	}
	return d.post.finish(cands, g, false)
}

// matchBoxes checks that every detection of a has a twin in b.
func matchBoxes(t *testing.T, a, b []detect.Detection) {
	t.Helper()
	if len(a) != len(b) {
		t.Errorf("%d detections against %d", len(a), len(b))
	}
	for _, x := range a {
		best := 0.0
		for _, y := range b {
			if y.Class == x.Class {
				best = math.Max(best, x.Box.IoU(y.Box))
			}
		}
		if best < 0.99 {
			t.Errorf("%+v: best IoU with the other engine's boxes of its class is %.4f, want >= 0.99", x, best)
		}
	}
}
