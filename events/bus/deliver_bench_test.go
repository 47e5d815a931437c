package bus

import (
	"context"
	"slices"
	"sync"
	"testing"
	"time"

	"tallyd/internal/testkit"
)

// BenchmarkDeliver measures the Deliverer against an embedded JetStream
// server on loopback with 400-byte events:
//
//   - mem: events/s with acks, outbox in memory (the Deliverer and broker);
//   - outbox: the same with the bbolt outbox (fsync'd group deletes);
//   - outbox-syncalways: and a server that fsyncs each message before the
//     ack (EmbeddedOptions.SyncAlways);
//   - paced100: publish-to-ack latency (p50, p99) at 100 events/s; run it
//     with -benchtime=300x (3 s).
func BenchmarkDeliver(b *testing.B) {
	b.Run("mem", func(b *testing.B) { benchThroughput(b, false, false) })
	b.Run("outbox", func(b *testing.B) { benchThroughput(b, true, false) })
	b.Run("outbox-syncalways", func(b *testing.B) { benchThroughput(b, true, true) })
	b.Run("paced100", benchPaced)
}

func benchSetup(b *testing.B, syncAlways bool) *Embedded {
	b.Helper()
	srv, err := StartEmbedded(EmbeddedOptions{StoreDir: b.TempDir(), SyncAlways: syncAlways}, nil)
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(srv.Shutdown)
	_, js := jsConnect(b, srv.URL())
	if _, err := EnsureStream(context.Background(), js, StreamSettings{Site: "depot"}); err != nil {
		b.Fatal(err)
	}
	return srv
}

func benchThroughput(b *testing.B, real, syncAlways bool) {
	srv := benchSetup(b, syncAlways)
	_, js := jsConnect(b, srv.URL())
	recs := records(1, b.N, "tallyd.depot.cam-1.door.in")
	var src Pending
	var left func() int
	if real {
		ob := realOutbox(b)
		for i := 0; i < len(recs); i += 1024 {
			if _, err := ob.Append(recs[i:min(i+1024, len(recs))]); err != nil {
				b.Fatal(err)
			}
		}
		src, left = ob, func() int { return int(ob.Stats().Pending) }
	} else {
		ob := newMemOutbox()
		ob.Append(recs...)
		src, left = ob, ob.Len
	}
	d := NewDeliverer(js, src, nil, DelivererOptions{}, nil)
	b.ResetTimer()
	start := time.Now()
	runDeliverer(b, d)
	testkit.WaitFor(b, 5*time.Minute, "an empty outbox", func() bool { return left() == 0 })
	el := time.Since(start)
	b.StopTimer()
	if s := d.Stats(); s.Acked != int64(b.N) {
		b.Fatalf("acked %d of %d", s.Acked, b.N)
	}
	b.ReportMetric(float64(b.N)/el.Seconds(), "events/s")
}

func benchPaced(b *testing.B) {
	srv := benchSetup(b, false)
	_, js := jsConnect(b, srv.URL())
	ob := newMemOutbox()
	d := NewDeliverer(js, ob, ob.wake, DelivererOptions{}, nil)
	var mu sync.Mutex
	var lat []time.Duration
	d.onAck = func(sent time.Time) {
		mu.Lock()
		lat = append(lat, time.Since(sent))
		mu.Unlock()
	}
	runDeliverer(b, d)
	recs := records(1, b.N, "tallyd.depot.cam-1.door.in")
	tick := time.NewTicker(10 * time.Millisecond)
	defer tick.Stop()
	b.ResetTimer()
	for _, r := range recs {
		<-tick.C
		ob.Append(r)
	}
	testkit.WaitFor(b, time.Minute, "every ack", func() bool { mu.Lock(); defer mu.Unlock(); return len(lat) == b.N })
	b.StopTimer()
	slices.Sort(lat)
	q := func(p float64) float64 { return float64(lat[int(p*float64(len(lat)-1))].Microseconds()) / 1000 }
	b.ReportMetric(q(0.50), "p50-ms")
	b.ReportMetric(q(0.99), "p99-ms")
	b.ReportMetric(float64(lat[len(lat)-1].Microseconds())/1000, "max-ms")
}
