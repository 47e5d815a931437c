package testsrv

import (
	"errors"
	"net"
	"sync"
	"syscall"
	"testing"
	"time"
)

// listener accepts TCP connections on one loopback address, hands each to
// serve on its own goroutine, and can be stopped (listener and connections
// closed, goroutines waited for) and started again on the same port.
type listener struct {
	serve func(net.Conn)

	mu    sync.Mutex
	addr  string // fixed after the first start
	ln    net.Listener
	conns map[net.Conn]struct{}
	wg    sync.WaitGroup
}

// start listens on the remembered address (first time: a free port).
func (l *listener) start(t testing.TB) {
	t.Helper()
	l.mu.Lock()
	defer l.mu.Unlock()
	if l.ln != nil {
		return
	}
	addr := l.addr
	if addr == "" {
		addr = "127.0.0.1:0"
	}
	var (
		ln  net.Listener
		err error
	)
	// The port is ours from the first start; a restart may briefly find it
	// busy while the kernel finishes closing, so retry for up to 2 s.
	for deadline := time.Now().Add(2 * time.Second); ; {
		ln, err = net.Listen("tcp", addr)
		if err == nil || !errors.Is(err, syscall.EADDRINUSE) || time.Now().After(deadline) {
			break
		}
		time.Sleep(20 * time.Millisecond)
	}
	if err != nil {
		t.Fatalf("testsrv: listen on %s: %v", addr, err)
	}
	l.ln, l.addr = ln, ln.Addr().String()
	if l.conns == nil {
		l.conns = map[net.Conn]struct{}{}
	}
	l.wg.Add(1)
	go l.accept(ln)
}

func (l *listener) accept(ln net.Listener) {
	defer l.wg.Done()
	for {
		c, err := ln.Accept()
		if err != nil {
			return
		}
		l.mu.Lock()
		if l.ln != ln { // stopped meanwhile
			l.mu.Unlock()
			_ = c.Close()
			return
		}
		l.conns[c] = struct{}{}
		l.wg.Add(1)
		l.mu.Unlock()
		go func() {
			defer l.wg.Done()
			defer func() {
				l.mu.Lock()
				delete(l.conns, c)
				l.mu.Unlock()
				_ = c.Close()
			}()
			l.serve(c)
		}()
	}
}

// stop closes the listener and every connection and waits for their
// goroutines. Safe to call when stopped.
func (l *listener) stop() {
	l.mu.Lock()
	if l.ln != nil {
		_ = l.ln.Close()
		l.ln = nil
	}
	for c := range l.conns {
		_ = c.Close()
	}
	l.mu.Unlock()
	l.wg.Wait()
}

func (l *listener) address() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.addr
}
