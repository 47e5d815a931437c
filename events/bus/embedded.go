package bus

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"strconv"
	"sync"
	"time"

	"github.com/nats-io/nats-server/v2/server"
)

// readyTimeout bounds how long StartEmbedded waits for the listener.
const readyTimeout = 10 * time.Second

// ErrNotReady is returned by StartEmbedded when the server does not accept
// connections in time or fails while starting.
var ErrNotReady = errors.New("embedded nats server not ready")

// Embedded is an in-process NATS server for setups without their own.
type Embedded struct {
	srv  *server.Server
	url  string
	port int
	once sync.Once
}

// StartEmbedded starts a NATS server in this process, listening on host:port
// (port 0 picks a free port; an empty host means 127.0.0.1), and returns once
// it accepts connections. Its own log lines go to log at debug level, or
// warning and error for problems; a nil log discards them.
func StartEmbedded(host string, port int, log *slog.Logger) (*Embedded, error) {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	if port < 0 || port > 65535 {
		return nil, fmt.Errorf("%w: port %d out of range 0..65535", ErrNotReady, port)
	}
	if host == "" {
		host = DefaultHost
	}
	opts := &server.Options{
		ServerName: "tallyd-embedded",
		Host:       host,
		Port:       port,
		NoSigs:     true, // the daemon owns signal handling
	}
	if port == 0 {
		opts.Port = server.RANDOM_PORT
	}
	srv, err := server.NewServer(opts)
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrNotReady, err)
	}
	lg := &serverLog{log: log.With("component", "nats-server"), fatal: make(chan string, 1)}
	srv.SetLoggerV2(lg, false, false, false)
	srv.Start() // returns once the listener is up or has failed

	select {
	case msg := <-lg.fatal:
		srv.Shutdown()
		srv.WaitForShutdown()
		return nil, fmt.Errorf("%w: %s", ErrNotReady, msg)
	default:
	}
	if !srv.ReadyForConnections(readyTimeout) {
		srv.Shutdown()
		srv.WaitForShutdown()
		return nil, fmt.Errorf("%w: no listener on %s after %s", ErrNotReady, net.JoinHostPort(host, strconv.Itoa(port)), readyTimeout)
	}
	addr, ok := srv.Addr().(*net.TCPAddr)
	if !ok {
		srv.Shutdown()
		srv.WaitForShutdown()
		return nil, fmt.Errorf("%w: no TCP listener", ErrNotReady)
	}
	e := &Embedded{srv: srv, port: addr.Port}
	e.url = "nats://" + net.JoinHostPort(dialHost(host), strconv.Itoa(addr.Port))
	log.Debug("embedded nats server ready", "url", e.url)
	return e, nil
}

// dialHost is the host clients dial to reach a server bound to host.
func dialHost(host string) string {
	ip := net.ParseIP(host)
	switch {
	case ip == nil || !ip.IsUnspecified():
		return host
	case ip.To4() != nil:
		return "127.0.0.1"
	}
	return "::1"
}

// URL is the address clients connect to, e.g. "nats://127.0.0.1:4222".
func (e *Embedded) URL() string { return e.url }

// Port is the port the server listens on (the one picked when 0 was asked).
func (e *Embedded) Port() int { return e.port }

// Shutdown stops the server and waits until it has stopped. It is safe to
// call more than once and from several goroutines.
func (e *Embedded) Shutdown() {
	e.once.Do(func() {
		e.srv.Shutdown()
		e.srv.WaitForShutdown()
	})
}

// serverLog adapts slog to the server's logger and notes the first fatal
// message, which StartEmbedded turns into its error.
type serverLog struct {
	log   *slog.Logger
	fatal chan string
}

func (l *serverLog) emit(level slog.Level, format string, v []any) {
	if l.log.Enabled(context.Background(), level) {
		l.log.Log(context.Background(), level, "nats server", "detail", fmt.Sprintf(format, v...))
	}
}

// Noticef logs the server's routine notices at debug level: they repeat
// what tallyd logs itself.
func (l *serverLog) Noticef(format string, v ...any) { l.emit(slog.LevelDebug, format, v) }

// Warnf logs at warning level.
func (l *serverLog) Warnf(format string, v ...any) { l.emit(slog.LevelWarn, format, v) }

// Errorf logs at error level.
func (l *serverLog) Errorf(format string, v ...any) { l.emit(slog.LevelError, format, v) }

// Debugf logs at debug level.
func (l *serverLog) Debugf(format string, v ...any) { l.emit(slog.LevelDebug, format, v) }

// Tracef logs at debug level (tracing is never enabled).
func (l *serverLog) Tracef(format string, v ...any) { l.emit(slog.LevelDebug, format, v) }

// Fatalf logs at error level; it must not exit the process.
func (l *serverLog) Fatalf(format string, v ...any) {
	msg := fmt.Sprintf(format, v...)
	l.log.Error("nats server", "detail", msg)
	select {
	case l.fatal <- msg:
	default:
	}
}

// Subscriptions is the number of client subscriptions the server holds; tests
// and health checks use it to know a listener is ready.
func (e *Embedded) Subscriptions() uint32 { return e.srv.NumSubscriptions() }
