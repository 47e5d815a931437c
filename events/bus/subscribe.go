package bus

import (
	"context"
	"fmt"
	"sync"
	"time"

	"github.com/nats-io/nats.go"

	"tallyd/events"
)

// Filter selects events by subject; empty fields match everything.
type Filter struct {
	Prefix, Site, Source, Rule string
}

// Subject is the NATS subject the filter subscribes to:
// "<prefix>.<site|*>.<source|*>.<rule|*>.*". It fails on an invalid token,
// naming the field.
func (f Filter) Subject() (string, error) {
	if err := ValidPrefix(f.Prefix); err != nil {
		return "", fmt.Errorf("filter prefix: %w", err)
	}
	subj := f.Prefix
	for _, p := range []struct{ name, v string }{{"site", f.Site}, {"source", f.Source}, {"rule", f.Rule}} {
		if p.v == "" {
			if p.name == "rule" {
				// Every rule's events, a source's handover events
				// (<prefix>.<site>.<source>.handover) and area events.
				return subj + ".>", nil
			}
			subj += ".*"
			continue
		}
		if err := ValidToken(p.v); err != nil {
			return "", fmt.Errorf("filter %s: %w", p.name, err)
		}
		subj += "." + p.v
	}
	return subj + ".*", nil
}

// MalformedError reports a message that is not a valid tallyd event: the
// subject it came on and why it was rejected. It wraps events.ErrMalformed.
type MalformedError struct {
	Subject string
	Raw     []byte
	Err     error
}

// Error names the subject and the reason.
func (e *MalformedError) Error() string { return fmt.Sprintf("subject %s: %v", e.Subject, e.Err) }

// Unwrap gives the reason.
func (e *MalformedError) Unwrap() error { return e.Err }

// SubscribeOption adjusts Subscribe.
type SubscribeOption func(*subscribeOpts)

type subscribeOpts struct {
	onMalformed func(*MalformedError)
	onReady     func()
	onDropped   func(n int)
	bufferMsgs  int
}

// dropCheck is how often Subscribe looks for dropped messages.
const dropCheck = 250 * time.Millisecond

// OnMalformed hands malformed messages to fn and keeps listening. Without
// it, Subscribe stops at the first malformed message and returns it.
func OnMalformed(fn func(*MalformedError)) SubscribeOption {
	return func(o *subscribeOpts) { o.onMalformed = fn }
}

// OnReady calls fn once the server has registered the subscription, so that
// a caller knows events published from then on will be seen.
func OnReady(fn func()) SubscribeOption {
	return func(o *subscribeOpts) { o.onReady = fn }
}

// OnDropped calls fn with the number of events the NATS client dropped
// because fn of Subscribe did not keep up (a slow consumer: core NATS does
// not wait for it), checked every quarter second and once more at the end.
// A core subscription loses events this way; a JetStream one (Follow) does
// not.
func OnDropped(fn func(n int)) SubscribeOption {
	return func(o *subscribeOpts) { o.onDropped = fn }
}

// BufferLimit sets how many received events may wait for fn before the
// client drops them (the NATS client's default is 512 Ki messages).
func BufferLimit(msgs int) SubscribeOption {
	return func(o *subscribeOpts) { o.bufferMsgs = msgs }
}

// Subscribe delivers the events matching filter to fn until ctx is done
// (then it returns nil), the connection closes, or, without OnMalformed, a
// malformed message arrives. fn is called from one goroutine at a time with
// the message subject, the parsed event and the raw JSON; it is not called
// once ctx is done, nor after Subscribe has returned. A message whose subject disagrees with its
// own data is malformed too.
func Subscribe(ctx context.Context, nc *nats.Conn, filter Filter, fn func(subject string, ev events.Event, raw []byte), opts ...SubscribeOption) error {
	var o subscribeOpts
	for _, opt := range opts {
		opt(&o)
	}
	subj, err := filter.Subject()
	if err != nil {
		return err
	}
	stop := make(chan error, 1)
	var mu sync.Mutex // held while a message is handled; done is set under it
	done := false
	sub, err := nc.Subscribe(subj, func(m *nats.Msg) {
		mu.Lock()
		defer mu.Unlock()
		if done || ctx.Err() != nil {
			return
		}
		ev, err := events.Parse(m.Data)
		if err == nil {
			if want := ev.NATSSubject(filter.Prefix); want != m.Subject {
				err = fmt.Errorf("%w: data says subject %s", events.ErrMalformed, want)
			}
		}
		if err != nil {
			me := &MalformedError{Subject: m.Subject, Raw: m.Data, Err: err}
			if o.onMalformed != nil {
				o.onMalformed(me)
				return
			}
			select {
			case stop <- me:
			default:
			}
			return
		}
		fn(m.Subject, ev, m.Data)
	})
	if err != nil {
		return fmt.Errorf("subscribe to %s: %w", subj, err)
	}
	if o.bufferMsgs > 0 {
		if err := sub.SetPendingLimits(o.bufferMsgs, -1); err != nil {
			_ = sub.Unsubscribe()
			return fmt.Errorf("subscribe to %s: %w", subj, err)
		}
	}
	defer func() {
		_ = sub.Unsubscribe() // best effort: the connection may be gone
		mu.Lock()
		done = true
		mu.Unlock()
	}()
	closed := nc.StatusChanged(nats.CLOSED)
	defer nc.RemoveStatusListener(closed)
	if err := nc.Flush(); err != nil {
		return fmt.Errorf("subscribe to %s: %w", subj, err)
	}
	if o.onReady != nil {
		o.onReady()
	}
	var dropped int // reported so far
	checkDrops := func() {
		if o.onDropped == nil {
			return
		}
		if n, err := sub.Dropped(); err == nil && n > dropped {
			o.onDropped(n - dropped)
			dropped = n
		}
	}
	defer checkDrops()
	tick := time.NewTicker(dropCheck)
	defer tick.Stop()
	for {
		select {
		case <-ctx.Done():
			return nil
		case err := <-stop:
			return err
		case <-closed:
			return fmt.Errorf("subscribe to %s: %w", subj, nats.ErrConnectionClosed)
		case <-tick.C:
			checkDrops()
		}
	}
}
