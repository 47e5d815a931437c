package pipeline

import (
	"fmt"
	"path/filepath"
	"strings"

	"gocv.io/x/gocv"

	"tallyd/internal/overlay"
	"tallyd/track"
)

// annotator writes one source's processed frames with the overlay drawn
// (boxes, ids, rules, running counts) for checking counts by eye.
type annotator struct {
	path   string
	fps    float64
	w      *gocv.VideoWriter
	size   [2]int
	frames int64
}

// fourccFor picks a codec OpenCV's FFmpeg backend writes for the file's
// extension: MPEG-4 Part 2 for .mp4 (no patent-encumbered encoder needed),
// Motion-JPEG for .avi.
func fourccFor(path string) (string, error) {
	switch strings.ToLower(filepath.Ext(path)) {
	case ".mp4", ".m4v":
		return "mp4v", nil
	case ".avi":
		return "MJPG", nil
	}
	return "", fmt.Errorf("annotated video %q: want a .mp4 or .avi file", path)
}

func (a *annotator) write(f gocv.Mat, st *sourceStages, res track.Result, occ map[string]int) error {
	if a.w == nil {
		fourcc, err := fourccFor(a.path)
		if err != nil {
			return err
		}
		w, err := gocv.VideoWriterFile(a.path, fourcc, a.fps, f.Cols(), f.Rows(), true)
		if err != nil {
			return fmt.Errorf("open %s: %w", a.path, err)
		}
		if !w.IsOpened() {
			_ = w.Close()
			return fmt.Errorf("open %s: OpenCV could not start a %s writer", a.path, fourcc)
		}
		a.w, a.size = w, [2]int{f.Cols(), f.Rows()}
	}
	if f.Cols() != a.size[0] || f.Rows() != a.size[1] {
		return fmt.Errorf("frame size changed from %dx%d to %dx%d; one video holds one size", a.size[0], a.size[1], f.Cols(), f.Rows())
	}
	img := f.Clone()
	defer img.Close()
	overlay.Draw(&img, overlay.View{Lines: st.lines, Zones: st.zones, Active: res.Active, Lost: res.Lost,
		Totals: st.engine.Totals(), Occupancy: occ})
	if err := a.w.Write(img); err != nil {
		return err
	}
	a.frames++
	return nil
}

func (a *annotator) close() error {
	if a.w == nil {
		return nil
	}
	return a.w.Close()
}

// AnnotatedFrames is the number of frames written to each source's annotated
// video.
func (p *Pipeline) AnnotatedFrames() map[string]int64 {
	m := map[string]int64{}
	for _, sr := range p.sources {
		if sr.annotate != nil {
			m[sr.id] = sr.annotate.frames
		}
	}
	return m
}

// openAnnotators starts an annotated video per source at path ("-<source>"
// before the extension when there are several sources).
func (p *Pipeline) openAnnotators(path string) error {
	if _, err := fourccFor(path); err != nil {
		return err
	}
	for _, sr := range p.sources {
		name := path
		if len(p.sources) > 1 {
			ext := filepath.Ext(path)
			name = strings.TrimSuffix(path, ext) + "-" + sr.id + ext
		}
		fps := sr.info.FPS
		if fps <= 0 {
			fps = 10
		}
		a := &annotator{path: name, fps: fps}
		sr.annotate = a
		p.drains = append(p.drains, a.close)
	}
	return nil
}
