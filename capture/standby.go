package capture

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"sync"
	"time"

	"gocv.io/x/gocv"

	"tallyd/capture/scene"
)

// Opener opens a live source when a Standby is switched on. The reader's
// timestamps must count from the Standby's epoch (see ShiftPTS).
type Opener func() (LiveReader, error)

// Standby is a live source that is read only while it is switched on: a
// site's sources are shared by several daemons and only the one holding a
// source reads it. Each on-period has a tag (the hold) that the frames read
// during it can be traced to: every connection opened in an on-period gets a
// new connection number, and Tag tells which on-period a connection belongs
// to. Switching off, or on with another tag, closes the source; the next
// read reports the end of the connection once (ErrDisconnected), as a
// camera that went away, so the pipeline closes what it held open.
//
// Reads run on one goroutine; On, Off, Tag, Link and Close may be called
// from any.
type Standby struct {
	open Opener
	log  *slog.Logger

	mu       sync.Mutex
	tag      any   // the current on-period's tag; nil when off
	gen      int64 // bumped by On and Off
	wake     chan struct{}
	cancel   context.CancelFunc // ends the read in progress
	closed   bool
	offSince time.Time
	conn     int64         // connection number of the frames read last
	tags     map[int64]any // connection -> tag
	cur      LiveReader    // open while on; read by the reading goroutine
	curGen   int64         // gen the current reader was opened for
	curTag   any           // its tag
	inner    int64         // cur's own connection number at the last frame
	readAny  bool          // a frame was read on conn since it began
	lastOpen error         // the last open failure
	openFail time.Time     // when it failed
}

// keptTags is how many recent connections Tag answers for.
const keptTags = 16

// NewStandby makes a switched-off shared source.
func NewStandby(open Opener, log *slog.Logger) *Standby {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	return &Standby{open: open, log: log, wake: make(chan struct{}, 1), offSince: time.Now(), tags: map[int64]any{}}
}

// ErrHoldEnded is wrapped (with ErrDisconnected) by the read that reports
// the end of an on-period's connection.
var ErrHoldEnded = errors.New("the source moved to another reader")

// On starts reading under tag (non-nil); a source already on under another
// tag is closed first.
func (s *Standby) On(tag any) {
	if tag == nil {
		panic("capture: Standby.On with a nil tag")
	}
	s.switchTo(tag)
}

// Off stops reading if the current on-period's tag is tag (a later On
// under another tag stays on); the source is closed.
func (s *Standby) Off(tag any) {
	s.mu.Lock()
	cur := s.tag
	s.mu.Unlock()
	if cur == tag {
		s.switchTo(nil)
	}
}

func (s *Standby) switchTo(tag any) {
	s.mu.Lock()
	s.tag = tag
	s.gen++
	if tag == nil {
		s.offSince = time.Now()
	}
	if s.cancel != nil {
		s.cancel()
	}
	s.mu.Unlock()
	select {
	case s.wake <- struct{}{}:
	default:
	}
}

// Tag is the tag of the on-period in which connection conn was opened (nil
// when unknown, or older than the last keptTags connections).
func (s *Standby) Tag(conn int64) any {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.tags[conn]
}

// Read implements Reader.
func (s *Standby) Read(dst *gocv.Mat) (time.Duration, error) {
	return s.ReadContext(context.Background(), dst)
}

// ReadContext implements LiveReader: it waits while the source is off and
// returns frames while it is on.
func (s *Standby) ReadContext(ctx context.Context, dst *gocv.Mat) (time.Duration, error) {
	for {
		if err := ctx.Err(); err != nil {
			return 0, err
		}
		s.mu.Lock()
		if s.closed {
			s.mu.Unlock()
			return 0, fmt.Errorf("standby source: %w", errReaderClosed)
		}
		tag, gen := s.tag, s.gen
		s.mu.Unlock()
		if s.cur != nil && gen != s.curGen {
			s.closeCur()
			if s.readAny {
				s.readAny = false
				return 0, fmt.Errorf("%w: %w", ErrHoldEnded, ErrDisconnected)
			}
		}
		if tag == nil {
			select {
			case <-s.wake:
			case <-ctx.Done():
			}
			continue
		}
		if s.cur == nil {
			r, err := s.open()
			if err != nil {
				s.mu.Lock()
				s.lastOpen, s.openFail = err, time.Now()
				s.mu.Unlock()
				s.log.Warn("opening the shared source failed; retrying", "err", err)
				select {
				case <-time.After(time.Second):
				case <-s.wake:
				case <-ctx.Done():
				}
				continue
			}
			s.mu.Lock()
			s.cur, s.curGen, s.curTag, s.inner = r, gen, tag, -1
			s.lastOpen = nil
			s.mu.Unlock()
		}
		rctx, cancel := context.WithCancel(ctx)
		s.mu.Lock()
		if s.gen != gen {
			s.mu.Unlock()
			cancel()
			continue
		}
		s.cancel = cancel
		s.mu.Unlock()
		pts, err := s.cur.ReadContext(rctx, dst)
		s.mu.Lock()
		s.cancel = nil
		s.mu.Unlock()
		cancel()
		if err != nil {
			switch {
			case ctx.Err() != nil:
				return 0, ctx.Err()
			case rctx.Err() != nil:
				continue // switched: the loop closes the reader
			case errors.Is(err, ErrDisconnected):
				// The camera went away within the on-period: the reader
				// reconnects on its own; this connection ended.
				s.readAny = false
				return 0, err
			}
			return 0, err
		}
		if ic := s.cur.Link().Conn; ic != s.inner || !s.readAny {
			s.mu.Lock()
			s.inner = ic
			s.conn++
			s.tags[s.conn] = s.curTag
			// Only recent connections are asked about (frames still in
			// the mailbox, a loss being closed): the map stays small.
			delete(s.tags, s.conn-keptTags)
			s.mu.Unlock()
		}
		s.readAny = true
		return pts, nil
	}
}

