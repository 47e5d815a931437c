package bus

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"

	"tallyd/events"
)

// closeTimeout bounds each of Close's flush and drain.
const closeTimeout = 5 * time.Second

// Publisher publishes events on "<prefix>.<site>.<source>.<rule>.<kind>".
// It owns its connection: Close drains and closes it. It is safe for
// concurrent use.
type Publisher struct {
	nc        *nats.Conn
	prefix    string
	prefixErr error
	published atomic.Int64
	closed    atomic.Bool
	closeOnce sync.Once
	closeErr  error
}

// NewPublisher wraps a connection (usually from Connect). An invalid prefix
// is reported by every Publish.
func NewPublisher(nc *nats.Conn, prefix string) *Publisher {
	return &Publisher{nc: nc, prefix: prefix, prefixErr: ValidPrefix(prefix)}
}

// Subject is the subject ev is published on, or an error naming the field
// that is not a valid subject token.
func (p *Publisher) Subject(ev events.Event) (string, error) {
	if p.prefixErr != nil {
		return "", p.prefixErr
	}
	for _, f := range []struct{ name, v string }{
		{"data.site", ev.Data.Site}, {"data.source", ev.Data.Source},
		{"data.rule", ev.Data.Rule}, {"data.kind", string(ev.Data.Kind)},
	} {
		if err := ValidToken(f.v); err != nil {
			return "", fmt.Errorf("%s: %w", f.name, err)
		}
	}
	return ev.NATSSubject(p.prefix), nil
}

// Publish sends one event. While the connection is down the event is
// buffered and sent on reconnect; an error means it was not accepted (bad
// subject, full reconnect buffer, closed publisher, cancelled ctx).
func (p *Publisher) Publish(ctx context.Context, ev events.Event) error {
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("publish event %s: %w", ev.ID, err)
	}
	if p.closed.Load() {
		return fmt.Errorf("publish event %s: %w", ev.ID, events.ErrClosed)
	}
	subj, err := p.Subject(ev)
	if err != nil {
		return fmt.Errorf("publish event %s: %w", ev.ID, err)
	}
	b, err := json.Marshal(ev)
	if err != nil {
		return fmt.Errorf("publish event %s: %w", ev.ID, err)
	}
	if err := p.nc.Publish(subj, b); err != nil {
		return fmt.Errorf("publish event %s on %s: %w", ev.ID, subj, err)
	}
	p.published.Add(1)
	return nil
}

// PublishRaw sends an event already encoded as JSON on subject (the one
// Subject gives for it), for callers that encode each event once for
// several sinks. Like Publish, it buffers while disconnected; an error
// means the event was not accepted (a subject outside the prefix or not of
// five parts, full reconnect buffer, closed publisher).
func (p *Publisher) PublishRaw(subject string, data []byte) error {
	if p.closed.Load() {
		return fmt.Errorf("publish on %s: %w", subject, events.ErrClosed)
	}
	if err := p.checkSubject(subject); err != nil {
		return fmt.Errorf("publish on %s: %w", subject, err)
	}
	if err := p.nc.Publish(subject, data); err != nil {
		return fmt.Errorf("publish on %s: %w", subject, err)
	}
	p.published.Add(1)
	return nil
}

// checkSubject accepts "<prefix>.<site>.<source>.<rule>.<kind>".
func (p *Publisher) checkSubject(subject string) error {
	if p.prefixErr != nil {
		return p.prefixErr
	}
	rest, ok := strings.CutPrefix(subject, p.prefix+".")
	if !ok {
		return fmt.Errorf("%w: subject outside prefix %q", ErrInvalidToken, p.prefix)
	}
	toks := strings.Split(rest, ".")
	if len(toks) != 4 {
		return fmt.Errorf("%w: %d tokens after the prefix, want 4 (site.source.rule.kind)", ErrInvalidToken, len(toks))
	}
	for _, tok := range toks {
		if err := ValidToken(tok); err != nil {
			return err
		}
	}
	return nil
}

// Published is the number of events accepted by Publish and PublishRaw so
// far.
func (p *Publisher) Published() int64 { return p.published.Load() }

// Flush waits until the server has received everything published so far.
func (p *Publisher) Flush(timeout time.Duration) error {
	if err := p.nc.FlushTimeout(timeout); err != nil {
		return fmt.Errorf("flush events: %w", err)
	}
	return nil
}

// Close flushes, then drains and closes the connection, waiting for the
// drain to finish. Events still buffered because the server is unreachable
// are reported in the error, never dropped silently. It is safe to call
// twice; later calls return the first result.
func (p *Publisher) Close() error {
	p.closeOnce.Do(func() {
		p.closed.Store(true)
		p.closeErr = p.close()
	})
	return p.closeErr
}

func (p *Publisher) close() error {
	nc := p.nc
	if nc.IsClosed() {
		return nil
	}
	var errs []error
	if nc.Status() == nats.CONNECTED {
		if err := nc.FlushTimeout(closeTimeout); err != nil {
			errs = append(errs, fmt.Errorf("flush: %w", err))
		}
	}
	if n, err := nc.Buffered(); err == nil && n > 0 {
		errs = append(errs, fmt.Errorf("%d bytes of events not delivered (server unreachable)", n))
	}
	done := nc.StatusChanged(nats.CLOSED)
	defer nc.RemoveStatusListener(done)
	if err := nc.Drain(); err != nil {
		nc.Close()
		if !errors.Is(err, nats.ErrConnectionClosed) {
			errs = append(errs, fmt.Errorf("drain: %w", err))
		}
	} else {
		t := time.NewTimer(closeTimeout)
		defer t.Stop()
		select {
		case <-done:
		case <-t.C:
			nc.Close()
			errs = append(errs, fmt.Errorf("drain: not finished after %s", closeTimeout))
		}
	}
	if err := errors.Join(errs...); err != nil {
		return fmt.Errorf("close nats publisher: %w", err)
	}
	return nil
}
