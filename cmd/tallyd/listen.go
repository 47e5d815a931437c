package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"strings"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/internal/repeat"
)

// Where listen takes secrets from instead of the command line (which the
// process list shows).
const (
	envPassword = "TALLYD_NATS_PASSWORD"
	envToken    = "TALLYD_NATS_TOKEN"
)

const listenSynopsis = `listen [--url URL] [--prefix P] [--site S] [--source S] [--rule R] [--count N] [--timeout D]
                     [--durable NAME | --all | --since TIME]
                     [--creds FILE | --nkey-seed FILE | --user NAME [--password-file FILE] | --token-file FILE]
                     [--tls-ca FILE] [--tls-cert FILE --tls-key FILE]

Without --durable, --all or --since, listen prints events as they are published (core NATS:
a listener that falls behind loses events, and says so). With them it reads the site's
JetStream stream: --durable resumes where that name stopped and loses nothing; --all and
--since replay what the stream keeps, then follow.

Credentials: the password for --user comes from $` + envPassword + ` or --password-file, a token
from $` + envToken + ` or --token-file. Credentials in --url work but are visible in the process list.`

// listenArgs is what the flags ask for, checked.
type listenArgs struct {
	url     string
	filter  bus.Filter
	count   int
	timeout time.Duration
	follow  *bus.FollowSettings // nil: a core subscription
	auth    []bus.Option
}

func cmdListen(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	a, err := parseListen(args, stdout, stderr)
	if err != nil {
		return err
	}
	if a.timeout > 0 {
		var cancel context.CancelFunc
		ctx, cancel = context.WithTimeout(ctx, a.timeout)
		defer cancel()
	}
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	nc, err := bus.Connect(a.url, "tallyd-listen", nil, a.auth...)
	if err != nil {
		if errors.Is(err, bus.ErrCredentials) {
			return badFile(fmt.Errorf("connect to %s: %w", bus.RedactURL(a.url), err))
		}
		return fmt.Errorf("connect to %s: %w", bus.RedactURL(a.url), err)
	}
	defer nc.Close()
	seen := 0
	show := func(subject string, ev events.Event, raw []byte) {
		fmt.Fprintln(stdout, string(raw))
		seen++
		if a.count > 0 && seen >= a.count {
			cancel()
		}
	}
	onBad := bus.OnMalformed(func(me *bus.MalformedError) {
		fmt.Fprintf(stderr, "tallyd listen: skipped a malformed message: %v\n", me)
	})
	if a.follow != nil {
		js, err := jetstream.New(nc)
		if err != nil {
			return fmt.Errorf("jetstream: %w", err)
		}
		a.follow.Notice = func(msg string) { fmt.Fprintf(stderr, "tallyd listen: %s\n", msg) }
		return quiet(bus.Follow(ctx, js, a.filter, *a.follow, show, onBad))
	}
	// Core NATS does not wait for a slow reader: count what it drops and
	// say so once per period, and in the exit status.
	log := slog.New(slog.NewTextHandler(stderr, nil))
	drops := repeat.New(log, "tallyd listen: events dropped: this listener fell behind (core NATS does not wait; --durable loses none)", repeat.DefaultPeriod)
	onDropped := bus.OnDropped(func(n int) {
		for range n {
			drops.Note(nats.ErrSlowConsumer)
		}
	})
	err = quiet(bus.Subscribe(ctx, nc, a.filter, show, onBad, onDropped))
	drops.Flush()
	if err == nil && drops.Total() > 0 {
		return fmt.Errorf("%d events dropped because this listener fell behind; --durable with --site loses none", drops.Total())
	}
	return err
}

// quiet makes the end of --timeout or an interrupt a normal end.
func quiet(err error) error {
	if errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
		return nil
	}
	return err
}

