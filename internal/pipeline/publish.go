package pipeline

import (
	"bufio"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"time"

	"tallyd/events"
	"tallyd/internal/motfmt"
	"tallyd/track"
)

// publish stamps each event with its frame's age and hands it to the
// delivery, which never waits; a source's counters follow its events.
func (p *Pipeline) publish(sr *sourceRun, captured time.Time, evs []events.Event) {
	if len(evs) == 0 {
		return
	}
	if sh := sr.shared; sh != nil {
		hr, ok := sh.valid(captured)
		if !ok {
			sr.count.fenced.Add(int64(len(evs)))
			p.fenced.Note(fmt.Errorf("source %s: %d events", sr.id, len(evs)), "source", sr.id)
			return
		}
		for i := range evs {
			evs[i].Data.Lease = hr.h.Token
		}
	}
	for i := range evs {
		ev := &evs[i]
		if !captured.IsZero() {
			ms := float64(time.Since(captured).Round(100*time.Microsecond)) / float64(time.Millisecond)
			ev.Data.FrameAgeMS = &ms
		}
		p.out.offer(*ev)
		sr.count.events.Add(1)
	}
	if len(evs) > 0 {
		sr.view.setCounts(&sr.stages)
	}
}

// ReopenFiles reopens the JSON-lines file (after log rotation moved it).
func (p *Pipeline) ReopenFiles() error {
	if p.jsonl == nil {
		return nil
	}
	return p.jsonl.Reopen()
}

// tracksFile streams one source's tracks in the MOTChallenge text format.
type tracksFile struct {
	f   *os.File
	w   *bufio.Writer
	out *track.Output // nil until the first frame
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
		sr.tracks = tf
		p.drains = append(p.drains, tf.close)
	}
	return nil
}

// write appends a frame's rows: the filtered box of each matched track,
// clipped inside the w x h frame, and a newly confirmed track's earlier
// frames (track.DefaultOutputConfig); nothing for lost tracks.
func (t *tracksFile) write(frame int, res track.Result, w, h int) error {
	if t.out == nil {
		cfg := track.DefaultOutputConfig()
		cfg.Width, cfg.Height = float64(w), float64(h)
		t.out = track.NewOutput(cfg)
	}
	return motfmt.Write(t.w, t.out.Rows(frame, res))
}

// restart forgets the tracks written so far (a new tracker, or a new frame
// size); the next write starts a new output.
func (t *tracksFile) restart() { t.out = nil }

func (t *tracksFile) close() error {
	err := t.w.Flush()
	if cerr := t.f.Close(); err == nil {
		err = cerr
	}
	return err
}
