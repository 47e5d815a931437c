package bus

import (
	"errors"
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
// The first connection must succeed unless RetryFirst is given. Credentials
// come from the URL or, better, from the Options (UserPassword, Token,
// NKeySeedFile, CredsFile; TLSFiles for TLS); their files are checked
// before dialling (ErrCredentials). Disconnects and reconnects are logged on
// log (nil discards them); failed attempts, refused credentials and the
// server's asynchronous errors (permissions, slow consumers) once per period
// with a count. No secret is
// logged or returned: URLs are redacted, and a failure says what was tried
// ("nats connect with user counter: nats: authorization violation"). The
// returned error does not repeat the URL.
func Connect(rawURL, name string, log *slog.Logger, opts ...Option) (*nats.Conn, error) {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	var o options
	for _, f := range opts {
		f(&o)
	}
	authOpts, tried, err := o.natsOptions(rawURL)
	if err != nil {
		return nil, fmt.Errorf("nats connect: %w", err)
	}
	log = log.With("component", "nats")
	fails := repeat.New(log, "nats server not reachable; retrying", repeat.DefaultPeriod)
	refused := repeat.New(log, "nats server refuses the credentials; retrying", repeat.DefaultPeriod).AtLevel(slog.LevelError)
	async := repeat.New(log, "nats async error", repeat.DefaultPeriod).AtLevel(slog.LevelError)
	natsOpts := append([]nats.Option{
		nats.RetryOnFailedConnect(o.retryFirst),
		nats.Name(name),
		nats.MaxReconnects(-1),
		nats.CustomReconnectDelay(func(n int) time.Duration {
			d := backoff(n)
			return d + rand.N(d/10+1) // up to 10% jitter so clients do not reconnect in step
		}),
		nats.ReconnectBufSize(reconnectBuf),
		// Keep trying after the server refused the credentials twice: they
		// may be fixed on the server's side, and events wait meanwhile.
		nats.IgnoreAuthErrorAbort(),
		nats.DisconnectErrHandler(func(c *nats.Conn, err error) {
			if err == nil && (c.IsClosed() || c.IsDraining()) {
				return // our own Close or Drain: not worth a warning
			}
			log.Warn("nats disconnected", "url", RedactURL(c.ConnectedUrl()), "err", err)
		}),
		nats.ReconnectHandler(func(c *nats.Conn) {
			for _, r := range []*repeat.Reporter{fails, refused} {
				r.Flush()
				r.Reset()
			}
			log.Info("nats reconnected", "url", RedactURL(c.ConnectedUrl()))
		}),
		nats.ConnectHandler(func(c *nats.Conn) { // the first connection (at once, or after retrying)
			for _, r := range []*repeat.Reporter{fails, refused} {
				r.Flush()
				r.Reset()
			}
			log.Info("nats connected", "url", RedactURL(c.ConnectedUrl()), "name", name)
		}),
		nats.ReconnectErrHandler(func(c *nats.Conn, err error) {
			if err = authErr(err); errors.Is(err, nats.ErrAuthorization) {
				refused.Note(err, "url", RedactURL(rawURL), "tried", tried)
				return
			}
			fails.Note(err, "url", RedactURL(rawURL), "tried", tried)
		}),
		nats.ClosedHandler(func(c *nats.Conn) {
			for _, r := range []*repeat.Reporter{fails, refused, async} {
				r.Flush()
			}
			log.Debug("nats connection closed")
		}),
		nats.ErrorHandler(func(c *nats.Conn, sub *nats.Subscription, err error) {
			if sub == nil && errors.Is(authErr(err), nats.ErrAuthorization) { // while reconnecting
				refused.Note(authErr(err), "url", RedactURL(rawURL), "tried", tried)
				return
			}
			subject := ""
			if sub != nil {
				subject = sub.Subject
			}
			async.Note(err, "subject", subject)
		}),
	}, authOpts...)
	nc, err := nats.Connect(rawURL, natsOpts...)
	if err != nil {
		if tried != "" {
			return nil, fmt.Errorf("nats connect %s: %w", tried, authErr(err))
		}
		return nil, fmt.Errorf("nats connect: %w", authErr(err))
	}
	return nc, nil
}

// RedactURL hides credentials in a NATS URL or comma-separated URL list,
// with or without a scheme: a password becomes "xxxxx", and so does a lone
// user part, which NATS uses for tokens; a user name stays. A URL that does
// not parse is hidden entirely when it might hold credentials.
func RedactURL(raw string) string {
	parts := strings.Split(raw, ",")
	for i, p := range parts {
		parts[i] = redactOne(strings.TrimSpace(p))
	}
	return strings.Join(parts, ",")
}

func redactOne(raw string) string {
	full := withScheme(raw) // "TOKEN@host" is a URL to the NATS client
	u, err := url.Parse(full)
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
	if full != raw {
		return strings.TrimPrefix(u.String(), "nats://")
	}
	return u.String()
}
