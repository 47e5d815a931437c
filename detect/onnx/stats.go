package onnx

import (
	"slices"
	"sync"
	"time"
)

// Stats is what a detector measured since it started: totals per stage and
// per-frame latency percentiles. Benchmarks and `make bench` print it.
type Stats struct {
	Frames   int64 // frames detected
	Batches  int64 // inference calls
	Prepared int64 // frames prepared ahead of Detect (on a capture goroutine)
	// Prepare is letterbox + conversion; CPU is the preparing thread's.
	Prepare Stage
	// Infer is the engine call. CPU is the calling thread's when ONNX
	// Runtime runs one intra-op thread (the inference runs there; sessions
	// running beside it are not counted), else the whole process's during
	// the call (the engine's own threads included, and anything else running
	// then).
	Infer Stage
	// Post is decoding, mapping to source pixels and NMS; CPU is the thread's.
	Post Stage
	// Latency runs from a frame's capture time to its detections.
	Latency Percentiles
	// Detect is the time each frame spent inside Detect (its batch's
	// inference plus its own post-processing).
	Detect Percentiles
}

// Stage is the total wall and CPU time of one stage.
type Stage struct{ Wall, CPU time.Duration }

// PerFrame divides a stage's totals by the frames detected.
func (s Stats) PerFrame(st Stage) Stage {
	if s.Frames == 0 {
		return Stage{}
	}
	return Stage{Wall: st.Wall / time.Duration(s.Frames), CPU: st.CPU / time.Duration(s.Frames)}
}

// Percentiles summarises a set of durations (nearest-rank percentiles).
type Percentiles struct {
	N             int
	P50, P99, Max time.Duration
}

// statsSamples bounds the latency samples kept (the most recent ones).
const statsSamples = 1 << 15

// recorder accumulates Stats; safe for concurrent use.
type recorder struct {
	mu      sync.Mutex
	s       Stats
	latency ring
	detect  ring
}

type ring struct {
	buf  []time.Duration
	next int
}

func (r *ring) add(d time.Duration) {
	if len(r.buf) < statsSamples {
		r.buf = append(r.buf, d)
		return
	}
	r.buf[r.next] = d
	r.next = (r.next + 1) % statsSamples
}

func (r *ring) percentiles() Percentiles {
	if len(r.buf) == 0 {
		return Percentiles{}
	}
	s := slices.Clone(r.buf)
	slices.Sort(s)
	rank := func(p float64) time.Duration {
		i := int(p*float64(len(s))+0.999999) - 1 // nearest rank: ceil(p*n) - 1
		return s[min(max(i, 0), len(s)-1)]
	}
	return Percentiles{N: len(s), P50: rank(0.50), P99: rank(0.99), Max: s[len(s)-1]}
}

func (r *recorder) prepared(wall, cpu time.Duration) {
	r.mu.Lock()
	r.s.Prepared++
	r.s.Prepare.Wall += wall
	r.s.Prepare.CPU += cpu
	r.mu.Unlock()
}

// inferred records one engine call for n frames.
func (r *recorder) inferred(wall, cpu time.Duration) {
	r.mu.Lock()
	r.s.Batches++
	r.s.Infer.Wall += wall
	r.s.Infer.CPU += cpu
	r.mu.Unlock()
}

// frame records one frame's post-processing, its time in Detect and, when
// the capture time is known, its latency.
func (r *recorder) frame(post, postCPU, inDetect time.Duration, captured time.Time, done time.Time) {
	r.mu.Lock()
	r.s.Frames++
	r.s.Post.Wall += post
	r.s.Post.CPU += postCPU
	r.detect.add(inDetect)
	if !captured.IsZero() {
		r.latency.add(done.Sub(captured))
	}
	r.mu.Unlock()
}

// inlinePrepare adds preparation done inside Detect (no Preparer call).
func (r *recorder) inlinePrepare(wall, cpu time.Duration) {
	r.mu.Lock()
	r.s.Prepare.Wall += wall
	r.s.Prepare.CPU += cpu
	r.mu.Unlock()
}

func (r *recorder) snapshot() Stats {
	r.mu.Lock()
	defer r.mu.Unlock()
	s := r.s
	s.Latency = r.latency.percentiles()
	s.Detect = r.detect.percentiles()
	return s
}
