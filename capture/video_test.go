package capture

import (
	"context"
	"errors"
	"fmt"
	"image/color"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"testing"

	"gocv.io/x/gocv"
)

// writeAVI writes an n-frame Motion-JPEG AVI of w x h frames of noise (so
// that every frame holds plenty of JPEG data; the same noise every time)
// through OpenCV's video writer. Over 4K UHD it writes plain grey frames,
// which encode in a fraction of the time.
func writeAVI(t testing.TB, name string, w, h, n int) string {
	t.Helper()
	runtime.LockOSThread() // OpenCV's random generator is per thread
	defer runtime.UnlockOSThread()
	gocv.SetRNGSeed(1)
	path := filepath.Join(t.TempDir(), name)
	large := w*h > 3840*2160
	vw, err := gocv.VideoWriterFile(path, "MJPG", 25, w, h, !large)
	if err != nil {
		t.Fatal(err)
	}
	defer vw.Close()
	typ := gocv.MatTypeCV8UC3
	if large {
		typ = gocv.MatTypeCV8UC1
	}
	m := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(90, 90, 90, 0), h, w, typ)
	defer m.Close()
	for range n {
		if !large {
			gocv.RandU(&m, gocv.NewScalar(0, 0, 0, 0), gocv.NewScalar(255, 255, 255, 0))
		}
		if err := vw.Write(m); err != nil {
			t.Fatal(err)
		}
	}
	return path
}

// readAll reads a source to its end and returns the frame count and the
// error that ended it.
func readAll(rd Reader) (int, error) {
	m := gocv.NewMat()
	defer m.Close()
	for n := 0; ; n++ {
		if _, err := rd.Read(&m); err != nil {
			return n, err
		}
	}
}

// TestCVCaptureErrors provokes errors through the capture shim
// (cvcap.cpp): OpenCV's own exception for malformed open parameters, and a
// read or get on a closed capture, which would otherwise crash.
func TestCVCaptureErrors(t *testing.T) {
	path := writeAVI(t, "small.avi", 64, 48, 3)

	odd := timeoutParams(DefaultOpenTimeout, 0)[:1] // a property without its value
	c, err := openCVName(path, apiFFmpeg, odd)
	// OpenCV 4.6 checks the pairs in VideoCaptureParameters (cap_interface.hpp).
	want := "opencv open: OpenCV(4.6.0) ./modules/videoio/src/cap_interface.hpp:76: error: (-28:Unknown error code -28) " +
		"Vector of VideoWriter parameters should have even length in function 'VideoParameters'"
	if err == nil || err.Error() != want || !errors.Is(err, errOpenCV) {
		_ = c.close()
		t.Fatalf("open with odd parameters:\n got: %v\nwant: %s", err, want)
	}

	if _, err := openCVName(filepath.Join(t.TempDir(), "absent.avi"), apiFFmpeg, nil); err != errNotReadable {
		t.Errorf("open of a missing file: %v, want errNotReadable", err)
	}

	c, err = openCVName(path, apiFFmpeg, timeoutParams(DefaultOpenTimeout, DefaultReadTimeout))
	if err != nil {
		t.Fatal(err)
	}
	m := gocv.NewMat()
	defer m.Close()
	if ok, err := c.read(&m); !ok || err != nil || m.Cols() != 64 {
		t.Fatalf("read: %v %v, %dx%d", ok, err, m.Cols(), m.Rows())
	}
	if n, err := c.get(gocv.VideoCaptureFrameCount); n != 3 || err != nil {
		t.Errorf("frame count %v, %v", n, err)
	}
	if err := c.close(); err != nil {
		t.Fatal(err)
	}
	if _, err := c.read(&m); err == nil || err.Error() != "opencv read: no capture (closed or never opened)" {
		t.Errorf("read after close: %v", err)
	}
	if _, err := c.get(gocv.VideoCaptureFPS); err == nil || err.Error() != "opencv get: no capture (closed or never opened)" {
		t.Errorf("get after close: %v", err)
	}
	if err := c.close(); err != nil {
		t.Errorf("second close: %v", err)
	}
}

