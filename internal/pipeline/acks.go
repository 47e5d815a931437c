package pipeline

import (
	"strings"
	"sync"
	"sync/atomic"
)

// ackCounts counts the events the broker took, by subject
// (<prefix>.<site>.<source>.<rule>.<kind>): the metrics' acknowledged events
// per rule and kind. Subjects are few (rules × kinds), so a map suffices.
type ackCounts struct {
	m sync.Map // subject -> *atomic.Int64
}

func (a *ackCounts) add(subject string) {
	if c, ok := a.m.Load(subject); ok {
		c.(*atomic.Int64).Add(1)
		return
	}
	c, _ := a.m.LoadOrStore(subject, new(atomic.Int64))
	c.(*atomic.Int64).Add(1)
}

// ackKey is an acknowledged count's labels.
type ackKey struct{ source, rule, kind string }

// byRule sums the counts by source, rule and kind (the subject's last three
// tokens; ids, rule names and kinds hold no dots).
func (a *ackCounts) byRule() map[ackKey]int64 {
	out := map[ackKey]int64{}
	a.m.Range(func(k, v any) bool {
		t := strings.Split(k.(string), ".")
		if n := len(t); n >= 3 {
			out[ackKey{t[n-3], t[n-2], t[n-1]}] += v.(*atomic.Int64).Load()
		}
		return true
	})
	return out
}
