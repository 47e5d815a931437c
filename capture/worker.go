package capture

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"sync"
	"sync/atomic"
	"time"

	"gocv.io/x/gocv"

	"tallyd/capture/mailbox"
	"tallyd/internal/repeat"
)

// Pace says how a recorded or generated source is replayed.
type Pace string

// Paces.
const (
	// PaceMax hands on every frame as fast as the consumer takes them: no
	// frame is dropped by the hand-over and results are deterministic.
	PaceMax Pace = "max"
	// PaceRealtime follows the source clock; when the consumer falls behind,
	// the newest frame wins and the replaced ones are counted as dropped.
	PaceRealtime Pace = "realtime"
)

// ParsePace checks a pace name.
func ParsePace(s string) (Pace, error) {
	switch Pace(s) {
	case PaceMax, PaceRealtime:
		return Pace(s), nil
	}
	return "", fmt.Errorf("unknown pace %q (want max or realtime)", s)
}

// Stats is a worker's health and counters.
type Stats struct {
	Source string
	// State is StateRunning, StateEnded, StateStopped or StateFailed; while
	// a live source (a LiveReader) runs, its link state instead (see State).
	State State
	// Err says why the source failed, or why a live source is not up; ""
	// when there is no error.
	Err string
	// Link is a live source's connection state (zero for other sources).
	Link Link
	Read int64 // frames decoded
	// Declared is the frame count the source declared when it was opened
	// (files: the container's count, folders, scenes); 0 when unknown or live.
	Declared int64
	// EndedEarly is set when a recording ended after fewer frames than
	// Declared, beyond what containers get wrong: a cut or damaged file.
	EndedEarly     bool
	DroppedForRate int64 // frames dropped to hold the target rate
	DroppedMailbox int64 // frames replaced by a newer one before the consumer took them
	DroppedPrep    int64 // frames whose detector input could not be prepared
	LastFrame      time.Time
}

// Lost tells the pipeline that a live source's connection ended.
type Lost struct {
	Source  string
	Conn    int64 // the connection that ended; its frames carried Frame.Conn == Conn
	LastSeq int64 // Seq of the last frame read on it; -1 when none was
	Err     error // why, password hidden
}

// Dropped is every frame that was read but not handed on.
func (s Stats) Dropped() int64 { return s.DroppedForRate + s.DroppedMailbox + s.DroppedPrep }

// Worker reads one source on its own goroutine and posts frames to Out.
type Worker struct {
	ID     string
	Out    *mailbox.Mailbox[*Frame]
	src    Reader
	info   Info
	pace   Pace
	target float64 // frames per second to hand on; 0 = all
	log    *slog.Logger
	// Prepare, when set before Run, is called on each frame that will be
	// handed on (after rate dropping), on the worker's goroutine. An error
	// drops the frame and is counted, and logged once per period with the
	// count.
	Prepare func(*Frame) error
	// OnLost, when set before Run, is called on the worker's goroutine each
	// time a live source (a LiveReader) loses its connection: after the last
	// frame of that connection was handed on, before any frame of the next.
	// It must not block. Tracks and zone stays of the source should be closed.
	OnLost func(Lost)

	prepErrs *repeat.Reporter

	read, dropForRate atomic.Int64
	lastFrame         atomic.Int64 // unix nanos
	endedEarly        atomic.Bool
	mu                sync.Mutex
	state             State
	err               string
}

// NewWorker makes a worker for an opened source. target is the processing
// rate (0: every frame).
func NewWorker(id string, src Reader, info Info, pace Pace, target float64, log *slog.Logger) *Worker {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	log = log.With("source", id)
	return &Worker{
		ID:       id,
		Out:      mailbox.New(func(f *Frame) { f.Close() }),
		src:      src,
		info:     info,
		pace:     pace,
		target:   target,
		log:      log,
		prepErrs: repeat.New(log, "preparing frames failed; frames dropped", 0).AtLevel(slog.LevelError),
		state:    StateRunning,
	}
}

