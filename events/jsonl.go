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

// JSONL appends events to a file, one JSON object per line, whole lines
// only: a line that cannot be written completely (a full disk) is cut off
// again, so the file never ends in a torn line. It is safe for concurrent
// use.
type JSONL struct {
	path string

	mu     sync.Mutex // guards f, size and closed
	f      *os.File
	size   int64 // bytes of whole lines in the file
	closed bool
}

// NewJSONLFile opens path for appending, creating it (mode 0640) if needed.
func NewJSONLFile(path string) (*JSONL, error) {
	j := &JSONL{path: path}
	if err := j.open(); err != nil {
		return nil, err
	}
	return j, nil
}

func (j *JSONL) open() error {
	f, err := os.OpenFile(j.path, os.O_WRONLY|os.O_APPEND|os.O_CREATE, 0o640)
	if err != nil {
		return fmt.Errorf("open events file: %w", err)
	}
	st, err := f.Stat()
	if err != nil {
		f.Close()
		return fmt.Errorf("open events file: %w", err)
	}
	j.f, j.size = f, st.Size()
	return nil
}

// Publish appends one event as one line.
func (j *JSONL) Publish(ctx context.Context, ev Event) error {
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("write event to %s: %w", j.path, err)
	}
	b, err := json.Marshal(ev)
	if err != nil {
		return fmt.Errorf("write event to %s: %w", j.path, err)
	}
	return j.WriteLine(b)
}

// WriteLine appends one JSON object and a newline in a single write, so
// lines from concurrent callers never interleave; a partial write is cut
// off again. Close makes the lines durable.
func (j *JSONL) WriteLine(b []byte) error {
	line := make([]byte, 0, len(b)+1)
	line = append(append(line, b...), '\n')
	j.mu.Lock()
	defer j.mu.Unlock()
	if j.closed {
		return fmt.Errorf("write event to %s: %w", j.path, ErrClosed)
	}
	n, err := j.f.Write(line)
	if err != nil {
		if n > 0 {
			// Take the torn piece back; if even that fails, the next
			// successful write still starts on a line of its own.
			if terr := j.f.Truncate(j.size); terr != nil {
				err = errors.Join(err, fmt.Errorf("cut off the partial line: %w", terr))
			}
		}
		return fmt.Errorf("write event to %s: %w", j.path, err)
	}
	j.size += int64(n)
	return nil
}

// Reopen closes the file and opens the path again, for log rotation: after
// the file was moved away, new lines go to a new file at the same path.
func (j *JSONL) Reopen() error {
	j.mu.Lock()
	defer j.mu.Unlock()
	if j.closed {
		return fmt.Errorf("reopen %s: %w", j.path, ErrClosed)
	}
	old := j.f
	if err := j.open(); err != nil {
		return err
	}
	serr := old.Sync()
	cerr := old.Close()
	if err := errors.Join(serr, cerr); err != nil {
		return fmt.Errorf("close rotated events file %s: %w", j.path, err)
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
