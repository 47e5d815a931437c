package track

import (
	"slices"
	"time"
)

// numSteps is how many recent steps between updates the frame interval is
// taken from.
const numSteps = 15

// frameSteps estimates a source's frame interval from the timestamps of
// the updates: the median of the last numSteps positive steps. The median
// ignores the longer steps of dropped frames (as long as fewer than half
// the frames are dropped) and the jitter of live timestamps. The zero value
// knows no interval yet.
type frameSteps struct {
	last   time.Duration
	seen   bool
	ring   [numSteps]time.Duration
	n, at  int
	median time.Duration
}

// observe records the timestamp of an update.
func (f *frameSteps) observe(ts time.Duration) {
	if f.seen && ts > f.last {
		f.ring[f.at] = ts - f.last
		f.at = (f.at + 1) % numSteps
		f.n = min(f.n+1, numSteps)
		var buf [numSteps]time.Duration
		s := buf[:f.n]
		copy(s, f.ring[:f.n])
		slices.Sort(s)
		f.median = s[f.n/2]
	}
	f.last, f.seen = ts, true
}

// interval is the estimated frame interval, 0 before two timestamps.
func (f *frameSteps) interval() time.Duration { return f.median }