// TestOpenTooLarge: an 8192x8192 video is refused at open with an error
// that names the size and the limit; a frame at the limit is accepted.
func TestOpenTooLarge(t *testing.T) {
	t.Parallel() // writing the large video takes seconds of CPU; the live tests mostly wait
	big := writeAVI(t, "big.avi", 8192, 8192, 1)
	_, _, err := Open(SourceSpec{ID: "big", File: big}, nil)
	want := "source big: open " + big + ": frame size 8192x8192 (67.1 megapixels) is over the limit of 16.0 megapixels (max_frame_pixels)"
	if err == nil || err.Error() != want {
		t.Fatalf("open:\n got: %v\nwant: %s", err, want)
	}
	if !errors.Is(err, ErrTooLarge) || !errors.Is(err, ErrUnsupported) {
		t.Errorf("error matches ErrTooLarge %v, ErrUnsupported %v", errors.Is(err, ErrTooLarge), errors.Is(err, ErrUnsupported))
	}

	small := writeAVI(t, "small.avi", 640, 480, 2)
	for _, tt := range []struct {
		limit int
		want  string
	}{
		{640*480 - 1, "source cam: open " + small + ": frame size 640x480 (0.3 megapixels) is over the limit of 0.3 megapixels (max_frame_pixels)"},
		{640 * 480, ""},
	} {
		rd, info, err := Open(SourceSpec{ID: "cam", File: small, MaxFramePixels: tt.limit}, nil)
		if tt.want == "" {
			if err != nil || info.Width != 640 || info.Height != 480 {
				t.Errorf("limit %d: %v, %+v", tt.limit, err, info)
			} else {
				_ = rd.Close()
			}
			continue
		}
		if err == nil || err.Error() != tt.want {
			t.Errorf("limit %d:\n got: %v\nwant: %s", tt.limit, err, tt.want)
		}
	}

	dir := t.TempDir()
	writePNG(t, filepath.Join(dir, "a1.png"), 640, 480, color.RGBA{200, 0, 0, 255})
	_, _, err = Open(SourceSpec{ID: "stills", Folder: dir, MaxFramePixels: 200_000}, nil)
	want = "source stills: open " + dir + ": a1.png: frame size 640x480 (0.3 megapixels) is over the limit of 0.2 megapixels (max_frame_pixels)"
	if err == nil || err.Error() != want || !errors.Is(err, ErrTooLarge) {
		t.Errorf("folder:\n got: %v\nwant: %s", err, want)
	}
}

// TestEndedEarly cuts a recording in half: it ends with a warning that
// says how many of the declared frames were read, and Stats says it was
// short. The whole recording ends quietly.
func TestEndedEarly(t *testing.T) {
	path := writeAVI(t, "whole.avi", 160, 120, 40)
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	half := filepath.Join(t.TempDir(), "half.avi")
	if err := os.WriteFile(half, data[:len(data)/2], 0o644); err != nil {
		t.Fatal(err)
	}
	for _, tt := range []struct {
		path  string
		early bool
	}{{path, false}, {half, true}} {
		t.Run(filepath.Base(tt.path), func(t *testing.T) {
			log, logs := testLogger()
			rd, info, err := Open(SourceSpec{ID: "cam", File: tt.path}, log)
			if err != nil {
				t.Fatal(err)
			}
			if info.Frames != 40 {
				t.Fatalf("declared %d frames, want the 40 written", info.Frames)
			}
			w := NewWorker("cam", rd, info, PaceMax, 0, log)
			c := consume(w)
			if err := w.Run(context.Background()); err != nil {
				t.Fatal(err)
			}
			<-c.done
			st := w.Stats()
			if st.State != StateEnded || st.Err != "" || st.Declared != 40 || st.EndedEarly != tt.early {
				t.Errorf("stats %+v", st)
			}
			warned := strings.Contains(logs.String(), `level=WARN msg="recording ended early"`)
			switch {
			case !tt.early && (st.Read != 40 || warned):
				t.Errorf("whole file: read %d, warned %v:\n%s", st.Read, warned, logs)
			case tt.early && (st.Read < 10 || st.Read > 30 || !warned ||
				!strings.Contains(logs.String(), fmt.Sprintf("read=%d declared=40", st.Read))):
				t.Errorf("half file: read %d, log:\n%s", st.Read, logs)
			}
		})
	}
}

func TestEndedEarlyTolerance(t *testing.T) {
	for _, tt := range []struct {
		read, declared int64
		want           bool
	}{
		{50, 50, false}, {48, 50, false}, {47, 50, true}, // 2 frames
		{990, 1000, false}, {989, 1000, true}, // 1%
		{60, 50, false}, {0, 0, false}, {10, 0, false},
	} {
		if got := endedEarly(tt.read, tt.declared); got != tt.want {
			t.Errorf("endedEarly(%d, %d) = %v", tt.read, tt.declared, got)
		}
	}
}
