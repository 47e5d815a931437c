package testsrv

import (
	"sync"
	"time"
)

// feed is a server's camera. It produces frame i at each tick of its clock,
// but only while a client is watching and the server is not stalled, so a
// test sees the frames from 0 and a stopped server resumes where it paused.
type feed struct {
	frames Frames
	period time.Duration
	// noRepeat: after the last frame send nothing (a coded stream cannot
	// repeat a picture by resending it); otherwise repeat the last one.
	noRepeat bool

	mu      sync.Mutex
	subs    map[*sub]struct{}
	stalled bool
	next    int
	last    []byte

	quit chan struct{}
	wg   sync.WaitGroup
}

// sub receives a feed's frames; a slow one loses the oldest.
type sub struct{ ch chan frameMsg }

type frameMsg struct {
	i    int
	data []byte
}

func newFeed(frames Frames, fps float64, noRepeat bool) *feed {
	if fps <= 0 {
		fps = 25
	}
	f := &feed{frames: frames, period: time.Duration(float64(time.Second) / fps), noRepeat: noRepeat,
		subs: map[*sub]struct{}{}, quit: make(chan struct{})}
	f.wg.Add(1)
	go f.run()
	return f
}

func (f *feed) run() {
	defer f.wg.Done()
	t := time.NewTicker(f.period)
	defer t.Stop()
	for {
		select {
		case <-f.quit:
			return
		case <-t.C:
		}
		f.mu.Lock()
		if len(f.subs) == 0 || f.stalled {
			f.mu.Unlock()
			continue
		}
		i := f.next
		f.next++
		f.mu.Unlock()
		data := f.frames(i)
		f.mu.Lock()
		if data == nil && !f.noRepeat {
			data = f.last
		}
		f.last = data
		if data != nil {
			for s := range f.subs {
				if len(s.ch) == cap(s.ch) { // drop the oldest
					select {
					case <-s.ch:
					default:
					}
				}
				s.ch <- frameMsg{i: i, data: data}
			}
		}
		f.mu.Unlock()
	}
}

// subscribe adds a receiver that may fall queue frames behind (at least 1).
func (f *feed) subscribe(queue int) *sub {
	s := &sub{ch: make(chan frameMsg, max(queue, 1))}
	f.mu.Lock()
	f.subs[s] = struct{}{}
	f.mu.Unlock()
	return s
}

func (f *feed) unsubscribe(s *sub) {
	f.mu.Lock()
	delete(f.subs, s)
	f.mu.Unlock()
}

func (f *feed) stall(on bool) {
	f.mu.Lock()
	f.stalled = on
	f.mu.Unlock()
}

// produced is the number of frame indices used so far.
func (f *feed) produced() int {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.next
}

func (f *feed) close() {
	close(f.quit)
	f.wg.Wait()
}
