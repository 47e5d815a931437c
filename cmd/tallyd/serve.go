package main

import (
	"context"
	"fmt"
	"log/slog"
	"os"
	"os/signal"
	"syscall"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"

	"tallyd/internal/config"
	"tallyd/internal/pipeline"
	"tallyd/internal/web"
)

// startOperator starts what a running site offers its operator: the HTTP
// server (when configured) and the signal handlers (reload, reopen). The
// returned func stops both.
func startOperator(cfg *config.Config, p *pipeline.Pipeline, path string, log *slog.Logger) (func(), error) {
	stopHTTP, err := startHTTP(cfg, p, log)
	if err != nil {
		return nil, err
	}
	stopSignals := onSignals(p, path, log)
	return func() { stopSignals(); stopHTTP() }, nil
}

// startHTTP starts the operator's HTTP server when the site file has an
// http section; the returned func stops it. It binds before anything runs,
// so a taken port is bad input (exit 2).
func startHTTP(cfg *config.Config, p *pipeline.Pipeline, log *slog.Logger) (func(), error) {
	addr := cfg.HTTPAddr()
	if addr == "" {
		return func() {}, nil
	}
	reg := prometheus.NewRegistry()
	reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	if err := p.Register(reg); err != nil {
		return nil, fmt.Errorf("metrics: %w", err)
	}
	srv, err := web.Listen(p.Operator(cfg.HTTP.SaveRules), web.Options{Addr: addr, Token: cfg.HTTP.Token.Value(),
		PreviewFPS: 1 / cfg.PreviewEvery().Seconds(), Gatherer: reg, Log: log})
	if err != nil {
		return nil, cfg.Errorf("http.listen", "%v", err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() {
		defer close(done)
		if err := srv.Run(ctx); err != nil {
			log.Error("http server stopped", "err", err)
		}
	}()
	return func() { cancel(); <-done }, nil
}

// onSignals handles SIGHUP (re-read the site file's rules, and reopen the
// events file after log rotation) and SIGUSR1 (reopen only), until the
// returned func is called. A site file that fails validation changes
// nothing; its errors are logged.
// With path "" (a shared site, read from the bucket) SIGHUP only reopens.
func onSignals(p *pipeline.Pipeline, path string, log *slog.Logger) func() {
	ch := make(chan os.Signal, 1)
	signal.Notify(ch, syscall.SIGHUP, syscall.SIGUSR1)
	done := make(chan struct{})
	go func() {
		for {
			select {
			case <-done:
				return
			case sig := <-ch:
				if err := p.ReopenFiles(); err != nil {
					log.Error("reopening the events file failed", "signal", sig, "err", err)
				} else {
					log.Info("events file reopened", "signal", sig)
				}
				switch {
				case sig == syscall.SIGHUP && path == "":
					log.Info("a shared site changes with tallyd site push, not SIGHUP: nothing to reload", "signal", sig)
				case sig == syscall.SIGHUP:
					reloadSite(p, path, log)
				}
			}
		}
	}()
	return func() { signal.Stop(ch); close(done) }
}

// reloadSite re-reads the site file and puts its rules in force.
func reloadSite(p *pipeline.Pipeline, path string, log *slog.Logger) {
	cfg, err := pipeline.Load(path)
	if err != nil {
		log.Error("site file not reloaded: it has errors; the rules in force are unchanged", "file", path, "err", err)
		return
	}
	rep := p.Reload(cfg)
	log.Info("reload", "file", path, "result", rep.String())
}
