package pipeline

import (
	"context"
	"errors"
	"sync"
	"time"

	"tallyd/capture"
)

// Run processes until every source has ended or ctx is cancelled, then
// drains what was already captured, closes open zone stays and lets the
// delivery finish. It returns the first processing error, or the delivery's
// errors.
//
// Shutdown order: capture stops first (ctx); processing, on its own context,
// finishes the frames already captured and the end of every source; then the
// sinks write what they hold and the outbox drains into the stream (what
// does not make it stays in the outbox for the next start); then the
// publishers flush. ShutdownTimeout bounds the processing drain,
// DeliverTimeout the outbox drain.
func (p *Pipeline) Run(ctx context.Context) error {
	procCtx, cancelProc := context.WithCancel(context.Background())
	defer cancelProc()
	ctx, p.stopCapture = context.WithCancel(ctx)
	defer p.stopCapture()
	p.out.start()
	if !p.opts.Shared && !p.opts.Offline {
		// One daemon holds every zone of its areas: no lease needed.
		for name := range p.rulesConfig().Areas() {
			p.runArea(name, nil)
		}
	}
	s := newScheduler(p)
	p.sched.Store(s)
	for _, sr := range p.sources {
		sr.worker.Out.Notify(s.ready)
		sr.worker.OnLost = func(l capture.Lost) {
			sr.lostConn.Store(l.Conn)
			s.poke()
		}
	}
	var capWG, procWG sync.WaitGroup
	errs := make(chan error, len(p.sources)+p.workers())
	for _, sr := range p.sources {
		capWG.Add(1)
		go func() {
			defer capWG.Done()
			if err := sr.worker.Run(ctx); err != nil {
				p.log.Error("source failed", "source", sr.id, "err", err)
				errs <- err
			}
			s.poke()
		}()
	}
	for range p.workers() {
		procWG.Add(1)
		go func() {
			defer procWG.Done()
			if err := s.work(procCtx); err != nil {
				errs <- err
				cancelProc()
			}
		}()
	}
	stopStatus := p.startStatus()
	done := make(chan struct{})
	go func() { capWG.Wait(); procWG.Wait(); close(done) }()
	select {
	case <-done:
	case <-ctx.Done():
		select {
		case <-done:
		case <-time.After(p.opts.ShutdownTimeout):
			p.log.Error("shutdown deadline passed; stopping processing", "timeout", p.opts.ShutdownTimeout)
			cancelProc()
			<-done
		}
	}
	for _, sr := range p.sources {
		if sr.worker.Stats().State == capture.StateStopped && !sr.set.live {
			p.interrupted.Store(true)
		}
	}
	deliver := p.opts.DeliverTimeout
	if ctx.Err() != nil {
		// Stopped by a signal: stop within about a second; what is not
		// delivered by then waits in the outbox for the next start.
		deliver = min(deliver, time.Second)
	}
	p.stopAreas()
	outErr := p.out.stop(deliver)
	stopStatus()
	p.logDelivery("delivery at stop")
	flushErr := p.drain()
	close(errs)
	for err := range errs {
		return err
	}
	return errors.Join(outErr, flushErr)
}

// logDelivery logs the delivery counters.
func (p *Pipeline) logDelivery(msg string) {
	d := p.out.stats()
	attrs := []any{"produced", d.Produced, "acked", d.Acked, "pending", d.Pending, "dropped", d.Dropped, "failures", d.Failures}
	if d.JSONL != nil {
		attrs = append(attrs, "jsonl_written", d.JSONL.Written, "jsonl_dropped", d.JSONL.Dropped, "jsonl_failed", d.JSONL.Failed)
	}
	p.log.Info(msg, attrs...)
}

// startStatus logs one line per source periodically; it returns a stop func.
func (p *Pipeline) startStatus() func() {
	if p.opts.StatusEvery <= 0 {
		return func() {}
	}
	stop := make(chan struct{})
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		t := time.NewTicker(p.opts.StatusEvery)
		defer t.Stop()
		for {
			select {
			case <-stop:
				return
			case <-t.C:
				for _, s := range p.Status() {
					p.log.Info("status", s.logAttrs()...)
				}
				p.logDelivery("status delivery")
			}
		}
	}()
	return func() { close(stop); wg.Wait() }
}
