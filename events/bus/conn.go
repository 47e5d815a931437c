package bus

import (
	"fmt"
	"log/slog"
	"math/rand/v2"
	"net/url"
	"strings"
	"time"

	"github.com/nats-io/nats.go"
)

// Reconnect policy: wait minBackoff before the first attempt after a
// disconnect, double the wait after each failed round up to maxBackoff, and
// start again from minBackoff after a successful reconnect.
const (
	minBackoff = 100 * time.Millisecond
	maxBackoff = 5 * time.Second
	// reconnectBuf is how many bytes of events are held while disconnected;
	// past it Publish fails instead of dropping silently.
	reconnectBuf = 8 << 20
)

// backoff is the wait before reconnect round n (1-based), without jitter.
func backoff(n int) time.Duration {
	d := minBackoff
	for i := 1; i < n && d < maxBackoff; i++ {
		d *= 2
	}
	return min(d, maxBackoff)
}

// Connect opens a NATS connection named name that reconnects forever with a
// capped exponential back-off and buffers publications while disconnected.
// The first connection must succeed. Disconnects, reconnects and
// asynchronous errors are logged on log (nil discards them) with credentials
// removed from URLs. The returned error does not repeat the URL.
func Connect(rawURL, name string, log *slog.Logger) (*nats.Conn, error) {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	log = log.With("component", "nats")
	nc, err := nats.Connect(rawURL,
		nats.Name(name),
		nats.MaxReconnects(-1),
		nats.CustomReconnectDelay(func(n int) time.Duration {
			d := backoff(n)
			return d + rand.N(d/10+1) // up to 10% jitter so clients do not reconnect in step
		}),
		nats.ReconnectBufSize(reconnectBuf),
		nats.DisconnectErrHandler(func(c *nats.Conn, err error) {
			if err == nil && (c.IsClosed() || c.IsDraining()) {
				return // our own Close or Drain: not worth a warning
			}
			log.Warn("nats disconnected", "url", RedactURL(c.ConnectedUrl()), "err", err)
		}),
		nats.ReconnectHandler(func(c *nats.Conn) {
			log.Info("nats reconnected", "url", RedactURL(c.ConnectedUrl()))
		}),
		nats.ReconnectErrHandler(func(c *nats.Conn, err error) {
			log.Debug("nats reconnect attempt failed", "err", err)
		}),
		nats.ClosedHandler(func(c *nats.Conn) {
			log.Debug("nats connection closed")
		}),
		nats.ErrorHandler(func(c *nats.Conn, sub *nats.Subscription, err error) {
			subject := ""
			if sub != nil {
				subject = sub.Subject
			}
			log.Error("nats async error", "subject", subject, "err", err)
		}),
	)
	if err != nil {
		return nil, fmt.Errorf("nats connect: %w", err)
	}
	log.Info("nats connected", "url", RedactURL(nc.ConnectedUrl()), "name", name)
	return nc, nil
}

// RedactURL hides credentials in a NATS URL or comma-separated URL list:
// a password becomes "xxxxx", and so does a lone user part, which NATS uses
// for tokens. A URL that does not parse is hidden entirely when it might
// hold credentials.
func RedactURL(raw string) string {
	parts := strings.Split(raw, ",")
	for i, p := range parts {
		parts[i] = redactOne(strings.TrimSpace(p))
	}
	return strings.Join(parts, ",")
}

func redactOne(raw string) string {
	u, err := url.Parse(raw)
	if err != nil {
		if strings.Contains(raw, "@") {
			return "<unparsable url>"
		}
		return raw
	}
	if u.User == nil {
		return raw
	}
	if _, ok := u.User.Password(); ok {
		u.User = url.UserPassword(u.User.Username(), "xxxxx")
	} else {
		u.User = url.User("xxxxx")
	}
	return u.String()
}
