package pipeline

import (
	"sort"
	"sync"
	"sync/atomic"
	"time"

	"tallyd/capture"
)

// DropReason says why a frame that was read never reached the tracker.
type DropReason string

// Drop reasons. The first three happen on the capture side, the last two in
// the detect stage.
const (
	DropForRate DropReason = "rate"    // skipped to hold the source's target fps
	DropMailbox DropReason = "mailbox" // replaced by a newer frame before the detector took it
	DropPrep    DropReason = "prepare" // the detector's input could not be prepared
	DropTooOld  DropReason = "too_old" // waited longer than max_age for the detector
	DropGated   DropReason = "gated"   // the motion gate saw no change
)

// Drops counts dropped frames by reason.
type Drops struct {
	ForRate int64 `json:"rate"`
	Mailbox int64 `json:"mailbox"`
	Prep    int64 `json:"prepare"`
	TooOld  int64 `json:"too_old"`
	Gated   int64 `json:"gated"`
}

// Total is every dropped frame.
func (d Drops) Total() int64 { return d.ForRate + d.Mailbox + d.Prep + d.TooOld + d.Gated }

func (d *Drops) add(o Drops) {
	d.ForRate += o.ForRate
	d.Mailbox += o.Mailbox
	d.Prep += o.Prep
	d.TooOld += o.TooOld
	d.Gated += o.Gated
}

// counters are one source's counts in the detect stage; safe from any
// goroutine. Frames read and the capture-side drops are the capture worker's.
type counters struct {
	processed   atomic.Int64
	tooOld      atomic.Int64
	gated       atomic.Int64
	events      atomic.Int64 // events the source's rules produced
	fenced      atomic.Int64 // events refused: produced outside a valid lease (shared sites)
	handovers   atomic.Int64 // holds begun after another holder (shared sites)
	gapNanos    atomic.Int64 // time without a holder before those holds
	detectNanos atomic.Int64 // time in Detect, shared out per frame
	ages        latencies
}

func (c *counters) drop(why DropReason) {
	switch why {
	case DropTooOld:
		c.tooOld.Add(1)
	case DropGated:
		c.gated.Add(1)
	}
}

// drops joins the capture worker's drops with the detect stage's.
func (c *counters) drops(st capture.Stats) Drops {
	return Drops{ForRate: st.DroppedForRate, Mailbox: st.DroppedMailbox, Prep: st.DroppedPrep,
		TooOld: c.tooOld.Load(), Gated: c.gated.Load()}
}

// latencies keeps the most recent frame ages (capture to the end of
// publishing the frame's events) for percentiles.
type latencies struct {
	mu  sync.Mutex
	buf [1024]float64
	n   int
}

func (l *latencies) add(d time.Duration) {
	l.mu.Lock()
	l.buf[l.n%len(l.buf)] = float64(d) / float64(time.Millisecond)
	l.n++
	l.mu.Unlock()
}

// percentiles returns p50 and p99 of the recent ages in milliseconds (0 when
// none).
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
