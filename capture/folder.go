package capture

import (
	"fmt"
	"log/slog"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"time"

	"gocv.io/x/gocv"

	"tallyd/internal/repeat"
)

// imageExts are the file name endings an image folder reads (any case).
var imageExts = map[string]bool{".jpg": true, ".jpeg": true, ".png": true, ".bmp": true}

// Folder reads the images of a folder in natural name order (frame2 before
// frame10) as a recorded source at a fixed frame rate. Files with other
// endings and sub-folders are ignored; an image that cannot be decoded, or
// whose size differs from the first image's, is skipped, counted and logged.
type Folder struct {
	dir   string
	files []string // image paths, in order
	fps   float64
	i     int
	w, h  int
	first gocv.Mat // first image, decoded at open
	bad   *repeat.Reporter
}

// openFolder lists the images of dir and decodes the first one, so that an
// empty or unreadable folder, or one whose first image is over maxPixels,
// fails here. Open makes a Folder with the spec's defaults in place.
func openFolder(dir string, fps float64, maxPixels int, log *slog.Logger) (*Folder, error) {
	entries, err := os.ReadDir(dir)
	if err != nil {
		return nil, fmt.Errorf("cannot list the folder: %w", unwrapPath(err))
	}
	f := &Folder{dir: dir, fps: fps, bad: repeat.New(log, "image skipped", 0)}
	var names []string
	for _, e := range entries {
		n := e.Name()
		if e.IsDir() || strings.HasPrefix(n, ".") || !imageExts[strings.ToLower(filepath.Ext(n))] {
			continue
		}
		names = append(names, n)
	}
	if len(names) == 0 {
		return nil, reasonf(ErrEmptyFolder, "no .jpg, .jpeg, .png or .bmp images in the folder")
	}
	slices.SortFunc(names, naturalCompare)
	for _, n := range names {
		f.files = append(f.files, filepath.Join(dir, n))
	}
	f.first = gocv.IMRead(f.files[0], gocv.IMReadColor)
	if f.first.Empty() {
		_ = f.first.Close()
		return nil, fmt.Errorf("cannot decode the first image %s", filepath.Base(f.files[0]))
	}
	f.w, f.h = f.first.Cols(), f.first.Rows()
	if err := checkSize(f.w, f.h, maxPixels); err != nil {
		_ = f.first.Close()
		return nil, fmt.Errorf("%s: %w", filepath.Base(f.files[0]), err)
	}
	return f, nil
}

// Info describes the folder as a source.
func (f *Folder) Info() Info {
	return Info{Width: f.w, Height: f.h, FPS: f.fps, Frames: len(f.files)}
}

// Skipped is the number of images skipped so far (undecodable or of another size).
func (f *Folder) Skipped() int64 { return f.bad.Total() }

// Read implements Reader: it decodes the next image into dst. The timestamp
// of the image at position i in the folder is i / fps, skipped ones included.
func (f *Folder) Read(dst *gocv.Mat) (time.Duration, error) {
	for f.i < len(f.files) {
		i := f.i
		f.i++
		var img gocv.Mat
		if i == 0 && f.first.Ptr() != nil {
			img, f.first = f.first, gocv.Mat{}
		} else {
			img = gocv.IMRead(f.files[i], gocv.IMReadColor)
		}
		switch {
		case img.Empty():
			_ = img.Close()
			f.bad.Note(fmt.Errorf("cannot decode %s", filepath.Base(f.files[i])))
			continue
		case img.Cols() != f.w || img.Rows() != f.h:
			err := fmt.Errorf("%s is %dx%d, the folder's first image is %dx%d", filepath.Base(f.files[i]), img.Cols(), img.Rows(), f.w, f.h)
			_ = img.Close()
			f.bad.Note(err)
			continue
		}
		_ = dst.Close()
		*dst = img
		return time.Duration(float64(i) / f.fps * float64(time.Second)), nil
	}
	f.bad.Flush()
	return 0, fmt.Errorf("read %s: %w", f.dir, ErrEndOfStream)
}

// Close implements Reader; it logs skipped images not reported yet.
func (f *Folder) Close() error {
	if f.first.Ptr() != nil {
		_ = f.first.Close()
		f.first = gocv.Mat{}
	}
	f.bad.Flush()
	return nil
}

// naturalCompare orders names with runs of digits compared by value, so that
// frame2.jpg comes before frame10.jpg; ties fall back to byte order.
func naturalCompare(a, b string) int {
	i, j := 0, 0
	for i < len(a) && j < len(b) {
		ca, cb := a[i], b[j]
		if isDigit(ca) && isDigit(cb) {
			si, sj := i, j
			for i < len(a) && isDigit(a[i]) {
				i++
			}
			for j < len(b) && isDigit(b[j]) {
				j++
			}
			na := strings.TrimLeft(a[si:i], "0")
			nb := strings.TrimLeft(b[sj:j], "0")
			if len(na) != len(nb) {
				return len(na) - len(nb)
			}
			if c := strings.Compare(na, nb); c != 0 {
				return c
			}
			continue
		}
		if ca != cb {
			return int(ca) - int(cb)
		}
		i++
		j++
	}
	if c := (len(a) - i) - (len(b) - j); c != 0 {
		return c
	}
	return strings.Compare(a, b)
}

func isDigit(c byte) bool { return c >= '0' && c <= '9' }
