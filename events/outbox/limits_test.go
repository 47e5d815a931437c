package outbox

import (
	"fmt"
	"strings"
	"testing"
	"time"
)

// hundred is a record of exactly 100 bytes (id 4 + subject 6 + data 90)
// produced at "at".
func hundred(at time.Time) Record {
	return Record{ID: "e-01", Subject: "s.x.in", Data: []byte(strings.Repeat("d", 90)), At: at}
}

func TestLimits(t *testing.T) {
	t0 := time.Date(2025, 6, 1, 8, 0, 0, 0, time.UTC)
	// step is one Append: at clock t0+clock, records whose At are
	// clock-age for each age.
	type step struct {
		clock time.Duration
		ages  []time.Duration
	}
	n := func(k int) []time.Duration { return make([]time.Duration, k) } // k records of age 0
	for _, c := range []struct {
		name     string
		maxBytes int64
		maxAge   time.Duration
		steps    []step
		// after the last step:
		pending, dropped int64
		seqs             string // the Seqs left
	}{
		{name: "under the byte limit", maxBytes: 1000, steps: []step{{0, n(10)}},
			pending: 10, dropped: 0, seqs: "[1 2 3 4 5 6 7 8 9 10]"},
		{name: "one record over", maxBytes: 1000, steps: []step{{0, n(11)}},
			pending: 10, dropped: 1, seqs: "[2 3 4 5 6 7 8 9 10 11]"},
		{name: "over across batches", maxBytes: 1000, steps: []step{{0, n(4)}, {0, n(4)}, {0, n(4)}},
			pending: 10, dropped: 2, seqs: "[3 4 5 6 7 8 9 10 11 12]"},
		{name: "one batch alone over", maxBytes: 250, steps: []step{{0, n(5)}},
			pending: 2, dropped: 3, seqs: "[4 5]"},
		{name: "limit just below a record boundary", maxBytes: 299, steps: []step{{0, n(3)}},
			pending: 2, dropped: 1, seqs: "[2 3]"},
		{name: "exactly one record", maxBytes: 100, steps: []step{{0, n(1)}, {0, n(1)}},
			pending: 1, dropped: 1, seqs: "[2]"},
		{name: "too old when appended", maxBytes: 1000, maxAge: time.Hour,
			steps:   []step{{0, []time.Duration{2 * time.Hour, 90 * time.Minute, 30 * time.Minute, 0}}},
			pending: 2, dropped: 2, seqs: "[3 4]"},
		{name: "exactly max age is kept", maxBytes: 1000, maxAge: time.Hour,
			steps:   []step{{0, []time.Duration{time.Hour + time.Nanosecond, time.Hour}}},
			pending: 1, dropped: 1, seqs: "[2]"},
		{name: "aged out by a later append", maxBytes: 1000, maxAge: time.Hour,
			steps:   []step{{0, n(3)}, {40 * time.Minute, n(3)}, {70 * time.Minute, n(1)}},
			pending: 4, dropped: 3, seqs: "[4 5 6 7]"},
		{name: "age stops at the first young record", maxBytes: 1000, maxAge: time.Hour,
			steps:   []step{{0, []time.Duration{2 * time.Hour, 0, 2 * time.Hour, 0}}},
			pending: 3, dropped: 1, seqs: "[2 3 4]"},
		{name: "bytes and age together", maxBytes: 500, maxAge: time.Hour,
			steps:   []step{{0, n(4)}, {30 * time.Minute, n(4)}, {90 * time.Minute, n(2)}},
			pending: 5, dropped: 5, seqs: "[6 7 8 9 10]"},
		{name: "default limits", steps: []step{{0, []time.Duration{25 * time.Hour, 23 * time.Hour}}},
			pending: 1, dropped: 1, seqs: "[2]"},
	} {
		t.Run(c.name, func(t *testing.T) {
			var now time.Time
			ob := open(t, Options{MaxBytes: c.maxBytes, MaxAge: c.maxAge, Now: func() time.Time { return now }})
			var appended int64
			for _, s := range c.steps {
				now = t0.Add(s.clock)
				var recs []Record
				for _, age := range s.ages {
					recs = append(recs, hundred(now.Add(-age)))
				}
				if _, err := ob.Append(recs); err != nil {
					t.Fatal(err)
				}
				appended += int64(len(recs))
			}
			all := readAll(t, ob)
			st := ob.Stats()
			if got := fmt.Sprint(seqsOf(all)); got != c.seqs {
				t.Errorf("left %s, want %s", got, c.seqs)
			}
			if st.Pending != c.pending || st.PendingBytes != 100*c.pending || st.Dropped != c.dropped ||
				st.Appended != appended || st.Deleted != 0 {
				t.Errorf("stats = %+v, want %d pending (%d bytes), %d dropped, %d appended",
					st, c.pending, 100*c.pending, c.dropped, appended)
			}
			if st.Pending != st.Appended-st.Dropped {
				t.Errorf("pending %d != appended %d - dropped %d", st.Pending, st.Appended, st.Dropped)
			}
			if len(all) > 0 && !st.Oldest.Equal(all[0].At) {
				t.Errorf("Oldest = %v, want the first record's %v", st.Oldest, all[0].At)
			}
		})
	}
}
