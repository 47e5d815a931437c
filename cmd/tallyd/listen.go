package main

import (
	"context"
	"errors"
	"fmt"
	"io"

	"tallyd/events"
	"tallyd/events/bus"
)

func cmdListen(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("listen", "listen [--url URL] [--prefix P] [--site S] [--source S] [--rule R] [--count N] [--timeout D]", stdout)
	url := fs.String("url", fmt.Sprintf("nats://%s:%d", bus.DefaultHost, bus.DefaultPort), "NATS server")
	prefix := fs.String("prefix", bus.DefaultPrefix, "subject prefix")
	site := fs.String("site", "", "only this site (default all)")
	source := fs.String("source", "", "only this source (default all)")
	rule := fs.String("rule", "", "only this rule (default all)")
	count := fs.Int("count", 0, "exit after this many events (0: run until interrupted)")
	timeout := fs.Duration("timeout", 0, "exit after this long (0: no limit)")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	for name, v := range map[string]string{"prefix": *prefix, "site": *site, "source": *source, "rule": *rule} {
		if v != "" {
			if err := bus.ValidToken(v); err != nil {
				return usageErr("--%s: %v", name, err)
			}
		}
	}
	if *timeout > 0 {
		var cancel context.CancelFunc
		ctx, cancel = context.WithTimeout(ctx, *timeout)
		defer cancel()
	}
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	nc, err := bus.Connect(*url, "tallyd-listen", nil)
	if err != nil {
		return fmt.Errorf("connect to %s: %w", bus.RedactURL(*url), err)
	}
	defer nc.Close()
	seen := 0
	filter := bus.Filter{Prefix: *prefix, Site: *site, Source: *source, Rule: *rule}
	onBad := bus.OnMalformed(func(me *bus.MalformedError) {
		fmt.Fprintf(stderr, "tallyd listen: skipped a malformed message: %v\n", me)
	})
	err = bus.Subscribe(ctx, nc, filter, func(subject string, ev events.Event, raw []byte) {
		fmt.Fprintln(stdout, string(raw))
		seen++
		if *count > 0 && seen >= *count {
			cancel()
		}
	}, onBad)
	if errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
		return nil
	}
	return err
}
