package fleet

import (
	"context"
	"fmt"
	"math/rand/v2"
	"slices"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"tallyd/internal/testkit"
)

// quietOpts are member options for benchmarks (no logger: nothing logged).
func quietOpts(src []string, ttl time.Duration, capacity int) Options {
	return Options{TTL: ttl, Capacity: capacity, Sources: src, Replicas: 3}
}

// startNotifier is a Holder that reports each Start on a channel.
type startNotifier struct{ starts chan *Hold }

func (s startNotifier) Start(h *Hold)     { s.starts <- h }
func (s startNotifier) Stop(*Hold, Cause) {}

// BenchmarkHandover measures the hand-over time of one source over 20
// kills on a 3-node cluster with R3 buckets and TTL 2 s: a kill is a member
// that stops renewing without releasing (its Join context ends), at a
// random moment of its renewal period; the time runs from the kill to the
// Start of the next holder. Run with -benchtime=1x: one iteration is the
// 20 kills.
func BenchmarkHandover(b *testing.B) {
	const kills, ttl = 20, 2 * time.Second
	c := testkit.StartCluster(b, 3)
	src := []string{"cam1"}
	starts := make(chan *Hold, 64)
	type live struct {
		m      *Member
		cancel context.CancelFunc
	}
	members := map[string]live{}
	n := 0
	join := func() {
		n++
		_, js := connect(b, c.URLs())
		ctx, cancel := context.WithCancel(context.Background())
		o := quietOpts(src, ttl, 1)
		o.Site, o.Member = "handover", fmt.Sprintf("m%d", n)
		m, err := Join(ctx, js, o, startNotifier{starts})
		if err != nil {
			b.Fatal(err)
		}
		members[o.Member] = live{m, cancel}
		b.Cleanup(cancel)
	}
	var gaps []float64
	for b.Loop() {
		gaps = gaps[:0]
		join()
		join()
		h := <-starts
		for i := 0; i < kills; i++ {
			time.Sleep(ttl/2 + rand.N(ttl/3)) // somewhere in a renewal period
			killed := time.Now()
			members[h.Member].cancel()
			delete(members, h.Member)
			select {
			case h = <-starts:
			case <-time.After(3 * ttl):
				b.Fatalf("kill %d: no new holder after %v", i+1, 3*ttl)
			}
			gaps = append(gaps, float64(time.Since(killed).Microseconds())/1000)
			join() // a standby for the next kill
		}
	}
	slices.Sort(gaps)
	b.ReportMetric(percentile(gaps, 0.50), "p50_ms")
	b.ReportMetric(percentile(gaps, 0.99), "p99_ms")
	b.ReportMetric(gaps[len(gaps)-1], "max_ms")
	b.ReportMetric(0, "ns/op")
}

// percentile of sorted xs, nearest rank.
func percentile(xs []float64, p float64) float64 {
	i := int(p*float64(len(xs))+0.5) - 1
	return xs[max(0, min(i, len(xs)-1))]
}

// BenchmarkLeaseTraffic measures what one member sends and receives on its
// connection (nats.Conn statistics) while holding 2 sources among three
// members over 6 sources, with the default TTL 10 s (renewal every 3.3 s)
// and with TTL 2 s. Received traffic includes the other members' renewals
// its watcher sees. Run with -benchtime=1x.
func BenchmarkLeaseTraffic(b *testing.B) {
	for _, ttl := range []time.Duration{DefaultTTL, 2 * time.Second} {
		b.Run(fmt.Sprintf("ttl=%v", ttl), func(b *testing.B) {
			c := testkit.StartCluster(b, 3)
			src := sourceNames(6)
			var conns []*nats.Conn
			var ms []*Member
			for i := 0; i < 3; i++ {
				nc, js := connect(b, c.URLs())
				ctx, cancel := context.WithCancel(context.Background())
				b.Cleanup(cancel)
				o := quietOpts(src, ttl, 6)
				o.Site, o.Member = "traffic", fmt.Sprintf("m%d", i)
				m, err := Join(ctx, js, o, startNotifier{make(chan *Hold, 16)})
				if err != nil {
					b.Fatal(err)
				}
				conns, ms = append(conns, nc), append(ms, m)
			}
			testkit.WaitFor(b, 3*ttl, "2 holds each", func() bool {
				for _, m := range ms {
					if len(m.Holds()) != 2 {
						return false
					}
				}
				return true
			})
			window := 3 * ttl
			for b.Loop() {
				s0, t0 := conns[0].Stats(), time.Now()
				time.Sleep(window)
				s1, d := conns[0].Stats(), time.Since(t0).Seconds()
				b.ReportMetric(float64(s1.OutMsgs-s0.OutMsgs)/d, "out_msgs/s")
				b.ReportMetric(float64(s1.OutBytes-s0.OutBytes)/d, "out_B/s")
				b.ReportMetric(float64(s1.InMsgs-s0.InMsgs)/d, "in_msgs/s")
				b.ReportMetric(float64(s1.InBytes-s0.InBytes)/d, "in_B/s")
			}
			b.ReportMetric(0, "ns/op")
		})
	}
}

// BenchmarkR3Publish measures events/s into an R3 stream on the loopback
// cluster: JetStream async publish of 300-byte events, each with a
// Nats-Msg-Id for de-duplication, at most 1024 acks in flight (the
// deliverer's default window).
func BenchmarkR3Publish(b *testing.B) {
	c := testkit.StartCluster(b, 3)
	nc, _ := connect(b, c.URLs())
	js, err := jetstream.New(nc, jetstream.WithPublishAsyncMaxPending(1024))
	if err != nil {
		b.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	if _, err := js.CreateStream(ctx, jetstream.StreamConfig{
		Name: "BENCH", Subjects: []string{"tallyd.bench.>"}, Replicas: 3,
		Storage: jetstream.FileStorage, Duplicates: 2 * time.Minute,
	}); err != nil {
		b.Fatal(err)
	}
	data := make([]byte, 300)
	for i := range data {
		data[i] = 'a' + byte(i%26)
	}
	var mu sync.Mutex
	var fails int
	i := 0
	b.SetBytes(int64(len(data)))
	b.ResetTimer()
	start := time.Now()
	for b.Loop() {
		i++
		_, err := js.PublishAsync(fmt.Sprintf("tallyd.bench.cam%d.deck.in", i%6), data, jetstream.WithMsgID(fmt.Sprintf("ev-%d", i)))
		if err != nil {
			mu.Lock()
			fails++
			mu.Unlock()
		}
	}
	select {
	case <-js.PublishAsyncComplete():
	case <-time.After(30 * time.Second):
		b.Fatal("acks missing after 30 s")
	}
	d := time.Since(start)
	b.StopTimer()
	if fails > 0 {
		b.Fatalf("%d publishes failed", fails)
	}
	b.ReportMetric(float64(i)/d.Seconds(), "events/s")
}
