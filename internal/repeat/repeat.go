// Package repeat reports a recurring problem (a failed publish, an image that
// cannot be decoded, a source that stays down) once per period with a count,
// instead of once per occurrence or only the first time. Every worker that
// can fail over and over uses one Reporter per kind of problem, and shows
// its Total in status lines and summaries.
package repeat

import (
	"context"
	"log/slog"
	"sync"
	"time"
)

// DefaultPeriod is how often a recurring problem is logged at most.
const DefaultPeriod = time.Second

// Reporter sums one recurring problem and logs it at most once per period,
// with the count since the last line and the last error. Safe for concurrent
// use.
type Reporter struct {
	log   *slog.Logger
	msg   string
	level slog.Level
	every time.Duration
	now   func() time.Time

	mu      sync.Mutex
	n       int64 // since the last line
	sum     int64
	last    error
	lastLog time.Time
}

// New makes a Reporter that logs msg at warning level, at most once every
// period (0: DefaultPeriod). A nil log discards the lines but still counts.
func New(log *slog.Logger, msg string, every time.Duration) *Reporter {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	if every <= 0 {
		every = DefaultPeriod
	}
	return &Reporter{log: log, msg: msg, level: slog.LevelWarn, every: every, now: time.Now}
}

// AtLevel sets the level the lines are logged at (warning by default) and
// returns r.
func (r *Reporter) AtLevel(l slog.Level) *Reporter {
	r.level = l
	return r
}

// Note counts one occurrence and logs when a period has passed since the
// last line (the first occurrence is logged at once). attrs are added to the
// line, e.g. when the next attempt is due.
func (r *Reporter) Note(err error, attrs ...any) {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.n++
	r.sum++
	r.last = err
	if now := r.now(); r.lastLog.IsZero() || now.Sub(r.lastLog) >= r.every {
		r.emitLocked(now, attrs)
	}
}

// Flush logs what was counted since the last line, if anything. Call it when
// the worker stops so that the last period is not lost.
func (r *Reporter) Flush(attrs ...any) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.n > 0 {
		r.emitLocked(r.now(), attrs)
	}
}

// Reset forgets the pending count and the period, so that the next problem
// is logged at once (after a recovery, say). The total is kept.
func (r *Reporter) Reset() {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.n, r.last, r.lastLog = 0, nil, time.Time{}
}

// Total is every occurrence counted since New.
func (r *Reporter) Total() int64 {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.sum
}

// Last is the most recent error noted since the last Reset (nil if none).
func (r *Reporter) Last() error {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.last
}

func (r *Reporter) emitLocked(now time.Time, attrs []any) {
	args := append([]any{"count", r.n, "total", r.sum, "err", r.last}, attrs...)
	r.log.Log(context.Background(), r.level, r.msg, args...)
	r.n, r.lastLog = 0, now
}
