package onnx

import (
	"bufio"
	"os"
	"runtime"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"
)

// BenchmarkInferSettings is ONNX Runtime inference alone, one session, one
// inference at a time, under each setting that matters on a small model:
// the legacy two-thread setting, spinning off, QuickGelu fusion off, one
// intra-op thread. It reports frames/s and process CPU ms per frame.
func BenchmarkInferSettings(b *testing.B) {
	for _, tc := range []struct {
		name string
		set  func(*Config)
	}{
		{"threads2-spin-fused", legacySetting},
		{"threads2-nospin-fused", func(c *Config) { legacySetting(c); c.Spin = false }},
		{"threads2-nospin-unfused", func(c *Config) {
			legacySetting(c)
			c.Spin, c.DisableOptimizers = false, []string{"QuickGeluFusion"}
		}},
		{"threads1-fused", func(c *Config) { c.Sessions, c.DisableOptimizers = 1, nil }},
		{"threads1-unfused", func(c *Config) { c.Sessions = 1 }}, // the defaults
	} {
		b.Run(tc.name, func(b *testing.B) { benchInferWith(b, EngineORT, tc.set) })
	}
}

// BenchmarkInferSessions is ONNX Runtime inference alone on n sessions of
// the default setting (one intra-op thread each, spinning off, QuickGelu
// fusion off), each driven by its own goroutine: the inference ceiling of a
// detector pool on this machine. frames/s counts all sessions together.
func BenchmarkInferSessions(b *testing.B) {
	for _, n := range []int{1, 2, 4} {
		b.Run("sessions-"+strconv.Itoa(n), func(b *testing.B) {
			d, m := benchDetectorWith(b, EngineORT, func(c *Config) { c.Sessions = n })
			buf := make([]float32, d.pre.size())
			if _, err := d.pre.fill(m, buf); err != nil {
				b.Fatal(err)
			}
			for _, s := range d.pool.all { // warm-up
				if _, err := s.eng.run(buf, 1); err != nil {
					b.Fatal(err)
				}
			}
			b.ResetTimer()
			start, cpu0 := time.Now(), processCPU()
			var next sync.Mutex
			left := b.N
			var wg sync.WaitGroup
			for _, s := range d.pool.all {
				wg.Add(1)
				go func() {
					defer wg.Done()
					for {
						next.Lock()
						if left == 0 {
							next.Unlock()
							return
						}
						left--
						next.Unlock()
						if _, err := s.eng.run(buf, 1); err != nil {
							b.Error(err)
							return
						}
					}
				}()
			}
			wg.Wait()
			reportRate(b, start, cpu0)
		})
	}
}

// BenchmarkSessionMemory measures the resident memory each extra session
// costs: RSS after a detector of one session has run once, then after a
// second detector of four sessions has run once on each; the difference
// divided by four (MiB per session; the process's RSS from /proc).
func BenchmarkSessionMemory(b *testing.B) {
	if _, err := os.Stat("/proc/self/status"); err != nil {
		b.Skip("no /proc/self/status")
	}
	for range b.N {
		one, m := benchDetectorWith(b, EngineORT, func(c *Config) { c.Sessions = 1 })
		buf := make([]float32, one.pre.size())
		if _, err := one.pre.fill(m, buf); err != nil {
			b.Fatal(err)
		}
		if _, err := one.eng.run(buf, 1); err != nil {
			b.Fatal(err)
		}
		runtime.GC()
		r1 := rssMiB(b)
		const extra = 4
		four, _ := benchDetectorWith(b, EngineORT, func(c *Config) { c.Sessions = extra })
		for _, s := range four.pool.all {
			if _, err := s.eng.run(buf, 1); err != nil {
				b.Fatal(err)
			}
		}
		runtime.GC()
		r2 := rssMiB(b)
		b.ReportMetric((r2-r1)/extra, "MiB/session")
		b.ReportMetric(r1, "MiB-rss-1-session")
		b.Logf("RSS %.1f MiB with one session run once, %.1f MiB after %d more: %.1f MiB per session",
			r1, r2, extra, (r2-r1)/extra)
		_ = four.Close()
		_ = one.Close()
	}
}

// rssMiB is the process's resident set size (VmRSS of /proc/self/status).
func rssMiB(b *testing.B) float64 {
	f, err := os.Open("/proc/self/status")
	if err != nil {
		b.Fatal(err)
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		if v, ok := strings.CutPrefix(sc.Text(), "VmRSS:"); ok {
			kb, err := strconv.ParseFloat(strings.TrimSuffix(strings.TrimSpace(v), " kB"), 64)
			if err != nil {
				b.Fatal(err)
			}
			return kb / 1024
		}
	}
	b.Fatal("no VmRSS in /proc/self/status")
	return 0
}
