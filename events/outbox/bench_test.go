package outbox

import (
	"context"
	"runtime"
	"testing"
	"time"
)

// benchDataBytes is the size of a realistic counting event's JSON (a
// CloudEvent with its data: site, source, rule, track, direction, times).
const benchDataBytes = 400

// benchOptions keep every record (no eviction during a benchmark) on the
// real clock.
var benchOptions = Options{MaxBytes: 1 << 40, Now: time.Now}

// benchEvents are n realistic events produced now.
func benchEvents(n int) []Record {
	recs := events(1, uint64(n), benchDataBytes)
	for i := range recs {
		recs[i].At = time.Time{} // Append sets now
	}
	return recs
}

func reportRate(b *testing.B, n int) {
	b.ReportMetric(float64(n)/b.Elapsed().Seconds(), "records/s")
}

// BenchmarkAppendGrouped measures records/s through a Writer, with one
// producer offering as fast as it can (retrying when the queue is full).
func BenchmarkAppendGrouped(b *testing.B) {
	ob := open(b, benchOptions)
	w := NewWriter(ob, 8192)
	recs := benchEvents(1024)
	ctx, cancel := context.WithCancel(context.Background())
	res := make(chan error, 1)
	go func() { res <- w.Run(ctx) }()
	b.ResetTimer()
	go func() {
		for i := 0; i < b.N; i++ {
			for !w.Offer(recs[i%len(recs)]) {
				runtime.Gosched()
			}
		}
	}()
	for w.Stats().Appended < int64(b.N) {
		<-w.Appended()
	}
	b.StopTimer()
	cancel()
	if err := <-res; err != nil {
		b.Fatal(err)
	}
	st := w.Stats()
	reportRate(b, b.N)
	b.ReportMetric(float64(st.Appended)/float64(st.Committed), "records/commit")
}

// BenchmarkAppendOne measures one record per commit: the fsync per commit
// that grouping pays once per batch.
func BenchmarkAppendOne(b *testing.B) {
	ob := open(b, benchOptions)
	recs := benchEvents(1024)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := ob.Append(recs[i%len(recs) : i%len(recs)+1]); err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	reportRate(b, b.N)
}

// BenchmarkReadDelete measures the drain rate: read 256, delete them, as a
// publisher does after the broker acknowledged them.
func BenchmarkReadDelete(b *testing.B) {
	ob := open(b, benchOptions)
	recs := benchEvents(1024)
	for n := 0; n < b.N; n += len(recs) {
		if _, err := ob.Append(recs[:min(len(recs), b.N-n)]); err != nil {
			b.Fatal(err)
		}
	}
	b.ResetTimer()
	after := uint64(0)
	for read := 0; read < b.N; {
		rs, err := ob.Read(after, 256)
		if err != nil {
			b.Fatal(err)
		}
		if len(rs) == 0 {
			b.Fatalf("outbox empty after %d of %d records", read, b.N)
		}
		if err := ob.Delete(seqsOf(rs)); err != nil {
			b.Fatal(err)
		}
		read += len(rs)
		after = rs[len(rs)-1].Seq
	}
	b.StopTimer()
	reportRate(b, b.N)
}
