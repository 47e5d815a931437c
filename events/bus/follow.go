package bus

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"tallyd/events"
)

// Follow's pull sizes: a fetch waits at most fetchWait for events, so that
// a cancelled Follow returns within about that; ackTimeout bounds each
// acknowledgement.
const (
	fetchBatch = 64
	fetchWait  = 500 * time.Millisecond
	ackTimeout = 5 * time.Second
)

// FollowSettings say where Follow starts in a site's stream and whether the
// stream keeps the reader's place.
type FollowSettings struct {
	// Stream is the site's stream (StreamName).
	Stream string
	// Durable names a consumer the stream keeps: a reader using the name
	// again resumes after the last event it acknowledged, and gets every
	// event stored meanwhile. Empty means an ephemeral ordered consumer that
	// the server forgets when the reader goes.
	Durable string
	// Since starts with the events stored at or after this time; All with
	// the oldest event the stream holds. Without either, only new events
	// come. For a durable consumer they only choose where a new one starts.
	Since time.Time
	All   bool
	// Notice, when set, is told in a sentence about choices made for the
	// caller (a durable consumer that exists and resumes).
	Notice func(msg string)
}

// ErrNoStream is returned by Follow when the site has no stream (nothing
// was ever stored for it: tallyd not run with JetStream on this server).
var ErrNoStream = errors.New("no stream")

// Follow delivers the events of the stream matching filter to fn, oldest
// first, until ctx is done (then it returns nil), the connection closes, or,
// without OnMalformed, a malformed message arrives (left unacknowledged).
// With a durable consumer each event is acknowledged, and confirmed by the
// server, after fn returns, so none is lost between runs; events taken from
// the server but not handed to fn when ctx ends are given back at once.
// fn is called from one goroutine at a time, not after ctx is done. OnReady
// and OnMalformed apply as for Subscribe.
func Follow(ctx context.Context, js jetstream.JetStream, filter Filter, fs FollowSettings, fn func(subject string, ev events.Event, raw []byte), opts ...SubscribeOption) error {
	var o subscribeOpts
	for _, opt := range opts {
		opt(&o)
	}
	if fs.All && !fs.Since.IsZero() {
		return fmt.Errorf("follow stream %s: give a start time or all, not both", fs.Stream)
	}
	subj, err := filter.Subject()
	if err != nil {
		return err
	}
	if _, err := js.Stream(ctx, fs.Stream); err != nil {
		if errors.Is(err, jetstream.ErrStreamNotFound) {
			return fmt.Errorf("follow stream %s: %w (nothing was stored for this site on this server)", fs.Stream, ErrNoStream)
		}
		return fmt.Errorf("follow stream %s: %w", fs.Stream, jetStreamErr(err))
	}
	// A durable reader starts with everything the stream holds the first
	// time it is created (a consumer that was down during the whole run
	// still gets every event); an ephemeral one with what comes next.
	policy, start := jetstream.DeliverNewPolicy, (*time.Time)(nil)
	switch {
	case fs.All, fs.Durable != "" && fs.Since.IsZero():
		policy = jetstream.DeliverAllPolicy
	case !fs.Since.IsZero():
		policy, start = jetstream.DeliverByStartTimePolicy, &fs.Since
	}
	h := handler{filter: filter, o: o, fn: fn}
	if fs.Durable == "" {
		cons, err := js.OrderedConsumer(ctx, fs.Stream, jetstream.OrderedConsumerConfig{
			FilterSubjects: []string{subj}, DeliverPolicy: policy, OptStartTime: start})
		if err != nil {
			return fmt.Errorf("follow stream %s: %w", fs.Stream, jetStreamErr(err))
		}
		return h.ordered(ctx, fs.Stream, cons)
	}
	if err := ValidToken(fs.Durable); err != nil {
		return fmt.Errorf("follow stream %s: durable name: %w", fs.Stream, err)
	}
	cons, err := durable(ctx, js, fs, subj, policy, start)
	if err != nil {
		return err
	}
	return h.durable(ctx, fs.Stream, cons)
}

