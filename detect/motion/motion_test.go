package motion

import (
	"context"
	"errors"
	"image"
	"image/color"
	"math"
	"testing"

	"gocv.io/x/gocv"

	"tallyd/capture"
)

// TestMOG2Errors provokes real OpenCV errors through the shim in mog2.cpp:
// each comes back as an error instead of aborting the process, and the model
// keeps working after it.
func TestMOG2Errors(t *testing.T) {
	m, err := newMOG2(100, 16, true)
	if err != nil {
		t.Fatal(err)
	}
	fg := gocv.NewMat()
	defer fg.Close()

	huge := hugeFrame()
	defer huge.Close()
	threeD := gocv.NewMatWithSizes([]int{4, 5, 6}, gocv.MatTypeCV8UC3)
	defer threeD.Close()
	frame := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(90, 90, 90, 0), 48, 64, gocv.MatTypeCV8UC3)
	defer frame.Close()

	tests := []struct {
		name string
		src  gocv.Mat
		want string
	}{
		// The model of a 144-megapixel frame has more values than an int
		// counts: OpenCV 4.6 asserts on the negative size.
		{"144 megapixels", huge, "opencv mog2 apply: OpenCV(4.6.0) ./modules/core/src/matrix.cpp:246: error: (-215:Assertion failed) s >= 0 in function 'setSize'"},
		// A 3-D array gives a negative buffer size: a std::exception that is
		// not a cv::Exception.
		{"three dimensions", threeD, "opencv mog2 apply: std::bad_array_new_length"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			err := m.apply(tt.src, &fg, -1)
			if err == nil || err.Error() != tt.want {
				t.Fatalf("apply error\n got: %v\nwant: %s", err, tt.want)
			}
			if !errors.Is(err, errOpenCV) {
				t.Errorf("error does not wrap errOpenCV: %v", err)
			}
			if err := m.apply(frame, &fg, -1); err != nil || fg.Rows() != 48 || fg.Cols() != 64 {
				t.Fatalf("apply after the error: %v, mask %dx%d", err, fg.Cols(), fg.Rows())
			}
		})
	}

	if err := m.close(); err != nil {
		t.Fatal(err)
	}
	if err := m.close(); err != nil {
		t.Fatalf("second close: %v", err)
	}
	if err := m.apply(frame, &fg, -1); err == nil || err.Error() != "opencv mog2 apply: no background model (closed or never made)" {
		t.Fatalf("apply after close: %v", err)
	}
}

// hugeFrame is a 12000x12000 8-bit BGR frame, left uninitialized so that
// it costs no memory until written.
func hugeFrame() gocv.Mat { return gocv.NewMatWithSizes([]int{12000, 12000}, gocv.MatTypeCV8UC3) }

// TestDetectError: a frame far over capture.DefaultMaxFramePixels used to
// abort the process in the background model; now Detect returns OpenCV's
// error naming the frame and the source.
func TestDetectError(t *testing.T) {
	d := New(testConfig())
	defer d.Close()
	f := &capture.Frame{Source: "gate", Seq: 7, Mat: hugeFrame()}
	defer f.Close()
	_, err := d.Detect(context.Background(), []*capture.Frame{f})
	want := "motion detector: frame 7 of gate: opencv mog2 apply: OpenCV(4.6.0) ./modules/core/src/matrix.cpp:246: error: (-215:Assertion failed) s >= 0 in function 'setSize'"
	if err == nil || err.Error() != want {
		t.Fatalf("Detect error\n got: %v\nwant: %s", err, want)
	}
}

func testConfig() Config {
	return Config{History: 100, VarThreshold: 16, LearningRate: 0.005, WarmupFrames: 10,
		MinArea: 50, OpenKernel: 3, CloseKernel: 5, Class: "person"}
}

// TestDetectMovingSquare learns a still grey background, then finds a white
// square moving across it: one box, where the square was drawn.
func TestDetectMovingSquare(t *testing.T) {
	d := New(testConfig())
	defer d.Close()
	const w, h = 160, 120
	for i := range 30 {
		m := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(90, 90, 90, 0), h, w, gocv.MatTypeCV8UC3)
		sq := image.Rect(0, 0, 0, 0)
		if i >= 15 {
			sq = image.Rect(20+4*(i-15), 40, 40+4*(i-15), 70) // 20x30 px, 4 px a frame
			gocv.Rectangle(&m, sq, color.RGBA{255, 255, 255, 0}, -1)
		}
		f := &capture.Frame{Source: "gate", Seq: int64(i), Mat: m}
		dets, err := d.Detect(context.Background(), []*capture.Frame{f})
		f.Close()
		if err != nil {
			t.Fatalf("frame %d: %v", i, err)
		}
		switch {
		case i < 15 && len(dets[0]) != 0:
			t.Fatalf("frame %d of a still background: %v", i, dets[0])
		case i >= 16:
			if len(dets[0]) != 1 {
				t.Fatalf("frame %d: %d boxes, want 1: %v", i, len(dets[0]), dets[0])
			}
			b := dets[0][0].Box
			// The mask's morphology may move an edge by a pixel or two.
			if math.Abs(b.X1-float64(sq.Min.X)) > 2 || math.Abs(b.Y1-float64(sq.Min.Y)) > 2 ||
				math.Abs(b.X2-float64(sq.Max.X)) > 2 || math.Abs(b.Y2-float64(sq.Max.Y)) > 2 {
				t.Fatalf("frame %d: box %+v, square drawn at %v", i, b, sq)
			}
			if c := dets[0][0].Class; c != "person" {
				t.Errorf("class %q", c)
			}
		}
	}
}
