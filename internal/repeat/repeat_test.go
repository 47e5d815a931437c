package repeat

import (
	"bytes"
	"errors"
	"log/slog"
	"strings"
	"testing"
	"time"
)

func TestOncePerPeriod(t *testing.T) {
	var buf bytes.Buffer
	r := New(slog.New(slog.NewTextHandler(&buf, nil)), "publish failed", time.Second)
	now := time.Unix(1000, 0)
	r.now = func() time.Time { return now }
	steps := []struct {
		advance time.Duration
		lines   int // lines logged so far
	}{
		{0, 1},                      // the first occurrence is logged at once
		{100 * time.Millisecond, 1}, // summed
		{500 * time.Millisecond, 1}, // summed
		{500 * time.Millisecond, 2}, // a second since the last line: count=3
		{2 * time.Second, 3},        // count=1
		{10 * time.Millisecond, 3},  // pending, flushed below
	}
	for i, s := range steps {
		now = now.Add(s.advance)
		r.Note(errors.New("no responders"))
		if got := strings.Count(buf.String(), "\n"); got != s.lines {
			t.Fatalf("step %d: %d lines, want %d:\n%s", i, got, s.lines, buf.String())
		}
	}
	r.Flush()
	lines := strings.Split(strings.TrimSpace(buf.String()), "\n")
	wantCounts := []string{"count=1 total=1", "count=3 total=4", "count=1 total=5", "count=1 total=6"}
	if len(lines) != len(wantCounts) {
		t.Fatalf("%d lines, want %d:\n%s", len(lines), len(wantCounts), buf.String())
	}
	for i, w := range wantCounts {
		if !strings.Contains(lines[i], w) || !strings.Contains(lines[i], `err="no responders"`) {
			t.Errorf("line %d = %q, want %q and the last error", i, lines[i], w)
		}
	}
	if r.Total() != 6 {
		t.Errorf("Total = %d, want 6", r.Total())
	}
	r.Flush() // nothing pending: no line
	if n := strings.Count(buf.String(), "\n"); n != 4 {
		t.Errorf("Flush with nothing pending logged a line (%d lines)", n)
	}
	r.Reset()
	if r.Last() != nil || r.Total() != 6 {
		t.Errorf("after Reset: Last = %v, Total = %d; want nil, 6", r.Last(), r.Total())
	}
}

func TestNilLogCounts(t *testing.T) {
	r := New(nil, "x", 0)
	r.Note(errors.New("a"))
	r.Note(errors.New("b"))
	if r.Total() != 2 || r.Last().Error() != "b" {
		t.Errorf("Total %d Last %v, want 2 b", r.Total(), r.Last())
	}
}
