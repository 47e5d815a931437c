package mailbox

import (
	"context"
	"errors"
	"sync"
	"sync/atomic"
	"testing"
	"time"
)

func TestNewestWins(t *testing.T) {
	var released []int
	m := New(func(v int) { released = append(released, v) })
	for i := 1; i <= 5; i++ {
		m.Put(i)
	}
	v, err := m.Get(context.Background())
	if err != nil || v != 5 {
		t.Fatalf("Get = %d, %v; want 5", v, err)
	}
	if m.Dropped() != 4 {
		t.Errorf("Dropped = %d, want 4", m.Dropped())
	}
	if len(released) != 4 || released[0] != 1 || released[3] != 4 {
		t.Errorf("released %v, want [1 2 3 4]", released)
	}
}

func TestCloseDrainsThenErrClosed(t *testing.T) {
	m := New[int](nil)
	m.Put(7)
	m.Close()
	m.Close()
	if v, err := m.Get(context.Background()); err != nil || v != 7 {
		t.Fatalf("Get after close = %d, %v; want 7, nil", v, err)
	}
	if _, err := m.Get(context.Background()); !errors.Is(err, ErrClosed) {
		t.Fatalf("second Get err = %v, want ErrClosed", err)
	}
	if err := m.PutWait(context.Background(), 1); !errors.Is(err, ErrClosed) {
		t.Fatalf("PutWait after close = %v, want ErrClosed", err)
	}
	if !m.Put(3) || m.Dropped() != 1 {
		t.Fatalf("Put after close must count a drop, dropped=%d", m.Dropped())
	}
}

func TestGetHonoursContext(t *testing.T) {
	m := New[int](nil)
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Millisecond)
	defer cancel()
	if _, err := m.Get(ctx); !errors.Is(err, context.DeadlineExceeded) {
		t.Fatalf("err = %v, want deadline exceeded", err)
	}
}

// TestPutWaitLosesNothing: a waiting producer and a slow consumer hand over
// every item in order, and nothing is counted as dropped.
func TestPutWaitLosesNothing(t *testing.T) {
	m := New[int](nil)
	const n = 2000
	go func() {
		for i := 0; i < n; i++ {
			if err := m.PutWait(context.Background(), i); err != nil {
				t.Error(err)
				return
			}
		}
		m.Close()
	}()
	for want := 0; ; want++ {
		v, err := m.Get(context.Background())
		if errors.Is(err, ErrClosed) {
			if want != n {
				t.Fatalf("got %d items, want %d", want, n)
			}
			break
		}
		if v != want {
			t.Fatalf("got %d, want %d", v, want)
		}
	}
	if m.Dropped() != 0 {
		t.Fatalf("dropped %d, want 0", m.Dropped())
	}
}

// TestConcurrentAccounting: every item put is either received or released as
// a drop, under the race detector.
func TestConcurrentAccounting(t *testing.T) {
	var released atomic.Int64
	m := New(func(int) { released.Add(1) })
	const producers, each = 4, 500
	var wg sync.WaitGroup
	for p := 0; p < producers; p++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := 0; i < each; i++ {
				m.Put(i)
			}
		}()
	}
	var got int64
	done := make(chan struct{})
	go func() {
		defer close(done)
		for {
			if _, err := m.Get(context.Background()); err != nil {
				return
			}
			got++
		}
	}()
	wg.Wait()
	m.Close()
	<-done
	if got+m.Dropped() != producers*each {
		t.Fatalf("received %d + dropped %d != put %d", got, m.Dropped(), producers*each)
	}
	if released.Load() != m.Dropped() {
		t.Fatalf("released %d, dropped %d", released.Load(), m.Dropped())
	}
}

func TestNotifyAndDone(t *testing.T) {
	ch := make(chan struct{}, 1)
	a, b := New[int](nil), New[int](nil)
	a.Notify(ch)
	b.Notify(ch)
	b.Put(1)
	select {
	case <-ch:
	default:
		t.Fatal("no poke after Put")
	}
	if v, ok := b.TryGet(); !ok || v != 1 {
		t.Fatal("TryGet")
	}
	select {
	case <-ch:
		t.Fatal("poke after a Get: consumers are poked for arrivals only")
	default:
	}
	if a.Done() {
		t.Fatal("open mailbox reported done")
	}
	a.Put(2)
	a.Close()
	if a.Done() {
		t.Fatal("closed mailbox with an item reported done")
	}
	a.TryGet()
	if !a.Done() {
		t.Fatal("closed empty mailbox not done")
	}
}
