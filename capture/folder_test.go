package capture

import (
	"errors"
	"image"
	"image/color"
	"image/png"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"gocv.io/x/gocv"
)

func writePNG(t *testing.T, path string, w, h int, c color.RGBA) {
	t.Helper()
	img := image.NewRGBA(image.Rect(0, 0, w, h))
	for i := 0; i < len(img.Pix); i += 4 {
		img.Pix[i], img.Pix[i+1], img.Pix[i+2], img.Pix[i+3] = c.R, c.G, c.B, c.A
	}
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if err := png.Encode(f, img); err != nil {
		t.Fatal(err)
	}
}

// TestFolder reads images in natural name order at the folder's rate,
// ignores other files and skips images it cannot use.
func TestFolder(t *testing.T) {
	dir := t.TempDir()
	// The red channel says which image it is: 10, 20, 30.
	writePNG(t, filepath.Join(dir, "frame10.png"), 64, 48, color.RGBA{30, 0, 0, 255})
	writePNG(t, filepath.Join(dir, "frame2.PNG"), 64, 48, color.RGBA{20, 0, 0, 255})
	writePNG(t, filepath.Join(dir, "frame1.png"), 64, 48, color.RGBA{10, 0, 0, 255})
	writePNG(t, filepath.Join(dir, "zz-larger.png"), 80, 48, color.RGBA{40, 0, 0, 255})
	writePNG(t, filepath.Join(dir, ".hidden.png"), 64, 48, color.RGBA{50, 0, 0, 255})
	_ = os.WriteFile(filepath.Join(dir, "frame3.jpg"), []byte("not really a JPEG"), 0o644)
	_ = os.WriteFile(filepath.Join(dir, "notes.txt"), []byte("camera 4, north door"), 0o644)
	_ = os.Mkdir(filepath.Join(dir, "frame0.png"), 0o755) // a folder named like an image

	log, logs := testLogger()
	rd, info, err := Open(SourceSpec{ID: "stills", Folder: dir, FolderFPS: 4}, log)
	if err != nil {
		t.Fatal(err)
	}
	defer rd.Close()
	if info != (Info{Width: 64, Height: 48, FPS: 4, Frames: 5}) {
		t.Errorf("info %+v", info)
	}
	type got struct {
		red byte
		pts time.Duration
	}
	var frames []got
	for range 10 {
		m := gocv.NewMat()
		pts, err := rd.Read(&m)
		if errors.Is(err, ErrEndOfStream) {
			_ = m.Close()
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		if m.Type() != gocv.MatTypeCV8UC3 {
			t.Fatalf("type %v", m.Type())
		}
		frames = append(frames, got{red: m.GetVecbAt(0, 0)[2], pts: pts})
		_ = m.Close()
	}
	// frame1, frame2, frame3 (skipped), frame10, zz-larger (skipped): 4 fps.
	want := []got{{10, 0}, {20, 250 * time.Millisecond}, {30, 750 * time.Millisecond}}
	if !slices.Equal(frames, want) {
		t.Errorf("frames %v, want %v", frames, want)
	}
	if n := rd.(*Folder).Skipped(); n != 2 {
		t.Errorf("skipped %d, want 2", n)
	}
	for _, s := range []string{"cannot decode frame3.jpg", "zz-larger.png is 80x48, the folder's first image is 64x48"} {
		if !strings.Contains(logs.String(), s) {
			t.Errorf("log lacks %q:\n%s", s, logs)
		}
	}
}

func TestFolderNoImages(t *testing.T) {
	dir := t.TempDir()
	_ = os.WriteFile(filepath.Join(dir, "readme.txt"), []byte("x"), 0o644)
	_, _, err := Open(SourceSpec{ID: "stills", Folder: dir}, nil)
	if !errors.Is(err, ErrEmptyFolder) {
		t.Fatalf("err = %v", err)
	}
	_, _, err = Open(SourceSpec{ID: "stills", Folder: filepath.Join(dir, "absent")}, nil)
	if err == nil || err.Error() != "source stills: open "+filepath.Join(dir, "absent")+": cannot list the folder: no such file or directory" {
		t.Fatalf("err = %v", err)
	}
}

func TestNaturalCompare(t *testing.T) {
	names := []string{"f10.png", "f2.png", "f1.png", "f02.png", "a.png", "f1b.png", "f1a.png", "F1.png", "f100.png", "f9.png"}
	slices.SortFunc(names, naturalCompare)
	want := "F1.png a.png f1.png f1a.png f1b.png f02.png f2.png f9.png f10.png f100.png"
	if got := strings.Join(names, " "); got != want {
		t.Errorf("order\n got: %s\nwant: %s", got, want)
	}
}
