package bus

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nkeys"
)

// readyTimeout bounds how long StartEmbedded waits for the listener.
const readyTimeout = 10 * time.Second

// ErrNotReady is returned by StartEmbedded when the server does not accept
// connections in time or fails while starting.
var ErrNotReady = errors.New("embedded nats server not ready")

// Embedded is an in-process NATS server for setups without their own.
type Embedded struct {
	srv       *server.Server
	url       string
	port      int
	jetStream bool
	once      sync.Once
}

// EmbeddedOptions configures StartEmbedded.
type EmbeddedOptions struct {
	// Host and Port are where the server listens: an empty Host means
	// DefaultHost (loopback), port 0 a free port.
	Host string
	Port int
	// StoreDir turns JetStream on with its file store in this directory;
	// empty leaves JetStream off.
	StoreDir string
	// MaxStore caps the bytes JetStream keeps on disk; 0 is the server's
	// default, 75% of the disk space free at start (nats-server
	// disk_avail.go).
	MaxStore int64
	// SyncAlways makes JetStream write each message to disk (fsync) before
	// acknowledging it. Off, the server syncs every two minutes (its default,
	// nats-server filestore.go defaultSyncInterval):
	// an acknowledged event survives a crash of the process but not a power
	// cut of the machine within that time.
	SyncAlways bool
	// User and Password, when set, are required of every client.
	User, Password string
	// NKey is a public user NKey ("U..."): clients holding its seed may
	// connect by signing the server's nonce. It can be given with User.
	NKey string
}

// ErrOpenToNetwork is wrapped by StartEmbedded's refusal to listen beyond
// loopback without authentication.
var ErrOpenToNetwork = errors.New("anyone on the network could publish forged counts")

// check reports options StartEmbedded cannot use.
func (o EmbeddedOptions) check() error {
	if o.Port < 0 || o.Port > 65535 {
		return fmt.Errorf("%w: port %d out of range 0..65535", ErrNotReady, o.Port)
	}
	if o.MaxStore < 0 {
		return fmt.Errorf("%w: max store %d bytes is negative", ErrNotReady, o.MaxStore)
	}
	if (o.User == "") != (o.Password == "") {
		return fmt.Errorf("%w: user and password go together (user %q, password set: %t)", ErrNotReady, o.User, o.Password != "")
	}
	if o.NKey != "" && !nkeys.IsValidPublicUserKey(o.NKey) {
		return fmt.Errorf("%w: nkey %q is not a public user nkey (\"U...\")", ErrNotReady, o.NKey)
	}
	if o.User == "" && o.NKey == "" && !isLoopback(o.Host) {
		return fmt.Errorf("embedded NATS server on %s without user/password or NKey: %w", o.Host, ErrOpenToNetwork)
	}
	return nil
}

// isLoopback tells whether host is reachable from this machine only.
func isLoopback(host string) bool {
	if host == "" || strings.EqualFold(host, "localhost") {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

// StartEmbedded starts a NATS server in this process and returns once it
// accepts connections. It listens on loopback unless told otherwise, and
// refuses any other address without user/password or NKey authentication
// (ErrOpenToNetwork). With a StoreDir it runs JetStream on a file store.
// Its own log lines go to log at debug level, or warning and error for
// problems; a nil log discards them.
func StartEmbedded(o EmbeddedOptions, log *slog.Logger) (*Embedded, error) {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	if err := o.check(); err != nil {
		return nil, err
	}
	host, port := o.Host, o.Port
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
	if o.StoreDir != "" {
		opts.JetStream = true
		opts.StoreDir = o.StoreDir
		opts.JetStreamMaxStore = o.MaxStore
		opts.SyncAlways = o.SyncAlways
	}
	if o.User != "" {
		opts.Users = []*server.User{{Username: o.User, Password: o.Password}}
	}
	if o.NKey != "" {
		opts.Nkeys = []*server.NkeyUser{{Nkey: o.NKey}}
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
	if o.StoreDir != "" && !srv.JetStreamEnabled() {
		srv.Shutdown()
		srv.WaitForShutdown()
		return nil, fmt.Errorf("%w: jetstream did not start in %s", ErrNotReady, o.StoreDir)
	}
	addr, ok := srv.Addr().(*net.TCPAddr)
	if !ok {
		srv.Shutdown()
		srv.WaitForShutdown()
		return nil, fmt.Errorf("%w: no TCP listener", ErrNotReady)
	}
	e := &Embedded{srv: srv, port: addr.Port, jetStream: o.StoreDir != ""}
	e.url = "nats://" + net.JoinHostPort(dialHost(host), strconv.Itoa(addr.Port))
	log.Debug("embedded nats server ready", "url", e.url, "jetstream", e.jetStream)
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

// JetStream tells whether the server runs JetStream (a StoreDir was given).
func (e *Embedded) JetStream() bool { return e.jetStream }

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
