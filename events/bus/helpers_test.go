package bus

import (
	"context"
	"fmt"
	"net"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"tallyd/events/outbox"
)

// startJS starts an embedded server with JetStream on a fresh store.
func startJS(t testing.TB) *Embedded {
	t.Helper()
	srv, err := StartEmbedded(EmbeddedOptions{StoreDir: t.TempDir()}, nil)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(srv.Shutdown)
	return srv
}

// startRaw starts a server with options StartEmbedded does not offer
// (permissions, tokens, TLS, operator mode) on a free loopback port and
// returns its URL.
func startRaw(t testing.TB, opts *server.Options) string {
	t.Helper()
	opts.Host, opts.Port, opts.NoSigs, opts.NoLog = "127.0.0.1", server.RANDOM_PORT, true, true
	if opts.ServerName == "" {
		opts.ServerName = "test"
	}
	srv, err := server.NewServer(opts)
	if err != nil {
		t.Fatal(err)
	}
	srv.Start()
	if !srv.ReadyForConnections(10 * time.Second) {
		t.Fatal("server not ready")
	}
	t.Cleanup(func() { srv.Shutdown(); srv.WaitForShutdown() })
	scheme := "nats"
	if opts.TLSConfig != nil {
		scheme = "tls"
	}
	return fmt.Sprintf("%s://127.0.0.1:%d", scheme, srv.Addr().(*net.TCPAddr).Port)
}

// jsConnect connects and opens JetStream.
func jsConnect(t testing.TB, url string, opts ...Option) (*nats.Conn, jetstream.JetStream) {
	t.Helper()
	nc, err := Connect(url, t.Name(), nil, opts...)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(nc.Close)
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	return nc, js
}

// memOutbox is an in-memory Pending for benchmarks and for the paths the
// real outbox does not offer (no Stats: Drain counts by reading).
type memOutbox struct {
	mu      sync.Mutex
	recs    []outbox.Record // by Seq
	next    uint64
	wake    chan struct{}
	deleted map[uint64]time.Time // when each Seq was deleted (latency)
	readErr error
}

func newMemOutbox() *memOutbox {
	return &memOutbox{next: 1, wake: make(chan struct{}, 1), deleted: map[uint64]time.Time{}}
}

func (m *memOutbox) Append(recs ...outbox.Record) {
	m.mu.Lock()
	for _, r := range recs {
		r.Seq = m.next
		m.next++
		if r.At.IsZero() {
			r.At = time.Now()
		}
		m.recs = append(m.recs, r)
	}
	m.mu.Unlock()
	select {
	case m.wake <- struct{}{}:
	default:
	}
}

func (m *memOutbox) Read(after uint64, max int) ([]outbox.Record, error) {
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.readErr != nil {
		return nil, m.readErr
	}
	var out []outbox.Record
	for _, r := range m.recs {
		if r.Seq > after && len(out) < max {
			out = append(out, r)
		}
	}
	return out, nil
}

func (m *memOutbox) Delete(seqs []uint64) error {
	m.mu.Lock()
	defer m.mu.Unlock()
	now := time.Now()
	gone := map[uint64]bool{}
	for _, s := range seqs {
		gone[s] = true
		m.deleted[s] = now
	}
	kept := m.recs[:0]
	for _, r := range m.recs {
		if !gone[r.Seq] {
			kept = append(kept, r)
		}
	}
	m.recs = kept
	return nil
}

func (m *memOutbox) Len() int {
	m.mu.Lock()
	defer m.mu.Unlock()
	return len(m.recs)
}

// runDeliverer runs d until the test ends.
func runDeliverer(t testing.TB, d *Deliverer) (stop func()) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- d.Run(ctx) }()
	var once sync.Once
	stop = func() {
		once.Do(func() {
			cancel()
			if err := <-done; err != nil {
				t.Errorf("Run: %v", err)
			}
		})
	}
	t.Cleanup(stop)
	return stop
}
