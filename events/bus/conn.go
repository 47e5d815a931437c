package bus

import (
	"fmt"
	"log/slog"
	"math/rand/v2"
	"net/url"
	"strings"
	"time"

	"github.com/nats-io/nats.go"

	"tallyd/internal/repeat"
)

// Defaults of a tallyd NATS setup.
const (
	DefaultHost   = "127.0.0.1" // the embedded server listens on loopback only
	DefaultPort   = 4222        // the NATS protocol's registered port (common practice)
	DefaultPrefix = "tallyd"    // first subject token
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
// The first connection must succeed unless RetryFirst is given.
// Disconnects, reconnects and asynchronous errors are logged on log (nil
// discards them) with credentials removed from URLs. The returned error does
// not repeat the URL.
func Connect(rawURL, name string, log *slog.Logger, opts ...Option) (*nats.Conn, error) {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	var o options
	for _, f := range opts {
		f(&o)
	}
	log = log.With("component", "nats")
	fails := repeat.New(log, "nats server not reachable; retrying", repeat.DefaultPeriod)
	nc, err := nats.Connect(rawURL,
		nats.RetryOnFailedConnect(o.retryFirst),
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
			fails.Flush()
			fails.Reset()
			log.Info("nats reconnected", "url", RedactURL(c.ConnectedUrl()))
		}),
		nats.ConnectHandler(func(c *nats.Conn) { // the first connection (at once, or after retrying)
			fails.Flush()
			fails.Reset()
			log.Info("nats connected", "url", RedactURL(c.ConnectedUrl()), "name", name)
		}),
		nats.ReconnectErrHandler(func(c *nats.Conn, err error) {
			fails.Note(err, "url", RedactURL(rawURL))
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
	return nc, nil
}

// Option changes how Connect connects.
type Option func(*options)

type options struct {
	retryFirst bool
}

// RetryFirst makes Connect return at once when the server cannot be reached
// yet: the connection keeps trying in the background with the usual
// back-off, and what is published meanwhile waits in the client's buffer, as
// during any later outage.
func RetryFirst(on bool) Option { return func(o *options) { o.retryFirst = on } }

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