// durable opens the named consumer, creating it when missing.
func durable(ctx context.Context, js jetstream.JetStream, fs FollowSettings, subj string, policy jetstream.DeliverPolicy, start *time.Time) (jetstream.Consumer, error) {
	cons, err := js.Consumer(ctx, fs.Stream, fs.Durable)
	switch {
	case errors.Is(err, jetstream.ErrConsumerNotFound):
		cons, err = js.CreateConsumer(ctx, fs.Stream, jetstream.ConsumerConfig{
			Durable: fs.Durable, Description: "tallyd listen", FilterSubject: subj,
			AckPolicy: jetstream.AckExplicitPolicy, DeliverPolicy: policy, OptStartTime: start})
		if err != nil {
			return nil, fmt.Errorf("create durable consumer %s on stream %s: %w", fs.Durable, fs.Stream, jetStreamErr(err))
		}
		return cons, nil
	case err != nil:
		return nil, fmt.Errorf("open durable consumer %s on stream %s: %w", fs.Durable, fs.Stream, jetStreamErr(err))
	}
	info := cons.CachedInfo()
	if have := info.Config.FilterSubject; have != subj {
		return nil, fmt.Errorf("durable consumer %s on stream %s follows %s, not %s: use another name for another filter", fs.Durable, fs.Stream, have, subj)
	}
	if fs.Notice != nil {
		msg := fmt.Sprintf("durable consumer %s exists: resuming after the last event it acknowledged (%d waiting)", fs.Durable, info.NumPending+uint64(info.NumAckPending))
		if fs.All || !fs.Since.IsZero() {
			msg += "; a start time or all only applies to a new one"
		}
		fs.Notice(msg)
	}
	return cons, nil
}

// handler checks each message and hands the events to fn.
type handler struct {
	filter Filter
	o      subscribeOpts
	fn     func(subject string, ev events.Event, raw []byte)
}

// handle parses one message and gives it to fn or reports it as malformed;
// a non-nil error means Follow stops.
func (h *handler) handle(m jetstream.Msg) (malformed bool, err error) {
	ev, err := events.Parse(m.Data())
	if err == nil {
		if want := ev.NATSSubject(h.filter.Prefix); want != m.Subject() {
			err = fmt.Errorf("%w: data says subject %s", events.ErrMalformed, want)
		}
	}
	if err != nil {
		me := &MalformedError{Subject: m.Subject(), Raw: m.Data(), Err: err}
		if h.o.onMalformed == nil {
			return true, me
		}
		h.o.onMalformed(me)
		return true, nil
	}
	h.fn(m.Subject(), ev, m.Data())
	return false, nil
}

// ordered reads an ephemeral ordered consumer: no acknowledgements.
func (h *handler) ordered(ctx context.Context, stream string, cons jetstream.Consumer) error {
	it, err := cons.Messages()
	if err != nil {
		return fmt.Errorf("follow stream %s: %w", stream, err)
	}
	stop := context.AfterFunc(ctx, it.Stop)
	defer stop()
	defer it.Stop()
	if h.o.onReady != nil {
		h.o.onReady()
	}
	for {
		m, err := it.Next()
		if ctx.Err() != nil {
			return nil
		}
		if err != nil {
			return fmt.Errorf("follow stream %s: %w", stream, err)
		}
		if _, err := h.handle(m); err != nil {
			return err
		}
	}
}

// durable reads a durable consumer in fetches, acknowledging each event
// after fn and giving back (Nak) what was fetched but not handled.
func (h *handler) durable(ctx context.Context, stream string, cons jetstream.Consumer) error {
	if h.o.onReady != nil {
		h.o.onReady()
	}
	for ctx.Err() == nil {
		batch, err := cons.Fetch(fetchBatch, jetstream.FetchMaxWait(fetchWait))
		if err != nil {
			if errors.Is(err, nats.ErrConnectionClosed) {
				return fmt.Errorf("follow stream %s: %w", stream, err)
			}
			return fmt.Errorf("follow stream %s: fetch: %w", stream, err)
		}
		var stopErr error
		for m := range batch.Messages() {
			if stopErr != nil || ctx.Err() != nil {
				_ = m.Nak() // someone else (or the next run) gets it at once
				continue
			}
			malformed, err := h.handle(m)
			if err != nil {
				stopErr = err // left unacknowledged, as documented
				continue
			}
			actx, cancel := context.WithTimeout(context.Background(), ackTimeout)
			err = m.DoubleAck(actx)
			cancel()
			if err != nil {
				what := "event"
				if malformed {
					what = "malformed message"
				}
				stopErr = fmt.Errorf("follow stream %s: acknowledge %s on %s: %w", stream, what, m.Subject(), err)
			}
		}
		if stopErr != nil {
			return stopErr
		}
		if err := batch.Error(); err != nil && !errors.Is(err, nats.ErrTimeout) && !errors.Is(err, context.DeadlineExceeded) && ctx.Err() == nil {
			return fmt.Errorf("follow stream %s: fetch: %w", stream, err)
		}
	}
	return nil
}
