package pipeline

import (
	"context"
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"slices"
	"testing"
	"time"

	"tallyd/capture"
	"tallyd/internal/fleet"
	"tallyd/internal/testkit"
)

// BenchmarkSharedHandover measures, over 20 kills, the time from a daemon's
// death to the first frame counted under the new holder's lease: two
// daemons in this process (pipeline + member each) share one generated
// camera at 10 fps on a real nats-server with JetStream; a kill cancels the
// holder's member without a release (its lease expires, as after SIGKILL)
// and stops its pipeline; the dead daemon is then replaced by a new one.
// lease_ttl is 2 s, renewed every 0.67 s, and the kill comes at a random
// point of the renewal cycle: the lease runs out 1.33–2 s after the kill;
// the rest is the new holder's start (claiming, reading the totals, opening
// the camera, its first frame).
func BenchmarkSharedHandover(b *testing.B) {
	const kills = 20
	const ttl = 2 * time.Second
	srv := testkit.StartNATSServer(b, true)
	_, js := testkit.JetStream(b, srv.URL())
	dir := b.TempDir()
	start := time.Now().Truncate(time.Second)
	type daemon struct {
		p      *Pipeline
		cancel context.CancelFunc
		done   chan error
	}
	n := 0
	spawn := func() *daemon {
		n++
		name := fmt.Sprintf("d%d", n)
		cfg := sharedSite(b, srv.URL(), start, "")
		cfg.Output.JSONL = ""
		cfg.Fleet.LeaseTTL.Duration = ttl
		cfg.StateDir = filepath.Join(dir, name)
		p, err := Build(cfg, Options{Shared: true, Pace: capture.PaceRealtime})
		if err != nil {
			b.Fatal(err)
		}
		ctx, cancel := context.WithCancel(context.Background())
		d := &daemon{p: p, cancel: cancel, done: make(chan error, 1)}
		runCtx, stopRun := context.WithCancel(context.Background())
		go func() { d.done <- p.Run(runCtx) }()
		if _, err := fleet.Join(ctx, js, fleet.Options{Site: "s", Member: name, TTL: ttl, Capacity: 1,
			Sources: []string{"a"}, Areas: nil}, p); err != nil {
			b.Fatal(err)
		}
		d.cancel = func() { cancel(); stopRun() }
		return d
	}
	holds := func(d *daemon) int64 { return d.p.sourceByID("a").count.handovers.Load() }
	// The holder's camera is up; the other's is on standby.
	counting := func(d *daemon) bool {
		return holds(d) > 0 && d.p.sourceByID("a").worker.Stats().State == capture.StateUp
	}
	ds := []*daemon{spawn(), spawn()}
	var took []float64
	b.ResetTimer()
	for range b.N {
		took = took[:0]
		for range kills {
			var holder, other int
			testkit.WaitFor(b, 10*time.Second, "one daemon counting the camera", func() bool {
				switch {
				case counting(ds[0]):
					holder, other = 0, 1
				case counting(ds[1]):
					holder, other = 1, 0
				default:
					return false
				}
				return true
			})
			// Kill at a random point of the holder's renewal cycle.
			time.Sleep(rand.N(ttl))
			before := holds(ds[other])
			killed := time.Now()
			ds[holder].cancel()
			testkit.WaitFor(b, 3*ttl, "the other daemon counting", func() bool { return holds(ds[other]) > before })
			took = append(took, float64(time.Since(killed))/float64(time.Millisecond))
			<-ds[holder].done
			_ = ds[holder].p.Close()
			ds[holder] = spawn()
		}
	}
	b.StopTimer()
	for _, d := range ds {
		d.cancel()
		<-d.done
		_ = d.p.Close()
	}
	slices.Sort(took)
	q := func(f float64) float64 { return took[min(len(took)-1, int(f*float64(len(took))))] }
	b.ReportMetric(q(0.5), "p50_ms")
	b.ReportMetric(q(0.99), "p99_ms")
	b.ReportMetric(took[0], "min_ms")
}
