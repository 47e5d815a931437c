package testkit

import (
	"fmt"
	"net"
	"net/url"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
)

// Cluster is a JetStream cluster of in-process NATS servers routed to each
// other on loopback, each with its own store directory, for tests of
// replicated streams and buckets and of a node failing. Ports and store
// directories stay the same across Shutdown and Restart of a node.
type Cluster struct {
	t    testing.TB
	name string

	mu    sync.Mutex
	opts  []*server.Options
	nodes []*server.Server // nil while a node is down
}

// StartCluster starts n servers (n >= 1) with JetStream in one cluster and
// waits until the cluster has a JetStream meta leader and every node is
// current. The servers are shut down when the test ends.
func StartCluster(t testing.TB, n int) *Cluster {
	t.Helper()
	if n < 1 {
		t.Fatalf("StartCluster: n = %d, want >= 1", n)
	}
	c := &Cluster{t: t, name: fmt.Sprintf("tallyd-test-%d", time.Now().UnixNano()%1e6)}
	clientPorts, routePorts := freePorts(t, n), freePorts(t, n)
	var routes []*url.URL
	for _, p := range routePorts {
		routes = append(routes, &url.URL{Scheme: "nats-route", Host: fmt.Sprintf("127.0.0.1:%d", p)})
	}
	for i := 0; i < n; i++ {
		o := &server.Options{
			ServerName: fmt.Sprintf("n%d", i),
			Host:       "127.0.0.1",
			Port:       clientPorts[i],
			NoLog:      true,
			NoSigs:     true,
			JetStream:  true,
			StoreDir:   t.TempDir(),
			Cluster: server.ClusterOpts{
				Name: c.name,
				Host: "127.0.0.1",
				Port: routePorts[i],
			},
			Routes: routes,
		}
		c.opts = append(c.opts, o)
		c.nodes = append(c.nodes, nil)
	}
	t.Cleanup(c.Close)
	for i := range c.opts {
		c.start(i)
	}
	c.WaitReady(30 * time.Second)
	return c
}

// freePorts finds n free loopback TCP ports.
func freePorts(t testing.TB, n int) []int {
	t.Helper()
	var ls []net.Listener
	var ports []int
	for i := 0; i < n; i++ {
		l, err := net.Listen("tcp", "127.0.0.1:0")
		if err != nil {
			t.Fatal(err)
		}
		ls = append(ls, l)
		ports = append(ports, l.Addr().(*net.TCPAddr).Port)
	}
	for _, l := range ls {
		l.Close()
	}
	return ports
}

func (c *Cluster) start(i int) {
	c.t.Helper()
	c.mu.Lock()
	o := c.opts[i].Clone()
	c.mu.Unlock()
	s, err := server.NewServer(o)
	if err != nil {
		c.t.Fatalf("cluster node %d: %v", i, err)
	}
	s.Start()
	if !s.ReadyForConnections(20 * time.Second) {
		s.Shutdown()
		c.t.Fatalf("cluster node %d: not ready for connections after 20s", i)
	}
	c.mu.Lock()
	c.nodes[i] = s
	c.mu.Unlock()
}

// WaitReady waits until a running node is the JetStream meta leader and
// every running node is current with it.
func (c *Cluster) WaitReady(d time.Duration) {
	c.t.Helper()
	WaitFor(c.t, d, "the cluster's JetStream meta leader", func() bool {
		c.mu.Lock()
		defer c.mu.Unlock()
		leader := false
		for _, s := range c.nodes {
			if s == nil {
				continue
			}
			if s.JetStreamIsLeader() {
				leader = true
			}
			if !s.JetStreamIsCurrent() {
				return false
			}
		}
		return leader
	})
}

// N is the number of nodes, running or not.
func (c *Cluster) N() int { return len(c.opts) }

// URLs is every node's client URL, comma-separated (what a client given the
// whole cluster connects to).
func (c *Cluster) URLs() string {
	var us []string
	for i := range c.opts {
		us = append(us, c.URL(i))
	}
	return strings.Join(us, ",")
}

// URL is node i's client URL.
func (c *Cluster) URL(i int) string {
	return fmt.Sprintf("nats://127.0.0.1:%d", c.opts[i].Port)
}

// Server is node i's server, nil while it is down.
func (c *Cluster) Server(i int) *server.Server {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.nodes[i]
}

// Shutdown stops node i (its clients are cut off; the store stays); safe
// on a node that is down.
func (c *Cluster) Shutdown(i int) {
	c.mu.Lock()
	s := c.nodes[i]
	c.nodes[i] = nil
	c.mu.Unlock()
	if s != nil {
		s.Shutdown()
		s.WaitForShutdown()
	}
}

// Restart starts node i again on the same ports and store directory and
// waits until the cluster is ready; a running node is shut down first.
func (c *Cluster) Restart(i int) {
	c.t.Helper()
	c.Shutdown(i)
	c.start(i)
	c.WaitReady(30 * time.Second)
}

// Close shuts every node down; safe twice.
func (c *Cluster) Close() {
	for i := range c.opts {
		c.Shutdown(i)
	}
}

// JetStream connects a test client to url (one server or a comma-separated
// list) and opens JetStream on it; the connection closes when the test ends.
func JetStream(t testing.TB, url string, opts ...nats.Option) (*nats.Conn, jetstream.JetStream) {
	t.Helper()
	nc, err := nats.Connect(url, opts...)
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
