package capture

import (
	"log/slog"
	"sync"
	"time"
)

// repeated sums a recurring problem and logs it at most once per period,
// with the count since the last line and the last error.
type repeated struct {
	log   *slog.Logger
	msg   string
	every time.Duration
	now   func() time.Time

	mu      sync.Mutex
	n       int64 // since the last line
	sum     int64
	last    error
	lastLog time.Time
}

func newRepeated(log *slog.Logger, msg string, every time.Duration) *repeated {
	return &repeated{log: log, msg: msg, every: every, now: time.Now}
}

// note counts one occurrence and logs when a period has passed since the
// last line (the first occurrence is logged at once). attrs are added to the
// line, e.g. when the next attempt is due.
func (r *repeated) note(err error, attrs ...any) {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.n++
	r.sum++
	r.last = err
	if now := r.now(); r.lastLog.IsZero() || now.Sub(r.lastLog) >= r.every {
		r.emitLocked(now, attrs)
	}
}

// flush logs what was counted since the last line, if anything.
func (r *repeated) flush(attrs ...any) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.n > 0 {
		r.emitLocked(r.now(), attrs)
	}
}

// reset forgets the pending count and the period, so the next problem is
// logged at once.
func (r *repeated) reset() {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.n, r.last, r.lastLog = 0, nil, time.Time{}
}

func (r *repeated) emitLocked(now time.Time, attrs []any) {
	args := append([]any{"count", r.n, "err", r.last}, attrs...)
	r.log.Warn(r.msg, args...)
	r.n, r.lastLog = 0, now
}

func (r *repeated) total() int64 {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.sum
}
