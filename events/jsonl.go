package events

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"sync"
)

// ErrClosed is returned by Publish after Close.
var ErrClosed = errors.New("publisher closed")

// JSONL appends events to a file, one JSON object per line. It is safe for
// concurrent use.
type JSONL struct {
	path string

	mu     sync.Mutex // guards f and closed
	f      *os.File
	closed bool
}

// NewJSONLFile opens path for appending, creating it if needed.
func NewJSONLFile(path string) (*JSONL, error) {
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_APPEND|os.O_CREATE, 0o644)
	if err != nil {
		return nil, fmt.Errorf("open events file: %w", err)
	}
	return &JSONL{path: path, f: f}, nil
}

// Publish appends one event as one line. The line is handed to the operating
// system before Publish returns, in a single write, so lines from concurrent
// callers never interleave; Close makes them durable.
func (j *JSONL) Publish(ctx context.Context, ev Event) error {
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("write event to %s: %w", j.path, err)
	}
	b, err := json.Marshal(ev)
	if err != nil {
		return fmt.Errorf("write event to %s: %w", j.path, err)
	}
	b = append(b, '\n')
	j.mu.Lock()
	defer j.mu.Unlock()
	if j.closed {
		return fmt.Errorf("write event to %s: %w", j.path, ErrClosed)
	}
	if _, err := j.f.Write(b); err != nil {
		return fmt.Errorf("write event to %s: %w", j.path, err)
	}
	return nil
}

// Close syncs the file to disk and closes it. It is safe to call twice; the
// second call returns nil.
func (j *JSONL) Close() error {
	j.mu.Lock()
	defer j.mu.Unlock()
	if j.closed {
		return nil
	}
	j.closed = true
	serr := j.f.Sync()
	cerr := j.f.Close()
	if err := errors.Join(serr, cerr); err != nil {
		return fmt.Errorf("close events file %s: %w", j.path, err)
	}
	return nil
}
