// Package mailbox is the one-slot hand-over between two pipeline stages: the
// newest item wins, the one it replaces is released and counted, and the
// producer never waits for the consumer unless it asks to.
package mailbox

import (
	"context"
	"errors"
	"sync"
	"sync/atomic"
)

// ErrClosed is returned by Get once the mailbox is closed and empty, and by
// PutWait after Close.
var ErrClosed = errors.New("mailbox closed")

// Mailbox holds at most one item of type T.
type Mailbox[T any] struct {
	release func(T) // called on items that are evicted or left at Close

	mu     sync.Mutex
	item   T
	full   bool
	closed bool
	// changed is closed and replaced whenever the state changes, so waiters
	// can select on it together with their context.
	changed chan struct{}

	notify chan<- struct{} // optional: poked (without blocking) when an item arrives or the box closes

	dropped atomic.Int64
}

// New makes an empty mailbox; release (may be nil) frees an item that is
// dropped, e.g. closes a frame's image.
func New[T any](release func(T)) *Mailbox[T] {
	return &Mailbox[T]{release: release, changed: make(chan struct{})}
}

func (m *Mailbox[T]) signalLocked() {
	close(m.changed)
	m.changed = make(chan struct{})
	if m.notify != nil && (m.full || m.closed) {
		select {
		case m.notify <- struct{}{}:
		default:
		}
	}
}

// Notify makes the mailbox poke ch, without blocking, whenever an item arrives
// or the mailbox closes, so one consumer can wait on many mailboxes. Call it
// before the producer starts.
func (m *Mailbox[T]) Notify(ch chan<- struct{}) {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.notify = ch
}

// Done reports whether the mailbox is closed and empty: nothing more will come.
func (m *Mailbox[T]) Done() bool {
	m.mu.Lock()
	defer m.mu.Unlock()
	return m.closed && !m.full
}

// Put stores v, evicting (releasing and counting) an item still waiting. It
// never blocks. It reports whether an item was evicted; after Close, v itself
// is released and counted.
func (m *Mailbox[T]) Put(v T) (evicted bool) {
	m.mu.Lock()
	if m.closed {
		m.mu.Unlock()
		m.drop(v)
		return true
	}
	old, had := m.item, m.full
	m.item, m.full = v, true
	m.signalLocked()
	m.mu.Unlock()
	if had {
		m.drop(old)
	}
	return had
}

// PutWait stores v once the slot is empty: for sources that can wait, such as
// a recorded file replayed at full speed, so that no frame is dropped. On
// cancel or close it returns the error and leaves v with the caller.
func (m *Mailbox[T]) PutWait(ctx context.Context, v T) error {
	for {
		m.mu.Lock()
		if m.closed {
			m.mu.Unlock()
			return ErrClosed
		}
		if !m.full {
			m.item, m.full = v, true
			m.signalLocked()
			m.mu.Unlock()
			return nil
		}
		ch := m.changed
		m.mu.Unlock()
		select {
		case <-ch:
		case <-ctx.Done():
			return ctx.Err()
		}
	}
}

// Get waits for an item. After Close it still returns the waiting item, then
// ErrClosed.
func (m *Mailbox[T]) Get(ctx context.Context) (T, error) {
	for {
		m.mu.Lock()
		if m.full {
			v := m.item
			var zero T
			m.item, m.full = zero, false
			m.signalLocked()
			m.mu.Unlock()
			return v, nil
		}
		if m.closed {
			m.mu.Unlock()
			var zero T
			return zero, ErrClosed
		}
		ch := m.changed
		m.mu.Unlock()
		select {
		case <-ch:
		case <-ctx.Done():
			var zero T
			return zero, ctx.Err()
		}
	}
}

// TryGet returns the waiting item without blocking.
func (m *Mailbox[T]) TryGet() (T, bool) {
	m.mu.Lock()
	defer m.mu.Unlock()
	v := m.item
	if !m.full {
		return v, false
	}
	var zero T
	m.item, m.full = zero, false
	m.signalLocked()
	return v, true
}

// Close stops new items; the one waiting can still be taken. Safe to call twice.
func (m *Mailbox[T]) Close() {
	m.mu.Lock()
	defer m.mu.Unlock()
	if !m.closed {
		m.closed = true
		m.signalLocked()
	}
}

// Discard releases an item left in a closed mailbox (not counted as a drop).
func (m *Mailbox[T]) Discard() {
	if v, ok := m.TryGet(); ok {
		m.free(v)
	}
}

// Dropped is the number of items evicted by a newer one or put after Close.
func (m *Mailbox[T]) Dropped() int64 { return m.dropped.Load() }

func (m *Mailbox[T]) drop(v T) {
	m.dropped.Add(1)
	m.free(v)
}

func (m *Mailbox[T]) free(v T) {
	if m.release != nil {
		m.release(v)
	}
}
