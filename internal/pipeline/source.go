package pipeline

import (
	"bufio"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/events"
	"tallyd/internal/config"
	"tallyd/internal/motfmt"
	"tallyd/track"
)

// Forgetter is a detector that keeps per-source state (a background model)
// and can drop it when a source reconnects.
type Forgetter interface {
	Forget(source string)
}

// sourceRun is everything owned for one source.
type sourceRun struct {
	id         string
	cfg        config.Source
	start      time.Time // wall time of the source's frame 0 for event times
	w, h       int       // frame size the rules were converted for (0 until known)
	info       capture.Info
	worker     *capture.Worker
	newTracker func() Tracker
	tracker    Tracker
	engine     *events.Engine
	scene      *scene.Scene // generated sources only, for the truth
	lines      []events.LineRule
	zones      []events.ZoneRule
	maxAge     time.Duration // frames older than this when their turn comes are dropped (0: never)
	gate       *motionGate   // nil: every frame is detected

	// Scheduler state, guarded by scheduler.mu.
	busy, finished bool
	// Owned by whichever detect worker holds the source (busy).
	conn         int64 // connection of the last frame processed (live sources)
	closedFor    int64 // last connection whose tracks were closed as lost
	lastSeq      int64
	lastPTS      time.Duration
	lastCaptured time.Time

	lostConn   atomic.Int64 // the last connection reported lost by the capture worker
	processed  atomic.Int64
	droppedOld atomic.Int64
	gated      atomic.Int64
	detectTime atomic.Int64 // nanoseconds in Detect, shared out per frame
	ages       latencies
	tracksOut  *tracksFile // nil unless tracks are written
}

// skip says why a frame is not worth detecting ("" when it is).
func (sr *sourceRun) skip(f *capture.Frame) string {
	if sr.maxAge > 0 && time.Since(f.Captured) > sr.maxAge {
		return "too_old"
	}
	if sr.gate != nil && !sr.gate.moving(f) {
		return "gated"
	}
	return ""
}

func (sr *sourceRun) countDrop(why string) {
	switch why {
	case "too_old":
		sr.droppedOld.Add(1)
	case "gated":
		sr.gated.Add(1)
	}
}

// resetTracking starts a fresh tracker after the source dropped: its tracks
// ended with the outage.
func (sr *sourceRun) resetTracking() { sr.tracker = sr.newTracker() }

// publishFrom stamps each event with its frame's age and publishes it.
func (p *Pipeline) publishFrom(ctx context.Context, sr *sourceRun, captured time.Time, evs []events.Event) {
	if len(evs) == 0 {
		return
	}
	for i := range evs {
		if !captured.IsZero() {
			ms := float64(time.Since(captured)) / float64(time.Millisecond)
			evs[i].Data.FrameAgeMS = &ms
		}
	}
	p.publish(ctx, evs)
}

// latencies keeps the most recent frame ages (capture to the end of
// publishing the frame's events) for percentiles.
type latencies struct {
	mu  sync.Mutex
	buf [1024]float64
	n   int
}

func (l *latencies) add(ms float64) {
	l.mu.Lock()
	l.buf[l.n%len(l.buf)] = ms
	l.n++
	l.mu.Unlock()
}

// percentiles returns p50 and p99 of the recent ages (0 when none).
func (l *latencies) percentiles() (p50, p99 float64) {
	l.mu.Lock()
	n := min(l.n, len(l.buf))
	v := append([]float64(nil), l.buf[:n]...)
	l.mu.Unlock()
	if n == 0 {
		return 0, 0
	}
	sort.Float64s(v)
	return v[(n-1)*50/100], v[(n-1)*99/100]
}

// tracksFile streams one source's tracks in the MOTChallenge text format.
type tracksFile struct {
	f *os.File
	w *bufio.Writer
}

func (p *Pipeline) openTrackFiles(path string) error {
	for _, sr := range p.sources {
		name := path
		if len(p.sources) > 1 {
			ext := filepath.Ext(path)
			name = strings.TrimSuffix(path, ext) + "-" + sr.id + ext
		}
		f, err := os.Create(name)
		if err != nil {
			return fmt.Errorf("tracks file: %w", err)
		}
		tf := &tracksFile{f: f, w: bufio.NewWriter(f)}
		sr.tracksOut = tf
		p.drains = append(p.drains, tf.close)
	}
	return nil
}

func (t *tracksFile) write(frame int, ts time.Duration, res track.Result) error {
	return motfmt.Write(t.w, track.OutputRows(frame, ts, res, track.DefaultLostOutput))
}

func (t *tracksFile) close() error {
	err := t.w.Flush()
	if cerr := t.f.Close(); err == nil {
		err = cerr
	}
	return err
}