// closeCur closes the reader of the previous on-period.
func (s *Standby) closeCur() {
	_ = s.cur.Close()
	s.mu.Lock()
	s.cur, s.curTag = nil, nil
	s.mu.Unlock()
}

// Link implements LiveReader: the open reader's link with this source's
// connection number, or StateStandby while off.
func (s *Standby) Link() Link {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.tag == nil || s.cur == nil {
		l := Link{State: StateStandby, Since: s.offSince, Conn: s.conn}
		if s.tag != nil {
			l.State, l.Since = StateConnecting, s.openFail
			if s.lastOpen != nil {
				l.Reason = s.lastOpen.Error()
			}
		}
		return l
	}
	l := s.cur.Link()
	l.Conn = s.conn
	return l
}

// Close closes the open reader, if any; reads return an error after it.
func (s *Standby) Close() error {
	s.mu.Lock()
	s.closed = true
	if s.cancel != nil {
		s.cancel()
	}
	cur := s.cur
	s.mu.Unlock()
	select {
	case s.wake <- struct{}{}:
	default:
	}
	if cur != nil {
		// The reading goroutine has returned (the worker closes its source
		// when it stops reading).
		return cur.Close()
	}
	return nil
}

// ShiftPTS makes a live reader's timestamps count from another epoch: by is
// added to each.
func ShiftPTS(r LiveReader, by time.Duration) LiveReader { return shifted{r, by} }

type shifted struct {
	LiveReader
	by time.Duration
}

func (s shifted) Read(dst *gocv.Mat) (time.Duration, error) {
	return s.ReadContext(context.Background(), dst)
}

func (s shifted) ReadContext(ctx context.Context, dst *gocv.Mat) (time.Duration, error) {
	pts, err := s.LiveReader.ReadContext(ctx, dst)
	return pts + s.by, err
}

// WallScene shows a generated scene as a live camera on the wall clock: frame
// n is due at start + n/fps; a read returns the frame due now (frames whose
// time passed while nobody read are skipped, as a camera's are), and waits
// for the next one. Before start it waits; past the scene's length it shows
// the scene again from its first frame (an endless camera), timestamps still
// rising. Timestamps are times since start, so events carry the scene's own
// clock.
type WallScene struct {
	sc     *scene.Scene
	start  time.Time
	opened time.Time
	next   int
	g      *Generated
}

// NewWallScene makes a live view of sc whose frame 0 is at start.
func NewWallScene(sc *scene.Scene, start time.Time) *WallScene {
	return &WallScene{sc: sc, start: start, opened: time.Now(), next: -1, g: NewGenerated(sc)}
}

// Read implements Reader.
func (w *WallScene) Read(dst *gocv.Mat) (time.Duration, error) {
	return w.ReadContext(context.Background(), dst)
}

// ReadContext implements LiveReader.
func (w *WallScene) ReadContext(ctx context.Context, dst *gocv.Mat) (time.Duration, error) {
	fps := w.sc.FPS()
	now := int(math.Floor(time.Since(w.start).Seconds() * fps))
	n := max(w.next, now, 0)
	pts := time.Duration(math.Round(float64(n) * float64(time.Second) / fps))
	if d := time.Until(w.start.Add(pts)); d > 0 {
		select {
		case <-time.After(d):
		case <-ctx.Done():
			return 0, ctx.Err()
		}
	}
	w.g.i = n % w.sc.Frames()
	if _, err := w.g.Read(dst); err != nil {
		return 0, err
	}
	w.next = n + 1
	return pts, nil
}

// Link implements LiveReader: a generated camera is always up, on one
// connection.
func (w *WallScene) Link() Link { return Link{State: StateUp, Since: w.opened, Conn: 1} }

// Info describes the scene as a source.
func (w *WallScene) Info() Info { in := w.g.Info(); in.Live = true; return in }

// Close implements Reader.
func (w *WallScene) Close() error { return nil }
