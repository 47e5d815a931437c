package pipeline

import (
	"fmt"
	"sync/atomic"
	"time"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/detect/motion"
	"tallyd/events"
	"tallyd/track"
)

// sourceRun is everything the pipeline holds for one source. Its parts have
// different owners, so they are kept apart: settings are fixed at Build; the
// stages and the cursor belong to whichever detect worker holds the source
// (the scheduler gives a source to one worker at a time); sched is guarded by
// the scheduler's lock; counters are atomic.
type sourceRun struct {
	id     string
	set    sourceSettings
	worker *capture.Worker
	info   capture.Info // as opened
	scene  *scene.Scene // generated sources only, for the truth
	tracks *tracksFile  // nil unless tracks are written
	stages sourceStages
	cursor cursor
	sched  schedState
	count  counters
	// lostConn is the last connection the capture worker reported lost.
	lostConn atomic.Int64
	// restore is the saved rule state a live source continues from.
	restore map[string]events.RuleState
	// reloaded is set when new rules are in force; the worker holding the
	// source switches before its next frame.
	reloaded atomic.Bool
	// view is what the operator's snapshots and preview show.
	view view
	// annotate writes the processed frames with the overlay (replay
	// --annotate); nil otherwise.
	annotate *annotator
	// shared is set on a site shared by several daemons (Options.Shared).
	shared *sharedSource
}

// sourceSettings are a source's settings from the site file, in stage form.
type sourceSettings struct {
	live    bool               // a stream or device: it has no end to reach
	start   time.Time          // wall time of frame 0, for event times
	maxAge  time.Duration      // frames older than this when their turn comes are dropped (0: never)
	gate    *motion.GateConfig // nil: every frame is detected
	tracker track.Settings
}

// sourceStages are the per-source stage objects after the detector.
type sourceStages struct {
	w, h    int // frame size the rules were converted for (0 until known)
	lines   []events.LineRule
	zones   []events.ZoneRule
	gate    *motion.Gate
	tracker Tracker
	engine  *events.Engine // nil until the first frame's size is known
}

// cursor is where the source's processing stands.
type cursor struct {
	conn      int64 // connection of the last frame processed (live sources)
	closedFor int64 // last connection whose tracks were closed as lost
	seq       int64 // of the last frame processed
	pts       time.Duration
	captured  time.Time
	untilDone bool // Options.Until reached
}

// schedState is the scheduler's view of a source.
type schedState struct {
	busy     bool // claimed by a detect worker
	finished bool // its end was processed
}

// setupRules converts the source's rules to pixels of its w x h frames and
// starts its rule engine and motion gate; called again when a reconnected
// camera delivers another size.
func (sr *sourceRun) setupRules(p *Pipeline, w, h int) {
	st := &sr.stages
	st.w, st.h = w, h
	st.lines, st.zones = RulesFor(p.rulesConfig(), sr.id, w, h)
	if st.gate != nil {
		_ = st.gate.Close()
		st.gate = nil
	}
	if sr.set.gate != nil {
		st.gate = newGate(sr, st)
	}
	meta := sr.meta(p)
	restore := sr.restore
	if st.engine != nil { // a new frame size: the counts so far carry over
		restore = st.engine.State(sr.cursor.pts)
	}
	st.engine = events.NewEngine(meta, st.lines, st.zones)
	st.engine.SetIntervals(intervalConfig(p.cfg))
	st.engine.Restore(restore)
	sr.view.setCounts(st)
}

func newGate(sr *sourceRun, st *sourceStages) *motion.Gate {
	return motion.NewGate(*sr.set.gate, st.w, st.h, gateRegion(st.lines, st.zones))
}

// admit says why a frame is not worth detecting ("" when it is).
func (sr *sourceRun) admit(f *capture.Frame) DropReason {
	if sr.set.maxAge > 0 && time.Since(f.Captured) > sr.set.maxAge {
		return DropTooOld
	}
	if g := sr.stages.gate; g != nil && !g.Moving(f) {
		return DropGated
	}
	return ""
}

// startTracker builds the source's tracker; Build calls it first, so
// settings the tracker refuses stop the start.
func (sr *sourceRun) startTracker() error {
	tr, err := sr.set.tracker.New()
	if err != nil {
		return err
	}
	sr.stages.tracker = tr
	return nil
}

// resetTracker starts a fresh tracker after the source's tracks ended (an
// outage, a new frame size).
func (sr *sourceRun) resetTracker() {
	if sr.tracks != nil {
		sr.tracks.restart()
	}
	if err := sr.startTracker(); err != nil {
		panic(fmt.Sprintf("source %s: tracker settings accepted at start now refused: %v", sr.id, err))
	}
}

// closeStages releases the per-source OpenCV objects.
func (sr *sourceRun) closeStages() {
	sr.view.close()
	if sr.stages.gate != nil {
		_ = sr.stages.gate.Close()
		sr.stages.gate = nil
	}
}
