package pipeline

import (
	"errors"
	"fmt"
	"maps"
	"sync"
	"time"

	"gocv.io/x/gocv"

	"tallyd/events"
	"tallyd/internal/overlay"
	"tallyd/track"
)

// Snapshot errors, for callers that branch (the HTTP server's status codes).
var (
	ErrUnknownSource = errors.New("no such source")
	ErrNoFrame       = errors.New("no frame processed yet")
)

// viewEvery is how often a source's newest frame is copied for snapshots and
// the preview: often enough for a 10 fps preview, rare enough to cost
// nothing beside detection (one copy of a frame, ~0.1 ms at 768x576).
const viewEvery = 100 * time.Millisecond

// view is what a source shows the operator: a copy of a recent processed
// frame with the tracks of that frame, and the counts so far. The detect
// worker holding the source writes it; snapshots read it.
type view struct {
	mu        sync.Mutex
	frame     gocv.Mat // BGR copy, valid when has
	has       bool
	at        time.Time
	seq       int64
	pts       time.Duration
	lines     []events.LineRule
	zones     []events.ZoneRule
	active    []track.Track
	lost      []track.Track
	totals    map[string]events.Totals
	occupancy map[string]int
	w, h      int
}

// update records a processed frame: the image and its tracks at most every
// viewEvery, or every time with every.
func (v *view) update(f gocv.Mat, seq int64, pts time.Duration, res track.Result, every bool) {
	now := time.Now()
	v.mu.Lock()
	defer v.mu.Unlock()
	if !every && v.has && now.Sub(v.at) < viewEvery {
		return
	}
	if !v.has {
		v.frame, v.has = gocv.NewMat(), true
	}
	f.CopyTo(&v.frame)
	v.at, v.seq, v.pts = now, seq, pts
	v.active = append(v.active[:0], res.Active...)
	v.lost = append(v.lost[:0], res.Lost...)
}

// setCounts copies the source's rules and counts; called when they change
// (events published, rules converted or reloaded), not per frame.
func (v *view) setCounts(st *sourceStages) {
	totals, occ := st.engine.Totals(), st.engine.Occupancy()
	v.mu.Lock()
	defer v.mu.Unlock()
	v.totals, v.occupancy = totals, occ
	v.w, v.h = st.w, st.h
	v.lines, v.zones = st.lines, st.zones
}

// counts returns the totals, occupancy and frame size seen last.
func (v *view) counts() (map[string]events.Totals, map[string]int, int, int) {
	v.mu.Lock()
	defer v.mu.Unlock()
	return maps.Clone(v.totals), maps.Clone(v.occupancy), v.w, v.h
}

// render draws the newest frame, with the overlay unless plain, and encodes
// it (".jpg" or ".png").
func (v *view) render(ext string, plain bool) ([]byte, error) {
	v.mu.Lock()
	if !v.has {
		v.mu.Unlock()
		return nil, ErrNoFrame
	}
	img := v.frame.Clone()
	ov := overlay.View{Lines: v.lines, Zones: v.zones, Active: v.active, Lost: v.lost,
		Totals: maps.Clone(v.totals), Occupancy: maps.Clone(v.occupancy)}
	v.mu.Unlock()
	defer img.Close()
	if !plain {
		overlay.Draw(&img, ov)
	}
	return encode(ext, img)
}

func (v *view) close() {
	v.mu.Lock()
	defer v.mu.Unlock()
	if v.has {
		_ = v.frame.Close()
	}
	v.frame, v.has = gocv.Mat{}, false
}

// encode writes img as JPEG or PNG.
func encode(ext string, img gocv.Mat) ([]byte, error) {
	var fe gocv.FileExt
	switch ext {
	case ".jpg", ".jpeg":
		fe = gocv.JPEGFileExt
	case ".png":
		fe = gocv.PNGFileExt
	default:
		return nil, fmt.Errorf("image format %q: want .jpg or .png", ext)
	}
	buf, err := gocv.IMEncode(fe, img)
	if err != nil {
		return nil, fmt.Errorf("encode %s: %w", ext, err)
	}
	defer buf.Close()
	return append([]byte(nil), buf.GetBytes()...), nil
}

// Snapshot is a source's newest processed frame as JPEG (ext ".jpg") or PNG
// (".png"), with the rules, the tracks and the counts drawn unless plain.
func (p *Pipeline) Snapshot(source, ext string, plain bool) ([]byte, error) {
	sr := p.source(source)
	if sr == nil {
		return nil, fmt.Errorf("%w: %q", ErrUnknownSource, source)
	}
	return sr.view.render(ext, plain)
}

func (p *Pipeline) source(id string) *sourceRun {
	for _, sr := range p.sources {
		if sr.id == id {
			return sr
		}
	}
	return nil
}

// SnapshotTime is the source time of the frame Snapshot draws.
func (p *Pipeline) SnapshotTime(source string) time.Duration {
	if sr := p.source(source); sr != nil {
		sr.view.mu.Lock()
		defer sr.view.mu.Unlock()
		return sr.view.pts
	}
	return 0
}

// SnapshotFrame is the index of the frame Snapshot draws.
func (p *Pipeline) SnapshotFrame(source string) int64 {
	if sr := p.source(source); sr != nil {
		sr.view.mu.Lock()
		defer sr.view.mu.Unlock()
		return sr.view.seq
	}
	return 0
}
