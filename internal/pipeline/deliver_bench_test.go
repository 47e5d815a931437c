package pipeline

import (
	"fmt"
	"strings"
	"testing"
	"time"

	"tallyd/events"
	"tallyd/internal/testkit"
)

// BenchmarkDeliveryPath is the whole way out for events, as the detect
// workers use it: encode, the outbox's queue, grouped commits to the bbolt
// outbox, JetStream publish with the event id, ack, delete — to an embedded
// JetStream server on loopback, with ~450-byte events offered as fast as the
// queue takes them (paced so that none is dropped). One op is one event.
func BenchmarkDeliveryPath(b *testing.B) {
	cfg := siteFile(b, "site: s\nsources:\n  - id: walkway\n    scene: {seed: 1, width: 320, height: 180, duration: 30s, crossings: 2, visitors: 0}\n"+
		"output:\n  nats:\n    embedded: {port: 0}\nlog: {level: error}\n")
	p, err := Build(cfg, Options{})
	if err != nil {
		b.Fatal(err)
	}
	defer p.Close()
	p.out.start()
	pad := strings.Repeat("p", 150)
	b.ResetTimer()
	start := time.Now()
	for i := range b.N {
		ev := events.Event{SpecVersion: events.SpecVersion, ID: fmt.Sprintf("bench-%09d", i), Source: "/tallyd/s/walkway",
			Type: events.TypeLineIn, Subject: "gate", Time: time.Now().UTC(), DataContentType: events.ContentType,
			Data: events.Data{Site: "s", Source: "walkway", Rule: "gate", Kind: events.KindIn, TrackID: int64(i), Class: pad}}
		for p.out.obw.Stats().Queued > queueSize/2 { // keep the queue from overflowing
			time.Sleep(100 * time.Microsecond)
		}
		p.out.offer(ev)
	}
	testkit.WaitFor(b, 5*time.Minute, "every ack", func() bool { return p.out.stats().Acked >= int64(b.N) })
	el := time.Since(start)
	b.StopTimer()
	if err := p.out.stop(time.Second); err != nil {
		b.Fatal(err)
	}
	if s := p.out.stats(); s.Dropped != 0 {
		b.Fatalf("dropped %d", s.Dropped)
	}
	b.ReportMetric(float64(b.N)/el.Seconds(), "events/s")
}
