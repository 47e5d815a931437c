package pipeline

import (
	"math"
	"sort"
	"time"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/events"
)

// SourceStatus is one source's health and counters: the status line, and
// what tests and the summary read.
type SourceStatus struct {
	ID    string
	State capture.State
	Err   string // why the source is not up, or why it failed ("" when fine)
	// Read counts frames decoded; Processed those that went through the
	// detector; Dropped the others, by reason. Read = Processed + Dropped
	// once a recorded source has ended.
	Read      int64
	Processed int64
	Dropped   Drops
	// Events counts the events the source's rules produced (delivery is
	// counted for all sources together: Pipeline.Delivery).
	Events     int64
	AgeP50ms   float64       // frame age at the end of publishing, recent frames
	AgeP99ms   float64       //
	DetectTime time.Duration // total time in Detect attributed to this source
	// EndedEarly: a recording that ended before the length its container
	// declares (Declared frames).
	EndedEarly bool
	Declared   int64
	// Shared sites: Holds counts the holds of the source this daemon began,
	// Gap the time without a holder before them, Fenced the events refused
	// for want of a valid lease.
	Holds  int64
	Gap    time.Duration
	Fenced int64
}

// Status reports each source's health and counters; safe while Run runs.
func (p *Pipeline) Status() []SourceStatus {
	out := make([]SourceStatus, 0, len(p.sources))
	for _, sr := range p.sources {
		st := sr.worker.Stats()
		p50, p99 := sr.count.ages.percentiles()
		out = append(out, SourceStatus{ID: sr.id, State: st.State, Err: st.Err, Read: st.Read,
			Processed: sr.count.processed.Load(), Dropped: sr.count.drops(st),
			Events:   sr.count.events.Load(),
			AgeP50ms: p50, AgeP99ms: p99, DetectTime: time.Duration(sr.count.detectNanos.Load()),
			EndedEarly: st.EndedEarly, Declared: st.Declared,
			Holds: sr.count.handovers.Load(), Gap: time.Duration(sr.count.gapNanos.Load()), Fenced: sr.count.fenced.Load()})
	}
	return out
}

// logAttrs is the status line's key/value pairs; err only when there is one.
func (s SourceStatus) logAttrs() []any {
	a := []any{"source", s.ID, "state", s.State, "read", s.Read, "processed", s.Processed,
		"dropped_rate", s.Dropped.ForRate, "dropped_mailbox", s.Dropped.Mailbox, "dropped_prepare", s.Dropped.Prep,
		"dropped_too_old", s.Dropped.TooOld, "gated", s.Dropped.Gated,
		"events", s.Events,
		"age_p50_ms", round1(s.AgeP50ms), "age_p99_ms", round1(s.AgeP99ms)}
	if s.Holds > 0 || s.Fenced > 0 {
		a = append(a, "holds", s.Holds, "gap_s", round1(s.Gap.Seconds()), "fenced", s.Fenced)
	}
	if s.Err != "" {
		a = append(a, "err", s.Err)
	}
	return a
}

func round1(v float64) float64 { return math.Round(v*10) / 10 }

// Summary is what a run did: the table replay and run print, and the line
// replay prints with --summary json.
type Summary struct {
	FramesRead      int64 `json:"frames_read"`
	FramesProcessed int64 `json:"frames_processed"`
	FramesDropped   int64 `json:"frames_dropped"`
	Dropped         Drops `json:"dropped"`
	// Events counts the events produced and what became of them.
	Events DeliveryStats `json:"events"`
	// Interrupted: stopped (a signal, a deadline) before every recorded
	// source reached its end; the counts cover only what was read.
	Interrupted bool `json:"interrupted"`
	// EndedEarly lists recorded sources that ended before the length their
	// container declares (a cut or damaged file).
	EndedEarly []string                 `json:"ended_early,omitempty"`
	Rules      map[string]events.Totals `json:"rules"`
	// Truth holds the true totals of rules on generated scenes.
	Truth map[string]events.Totals `json:"truth,omitempty"`
}

// Summary totals frames, events and rule counts over all sources. Call it
// after Run.
//
// Delivered is when every event reached the stream (or the NATS server) and
// the JSON-lines file: nothing pending, dropped or failed.
func (p *Pipeline) Summary() Summary {
	s := Summary{Rules: map[string]events.Totals{}, Events: p.out.stats(), Interrupted: p.interrupted.Load(), Truth: p.Truth()}
	for i, st := range p.Status() {
		sr := p.sources[i]
		s.FramesRead += st.Read
		s.FramesProcessed += st.Processed
		s.Dropped.add(st.Dropped)
		if st.EndedEarly {
			s.EndedEarly = append(s.EndedEarly, st.ID)
		}
		for name, t := range zeroTotals(p.rulesConfig(), sr.id) {
			s.Rules[name] = t
		}
		if sr.stages.engine != nil { // nil: no frame arrived (a camera that never came up)
			for name, t := range sr.stages.engine.Totals() {
				s.Rules[name] = t
			}
		}
	}
	s.FramesDropped = s.Dropped.Total()
	return s
}

// RuleNames lists rule names in a stable order.
func RuleNames(m map[string]events.Totals) []string {
	names := make([]string, 0, len(m))
	for n := range m {
		names = append(names, n)
	}
	sort.Strings(names)
	return names
}

// Truth returns the true totals of the rules on generated sources (computed
// once from the scenes' ground truth), or nil when no source is generated.
func (p *Pipeline) Truth() map[string]events.Totals {
	p.truthOnce.Do(func() {
		for _, sr := range p.sources {
			if sr.scene == nil {
				continue
			}
			if p.truth == nil {
				p.truth = map[string]events.Totals{}
			}
			w, h := sr.scene.Size()
			lines, zones := RulesFor(p.rulesConfig(), sr.id, w, h)
			for name, t := range SceneTruth(sr.scene, lines, zones) {
				p.truth[name] = t
			}
		}
	})
	return p.truth
}

// SceneTruth computes the true rule totals of a generated scene.
func SceneTruth(s *scene.Scene, lines []events.LineRule, zones []events.ZoneRule) map[string]events.Totals {
	frames := make([]events.TruthFrame, s.Frames())
	for i := range frames {
		objs := s.Truth(i)
		tf := events.TruthFrame{TS: time.Duration(float64(i) / s.FPS() * float64(time.Second))}
		for _, o := range objs {
			tf.Objects = append(tf.Objects, events.TruthObject{ID: o.ID, Class: o.Class, Box: o.Box})
		}
		frames[i] = tf
	}
	return events.TruthTotals(lines, zones, frames)
}

// Delivered reports whether every event produced reached every sink.
func (s Summary) Delivered() bool {
	e := s.Events
	ok := e.Pending == 0 && e.Dropped == 0
	if j := e.JSONL; j != nil {
		ok = ok && j.Dropped == 0 && j.Failed == 0
	}
	return ok
}
