package pipeline

import (
	"context"
	"fmt"
	"time"

	"tallyd/capture"
	"tallyd/events"
)

// process is the per-frame path, start to end, for the jobs one detect worker
// claimed (at most one per source):
//
//  1. a lost or ended source closes what it held open;
//  2. a frame from a new connection, or of a new size, first ends the old
//     connection's tracks and converts the rules for the new size;
//  3. frames too old for max_age, and frames the motion gate finds still,
//     are dropped and counted;
//  4. the remaining frames go through the detector in one call;
//  5. per frame: the source's tracker, its tracks file, its rules, and the
//     events to every publisher; then the frame's counters.
func (p *Pipeline) process(ctx context.Context, jobs []job) error {
	var batch []*capture.Frame
	var owners []*sourceRun
	for _, j := range jobs {
		sr := j.sr
		switch j.kind {
		case jobLost: // 1
			p.closeLost(sr, sr.lostConn.Load())
			continue
		case jobEnd:
			p.closeStays(sr, events.ReasonStreamEnd)
			if e := sr.stages.engine; e != nil {
				p.publish(sr, sr.cursor.captured, e.FinishIntervals(sr.cursor.seq, sr.cursor.pts))
				p.out.state.update(sr.id, e.State(sr.cursor.pts))
			}
			continue
		}
		f := j.frame
		if sr.cursor.untilDone { // Options.Until: the frame to keep was processed
			f.Close()
			continue
		}
		// A shared source's first frame under a hold it has not counted
		// under yet (shared.go).
		var newHold *holdRun
		if sh := sr.shared; sh != nil {
			if hr := sh.holdOf(f.Conn); hr != sh.active {
				newHold = hr
			}
		}
		if newHold == nil {
			p.applyReload(sr)
		} else {
			sr.reloaded.Store(false) // the new hold starts with the rules in force
		}
		// 2. A loss report that a newer frame overtook: the old connection's
		// tracks end first.
		if sr.cursor.conn != 0 && f.Conn != sr.cursor.conn && sr.cursor.closedFor < sr.cursor.conn {
			p.closeLost(sr, sr.cursor.conn)
		}
		sr.cursor.conn = f.Conn
		if newHold != nil {
			p.beginHold(sr, f, newHold) // fresh tracks and rules for this frame's size
		} else if w, h := f.Mat.Cols(), f.Mat.Rows(); w != sr.stages.w || h != sr.stages.h {
			if sr.stages.engine != nil {
				p.closeStays(sr, events.ReasonSourceLost)
				sr.resetTracker()
			}
			sr.setupRules(p, w, h)
		}
		if why := sr.admit(f); why != "" { // 3
			sr.count.drop(why)
			f.Close()
			continue
		}
		batch = append(batch, f)
		owners = append(owners, sr)
	}
	if len(batch) == 0 {
		return nil
	}
	defer func() {
		for _, f := range batch {
			f.Close()
		}
	}()
	start := time.Now() // 4
	dets, err := p.det.Detect(ctx, batch)
	p.detectCalls.Add(1)
	if err != nil {
		return fmt.Errorf("detect: %w", err)
	}
	perFrame := int64(time.Since(start)) / int64(len(batch))
	for i, f := range batch { // 5
		sr := owners[i]
		res := sr.stages.tracker.Update(f.PTS, dets[i])
		if sr.tracks != nil {
			if err := sr.tracks.write(int(f.Seq)+1, res, sr.stages.w, sr.stages.h); err != nil {
				return fmt.Errorf("source %s: write tracks: %w", sr.id, err)
			}
		}
		if evs := sr.stages.engine.Step(f.Seq, f.PTS, res); len(evs) > 0 {
			p.publish(sr, f.Captured, evs)
			p.out.state.update(sr.id, sr.stages.engine.State(f.PTS))
		}
		sr.view.update(f.Mat, f.Seq, f.PTS, res, p.opts.Until != nil)
		if u := p.opts.Until; u != nil && f.PTS >= *u && !sr.cursor.untilDone {
			sr.cursor.untilDone = true
			if p.untilLeft.Add(-1) == 0 {
				p.stopCapture()
			}
		}
		if sr.annotate != nil {
			if err := sr.annotate.write(f.Mat, &sr.stages, res, sr.stages.engine.Occupancy()); err != nil {
				return fmt.Errorf("source %s: annotated video: %w", sr.id, err)
			}
		}
		sr.cursor.seq, sr.cursor.pts, sr.cursor.captured = f.Seq, f.PTS, f.Captured
		sr.count.processed.Add(1)
		sr.count.detectNanos.Add(perFrame)
		age := time.Since(f.Captured)
		sr.count.ages.add(age)
		if m := p.metrics; m != nil {
			m.frame(sr.id, time.Duration(perFrame), age)
		}
	}
	return nil
}

// closeStays ends every zone stay open on a source.
func (p *Pipeline) closeStays(sr *sourceRun, reason events.Reason) {
	if sr.stages.engine == nil {
		return // never delivered a frame
	}
	c := sr.cursor
	p.publish(sr, c.captured, sr.stages.engine.CloseAll(c.seq, c.pts, reason))
}

// closeLost ends what a lost connection held open: zone stays (reason
// source_lost, or handover when the source moved to another daemon),
// tracks, the detector's and the gate's memory of the scene.
func (p *Pipeline) closeLost(sr *sourceRun, conn int64) {
	if conn <= sr.cursor.closedFor {
		return
	}
	sr.cursor.closedFor = conn
	reason := events.ReasonSourceLost
	var hr *holdRun
	if sr.shared != nil {
		if hr = sr.shared.holdOf(conn); hr != nil && hr.ended.Load() {
			reason = events.ReasonHandover
		}
	}
	p.closeStays(sr, reason)
	if hr != nil && sr.stages.engine != nil {
		p.out.state.update(sr.id, sr.stages.engine.State(sr.cursor.pts))
	}
	if hr != nil && hr.ended.Load() {
		hr.closed.Store(true)
	}
	sr.resetTracker()
	if f, ok := p.det.(Forgetter); ok {
		f.Forget(sr.id)
	}
	if sr.stages.gate != nil {
		sr.stages.gate.Reset()
	}
}