// parseListen reads and checks the flags and the secrets they point to.
func parseListen(args []string, stdout, stderr io.Writer) (*listenArgs, error) {
	fs := newFlags("listen", listenSynopsis, stdout)
	url := fs.String("url", fmt.Sprintf("nats://%s:%d", bus.DefaultHost, bus.DefaultPort), "NATS server")
	prefix := fs.String("prefix", bus.DefaultPrefix, "subject prefix")
	site := fs.String("site", "", "only this site (default all; needed by --durable, --all and --since)")
	source := fs.String("source", "", "only this source (default all)")
	rule := fs.String("rule", "", "only this rule (default all)")
	count := fs.Int("count", 0, "exit after this many events (0: run until interrupted)")
	timeout := fs.Duration("timeout", 0, "exit after this long (0: no limit)")
	durable := fs.String("durable", "", "read the site's stream as this durable consumer: resume where it stopped, acknowledge each event once printed")
	all := fs.Bool("all", false, "replay every event the site's stream keeps, then follow")
	since := fs.String("since", "", "replay the site's stream from this time (RFC 3339, e.g. 2026-06-01T08:00:00Z), then follow")
	signIn := addSignInFlags(fs)
	if err := parseFlags(fs, args); err != nil {
		return nil, err
	}
	if err := bus.ValidPrefix(*prefix); err != nil {
		return nil, usageErr("--prefix: %v", err)
	}
	for _, f := range []struct{ name, v string }{{"site", *site}, {"source", *source}, {"rule", *rule}, {"durable", *durable}} {
		if f.v != "" {
			if err := bus.ValidToken(f.v); err != nil {
				return nil, usageErr("--%s: %v", f.name, err)
			}
		}
	}
	if *count < 0 || *timeout < 0 {
		return nil, usageErr("--count and --timeout cannot be negative (found %d, %s)", *count, *timeout)
	}
	a := &listenArgs{url: *url, count: *count, timeout: *timeout,
		filter: bus.Filter{Prefix: *prefix, Site: *site, Source: *source, Rule: *rule}}
	follow, err := followSettings(*prefix, *site, *durable, *since, *all)
	if err != nil {
		return nil, err
	}
	a.follow = follow
	a.auth, err = signIn.options("listen", "--url", *url, stderr)
	if err != nil {
		return nil, err
	}
	return a, nil
}

// followSettings is nil for a core subscription, else how to read the
// site's stream.
func followSettings(prefix, site, durable, since string, all bool) (*bus.FollowSettings, error) {
	if durable == "" && since == "" && !all {
		return nil, nil
	}
	if all && since != "" {
		return nil, usageErr("--all replays everything, --since from a time: give one")
	}
	if site == "" {
		return nil, usageErr("--durable, --all and --since read one site's stream: give --site")
	}
	f := &bus.FollowSettings{Durable: durable, All: all}
	if since != "" {
		t, err := time.Parse(time.RFC3339, since)
		if err != nil {
			return nil, usageErr("--since %q: not an RFC 3339 time such as 2026-06-01T08:00:00Z", since)
		}
		f.Since = t
	}
	stream, err := bus.StreamName(prefix, site)
	if err != nil {
		return nil, usageErr("--site: %v", err)
	}
	f.Stream = stream
	return f, nil
}

// signInFlags are the flags that sign in to a NATS server (listen, site,
// run --site, fleet): a credentials file, an NKey seed, a user with a
// password, or a token; and TLS.
type signInFlags struct {
	creds, nkeySeed, user, passwordFile, tokenFile *string
	tlsCA, tlsCert, tlsKey                         *string
}

func addSignInFlags(fs *flags) *signInFlags {
	return &signInFlags{
		creds:        fs.String("creds", "", "NATS credentials file (user JWT and seed)"),
		nkeySeed:     fs.String("nkey-seed", "", "file holding a user NKey seed to sign in with"),
		user:         fs.String("user", "", "user name; the password from $"+envPassword+" or --password-file"),
		passwordFile: fs.String("password-file", "", "file holding the password for --user"),
		tokenFile:    fs.String("token-file", "", "file holding the token (default $"+envToken+")"),
		tlsCA:        fs.String("tls-ca", "", "CA certificates (PEM) the server's certificate must be signed by"),
		tlsCert:      fs.String("tls-cert", "", "client certificate (PEM), with --tls-key"),
		tlsKey:       fs.String("tls-key", "", "client private key (PEM), with --tls-cert"),
	}
}

