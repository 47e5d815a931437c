package pipeline

import (
	"bufio"
	"context"
	"fmt"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"time"

	"tallyd/events"
	"tallyd/internal/motfmt"
	"tallyd/internal/repeat"
	"tallyd/track"
)

// outlet is one publisher and its failures, reported once per period.
type outlet struct {
	name  string
	pub   Publisher
	fails *repeat.Reporter
}

func (p *Pipeline) addOutlet(name string, pub Publisher) {
	p.outlets = append(p.outlets, &outlet{name: name, pub: pub,
		fails: repeat.New(p.log, "publishing failed", repeat.DefaultPeriod).AtLevel(slog.LevelError)})
}

// publish stamps each event with its frame's age and hands it to every
// publisher. An event is published when every publisher accepted it;
// failures are counted per source and logged once per period per publisher.
func (p *Pipeline) publish(ctx context.Context, sr *sourceRun, captured time.Time, evs []events.Event) {
	for i := range evs {
		ev := &evs[i]
		if !captured.IsZero() {
			ms := float64(time.Since(captured).Round(100*time.Microsecond)) / float64(time.Millisecond)
			ev.Data.FrameAgeMS = &ms
		}
		ok := true
		for _, o := range p.outlets {
			if err := o.pub.Publish(ctx, *ev); err != nil {
				ok = false
				o.fails.Note(err, "sink", o.name, "source", sr.id)
			}
		}
		if ok {
			p.published.Add(1)
			sr.count.events.Add(1)
		} else {
			p.failed.Add(1)
			sr.count.eventsFailed.Add(1)
		}
	}
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
		sr.tracks = tf
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