// Run reads until the source ends, fails or ctx is cancelled, then closes
// Out and the source. It returns nil at the end of a stream.
func (w *Worker) Run(ctx context.Context) (err error) {
	defer func() {
		w.Out.Close()
		_ = w.src.Close()
		w.prepErrs.Flush()
		state := StateEnded
		switch {
		case ctx.Err() != nil:
			state, err = StateStopped, nil
		case err != nil:
			state = StateFailed
		}
		w.setState(state, err)
	}()
	var (
		start   = time.Now()
		period  time.Duration
		nextDue time.Duration
		seq     int64
	)
	if w.target > 0 {
		period = time.Duration(float64(time.Second) / w.target)
	}
	sleepToClock := w.pace == PaceRealtime && !w.info.Live
	live, _ := w.src.(LiveReader)
	lastSeq := int64(-1) // of the current connection
	for ctx.Err() == nil {
		m := gocv.NewMat()
		var (
			pts  time.Duration
			rerr error
			conn int64
		)
		if live != nil {
			pts, rerr = live.ReadContext(ctx, &m)
			conn = live.Link().Conn
		} else {
			pts, rerr = w.src.Read(&m)
		}
		if rerr != nil {
			_ = m.Close()
			switch {
			case errors.Is(rerr, ErrEndOfStream):
				if errors.Is(rerr, ErrEndedEarly) {
					w.endedEarly.Store(true)
					w.log.Warn("recording ended early", "read", w.read.Load(), "declared", w.info.Frames, "err", rerr)
				}
				return nil
			case live != nil && errors.Is(rerr, ErrDisconnected):
				if w.OnLost != nil {
					w.OnLost(Lost{Source: w.ID, Conn: conn, LastSeq: lastSeq, Err: rerr})
				}
				lastSeq = -1
				continue
			}
			return rerr
		}
		w.read.Add(1)
		now := time.Now()
		w.lastFrame.Store(now.UnixNano())
		s := seq
		seq++
		lastSeq = s
		if period > 0 {
			// Hold the target rate on the source clock; a tenth of a period
			// of slack absorbs timestamp jitter.
			if pts+period/10 < nextDue {
				w.dropForRate.Add(1)
				_ = m.Close()
				continue
			}
			nextDue += period
			if nextDue < pts {
				nextDue = pts + period
			}
		}
		f := &Frame{Source: w.ID, Seq: s, PTS: pts, Captured: now, Mat: m, Conn: conn}
		if w.Prepare != nil {
			if perr := w.Prepare(f); perr != nil {
				w.prepErrs.Note(perr, "seq", s)
				f.Close()
				continue
			}
		}
		if sleepToClock {
			if d := time.Until(start.Add(pts)); d > 0 {
				select {
				case <-time.After(d):
				case <-ctx.Done():
					// Stopping: a frame already read is still handed on
					// (or counted as dropped), never lost.
					w.Out.Put(f)
					return nil
				}
			}
		}
		if w.pace == PaceMax && !w.info.Live {
			if perr := w.Out.PutWait(ctx, f); perr != nil {
				w.Out.Put(f)
				return nil
			}
		} else {
			w.Out.Put(f)
		}
	}
	return nil
}

func (w *Worker) setState(state State, err error) {
	w.mu.Lock()
	defer w.mu.Unlock()
	w.state, w.err = state, ""
	if err != nil {
		w.err = err.Error()
	}
}

// Stats reports the worker's health and counters; safe from any goroutine.
func (w *Worker) Stats() Stats {
	w.mu.Lock()
	st := Stats{Source: w.ID, State: w.state, Err: w.err}
	w.mu.Unlock()
	if live, ok := w.src.(LiveReader); ok {
		st.Link = live.Link()
		if st.State == StateRunning {
			st.State, st.Err = st.Link.State, st.Link.Reason
		}
	} else {
		st.Declared = int64(w.info.Frames)
	}
	st.Read = w.read.Load()
	st.EndedEarly = w.endedEarly.Load()
	st.DroppedForRate = w.dropForRate.Load()
	st.DroppedMailbox = w.Out.Dropped()
	st.DroppedPrep = w.prepErrs.Total()
	if ns := w.lastFrame.Load(); ns != 0 {
		st.LastFrame = time.Unix(0, ns)
	}
	return st
}