// options are the connect options for url, given by the flag urlFlag of
// command cmd: at most one kind of login from the flags, the password and
// token from files or the environment, never from the command line, where
// the process list shows them; a URL holding credentials still works, with
// a warning; then TLS.
func (f *signInFlags) options(cmd, urlFlag, url string, stderr io.Writer) ([]bus.Option, error) {
	opts, err := f.login(cmd, urlFlag, url, stderr)
	if err != nil {
		return nil, err
	}
	switch {
	case (*f.tlsCert == "") != (*f.tlsKey == ""):
		return nil, usageErr("--tls-cert and --tls-key go together")
	case *f.tlsCA != "" || *f.tlsCert != "":
		opts = append(opts, bus.TLSFiles(*f.tlsCA, *f.tlsCert, *f.tlsKey))
	}
	return opts, nil
}

// login picks the credentials (see options).
func (f *signInFlags) login(cmd, urlFlag, url string, stderr io.Writer) ([]bus.Option, error) {
	var given []string
	for _, g := range []struct{ flag, v string }{{"--creds", *f.creds}, {"--nkey-seed", *f.nkeySeed}, {"--user", *f.user}, {"--token-file", *f.tokenFile}} {
		if g.v != "" {
			given = append(given, g.flag)
		}
	}
	if len(given) > 1 {
		return nil, usageErr("choose one way to sign in (given: %s)", strings.Join(given, ", "))
	}
	if *f.passwordFile != "" && *f.user == "" {
		return nil, usageErr("--password-file needs --user")
	}
	inURL := bus.RedactURL(url) != url
	if inURL {
		if len(given) > 0 {
			return nil, usageErr("%s holds credentials and %s is given too: choose one", urlFlag, given[0])
		}
		fmt.Fprintln(stderr, "tallyd "+cmd+": warning: the credentials in "+urlFlag+" are visible in the process list; use --user with $"+envPassword+" or --password-file, or $"+envToken+" or --token-file")
		return nil, nil
	}
	switch {
	case *f.creds != "":
		return []bus.Option{bus.CredsFile(*f.creds)}, nil
	case *f.nkeySeed != "":
		return []bus.Option{bus.NKeySeedFile(*f.nkeySeed)}, nil
	case *f.user != "":
		pw := os.Getenv(envPassword)
		if *f.passwordFile != "" {
			var err error
			if pw, err = readSecret("--password-file", *f.passwordFile); err != nil {
				return nil, err
			}
		}
		if pw == "" {
			return nil, usageErr("--user needs a password: set $%s or give --password-file", envPassword)
		}
		return []bus.Option{bus.UserPassword(*f.user, pw)}, nil
	case *f.tokenFile != "":
		tok, err := readSecret("--token-file", *f.tokenFile)
		if err != nil {
			return nil, err
		}
		return []bus.Option{bus.Token(tok)}, nil
	case os.Getenv(envToken) != "":
		return []bus.Option{bus.Token(os.Getenv(envToken))}, nil
	}
	return nil, nil
}

// readSecret reads a password or token file: its first line, without the
// line end. The error names the file, never its content.
func readSecret(flag, file string) (string, error) {
	b, err := os.ReadFile(file)
	if err != nil {
		var pe *os.PathError
		if errors.As(err, &pe) {
			err = pe.Err
		}
		return "", badFile(fmt.Errorf("%s %s: %w", flag, file, err))
	}
	s, _, _ := strings.Cut(string(b), "\n")
	s = strings.TrimRight(s, "\r")
	if s == "" {
		return "", badFile(fmt.Errorf("%s %s: empty first line", flag, file))
	}
	return s, nil
}
