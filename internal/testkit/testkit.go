// Package testkit holds the helpers tests of several packages share: polling
// with a deadline and a logger that writes to the test's output.
package testkit

import (
	"bytes"
	"log/slog"
	"strings"
	"sync"
	"testing"
	"time"
)

// WaitFor polls cond every 10 ms until it holds, and fails the test when d
// passes first, naming what it waited for.
func WaitFor(t testing.TB, d time.Duration, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(d)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("timed out after %v waiting for %s", d, what)
		}
		time.Sleep(10 * time.Millisecond)
	}
}

// Log is a logger that writes to the test's output (shown when the test
// fails, or always with -v), at debug level.
func Log(t testing.TB) *slog.Logger {
	return slog.New(slog.NewTextHandler(writer{t}, &slog.HandlerOptions{Level: slog.LevelDebug}))
}

type writer struct{ t testing.TB }

func (w writer) Write(p []byte) (int, error) {
	w.t.Log(strings.TrimRight(string(p), "\n"))
	return len(p), nil
}

// Buffer collects output (a log, a child process's stdout) that other
// goroutines write while the test reads it.
type Buffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

// Write appends p.
func (b *Buffer) Write(p []byte) (int, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.b.Write(p)
}

// String is everything written so far.
func (b *Buffer) String() string {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.b.String()
}
