package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"tallyd/capture"
	"tallyd/capture/scene"
	"tallyd/events/bus"
	"tallyd/internal/config"
	"tallyd/internal/fleet"
	"tallyd/internal/pipeline"
)

// A site shared by several daemons lives in the site bucket of the NATS
// cluster: `tallyd site push` checks a site file and stores it there,
// `tallyd run --site NAME` reads it, follows its changes and counts the
// sources the leases give it (internal/fleet).

// brokerFlags are the flags that reach a shared site's NATS server: --nats
// and the sign-in flags.
type brokerFlags struct {
	cmd    string // the command, for the warning about credentials in --nats
	url    *string
	signIn *signInFlags
}

func addBrokerFlags(fs *flags, cmd string) *brokerFlags {
	return &brokerFlags{cmd: cmd,
		url:    fs.String("nats", "", "NATS server(s) of the site, e.g. nats://10.0.0.5:4222 (comma-separated for several)"),
		signIn: addSignInFlags(fs)}
}

// connect connects to the site's server with the flags' credentials.
func (b *brokerFlags) connect(name string, stderr io.Writer, log *slog.Logger) (*nats.Conn, jetstream.JetStream, error) {
	if *b.url == "" {
		return nil, nil, usageErr("--nats URL is required: the NATS server that holds the site bucket")
	}
	opts, err := b.signIn.options(b.cmd, "--nats", *b.url, stderr)
	if err != nil {
		return nil, nil, err
	}
	nc, err := bus.Connect(*b.url, name, log, opts...)
	if err != nil {
		return nil, nil, fmt.Errorf("connect to %s: %w", bus.RedactURL(*b.url), err)
	}
	js, err := jetstream.New(nc)
	if err != nil {
		nc.Close()
		return nil, nil, fmt.Errorf("jetstream: %w", err)
	}
	return nc, js, nil
}

func cmdSite(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	if len(args) > 0 && strings.HasPrefix(args[0], "-") {
		// Flags before the subcommand: --help, or a mistake.
		fs := newFlags("site", "site push -c FILE --nats URL   (check a site file and store it for the site's daemons)\n"+
			"       tallyd site show --site NAME --nats URL   (print the stored site file)", stdout)
		if err := parseFlags(fs, args); err != nil {
			return err
		}
	}
	if len(args) == 0 || (args[0] != "push" && args[0] != "show") {
		return usageErr("want `tallyd site push -c FILE --nats URL` or `tallyd site show --site NAME --nats URL`")
	}
	if args[0] == "show" {
		return siteShow(ctx, args[1:], stdout, stderr)
	}
	fs := newFlags("site push", "site push -c FILE --nats URL", stdout)
	cfgPath := fs.String("c", "", "site file (YAML) to check and store under its site name")
	bf := addBrokerFlags(fs, "site")
	if err := parseFlags(fs, args[1:]); err != nil {
		return err
	}
	if *cfgPath == "" {
		return usageErr("-c FILE is required")
	}
	data, err := os.ReadFile(*cfgPath)
	if err != nil {
		return badFile(fmt.Errorf("site file: %w", err))
	}
	// The same checks as tallyd check (located errors, exit 2), then the
	// rules of a shared site; nothing is stored when either fails.
	cfg, err := loadConfig(*cfgPath)
	if err != nil {
		return err
	}
	if err := config.CheckShared(cfg); err != nil {
		return err
	}
	// A generated scene is planned now (too many walkers for its length
	// would stop every daemon at start).
	var errs config.Errors
	for i, sc := range cfg.Sources {
		if sc.Scene != nil {
			if _, err := scene.New(pipeline.SceneConfig(*sc.Scene)); err != nil {
				errs = append(errs, cfg.Errorf(fmt.Sprintf("sources[%d].scene", i), "%v", err))
			}
		}
	}
	if len(errs) > 0 {
		return errs
	}
	nc, js, err := bf.connect("tallyd-site-push", stderr, nil)
	if err != nil {
		return err
	}
	defer nc.Close()
	cctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	sites, err := fleet.OpenSites(cctx, js, cfg.Output.NATS.JetStream.Replicas)
	if err != nil {
		return err
	}
	rev, err := sites.Push(cctx, cfg.Site, data)
	if err != nil {
		return err
	}
	// The stream and the live-state bucket (with the file's replicas) are
	// made now, not by several daemons starting at once.
	if err := pipeline.PrepareShared(cctx, cfg, js); err != nil {
		return fmt.Errorf("site %s stored (revision %d), but: %w", cfg.Site, rev, err)
	}
	fmt.Fprintf(stdout, "site %s stored in bucket %s, revision %d (%d sources, %d rules, %d areas)\n",
		cfg.Site, fleet.SitesBucket, rev, len(cfg.Sources), len(cfg.Rules), len(cfg.Areas()))
	return nil
}

func siteShow(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("site show", "site show --site NAME --nats URL", stdout)
	site := fs.String("site", "", "site name")
	bf := addBrokerFlags(fs, "site")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *site == "" {
		return usageErr("--site NAME is required")
	}
	nc, js, err := bf.connect("tallyd-site-show", stderr, nil)
	if err != nil {
		return err
	}
	defer nc.Close()
	sites, err := openSites(ctx, js)
	if err != nil {
		return err
	}
	v, err := readSite(ctx, sites, *site, *bf.url)
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "# site %s, revision %d, stored %s\n", *site, v.Revision, v.At.UTC().Format(time.RFC3339))
	_, err = stdout.Write(v.Data)
	return err
}

// openSites opens the site bucket (created when absent).
func openSites(ctx context.Context, js jetstream.JetStream) (*fleet.Sites, error) {
	cctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	return fleet.OpenSites(cctx, js, 0)
}

// readSite reads the current version of a site from the bucket.
func readSite(ctx context.Context, sites *fleet.Sites, site, url string) (fleet.SiteVersion, error) {
	cctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	v, err := sites.Get(cctx, site)
	if errors.Is(err, fleet.ErrNoSite) {
		return v, badFile(fmt.Errorf("site %q is not in bucket %s on %s: store it first with tallyd site push -c FILE --nats URL", site, fleet.SitesBucket, bus.RedactURL(url)))
	}
	return v, err
}

// parseSite checks a stored site file like tallyd check and site push do.
// Paths in it are relative to the working folder; stateDir, when given,
// replaces its state_dir (each daemon keeps its own outbox).
func parseSite(site string, v fleet.SiteVersion, stateDir string) (*config.Config, error) {
	cfg, err := pipeline.Parse(fmt.Sprintf("%s@%d", site, v.Revision), v.Data)
	if err != nil {
		return nil, err
	}
	if cfg.Site != site {
		return nil, badFile(fmt.Errorf("the site file stored as %q names site %q", site, cfg.Site))
	}
	if err := config.CheckShared(cfg); err != nil {
		return nil, err
	}
	if stateDir != "" {
		abs, err := filepath.Abs(stateDir)
		if err != nil {
			return nil, usageErr("--state-dir: %v", err)
		}
		cfg.StateDir = abs
	}
	cfg.HTTP.SaveRules = false // the bucket is the site file: change it with site push
	return cfg, nil
}

// sharedRun are the settings of `tallyd run --site`.
type sharedRun struct {
	site, member, stateDir string
	maxSources             int
	every                  time.Duration
	broker                 *brokerFlags
}

// runShared runs one daemon of a shared site until ctx ends: it reads the
// site from the bucket, counts the sources its leases give it, applies
// each new version of the site (rules at once, anything else by rebuilding
// the pipeline in this process, which hands its sources over cleanly), and
// leaves the site cleanly at the end.
func runShared(ctx context.Context, a sharedRun, stdout, stderr io.Writer) error {
	boot := slog.New(slog.NewTextHandler(stderr, nil))
	nc, js, err := a.broker.connect("tallyd-"+a.site+"-"+a.member, stderr, boot)
	if err != nil {
		return err
	}
	defer nc.Close()
	sites, err := openSites(ctx, js)
	if err != nil {
		return err
	}
	v, err := readSite(ctx, sites, a.site, *a.broker.url)
	if err != nil {
		return err
	}
	cfg, err := parseSite(a.site, v, a.stateDir)
	if err != nil {
		return err
	}
	log := newLogger(cfg, stderr).With("member", a.member)
	wctx, stopWatch := context.WithCancel(ctx)
	defer stopWatch()
	versions, err := sites.Watch(wctx, a.site)
	if err != nil {
		return err
	}
	// A push between the first read and the watch: start from it.
	if cur, err := readSite(ctx, sites, a.site, *a.broker.url); err == nil && cur.Revision > v.Revision {
		if next, err := parseSite(a.site, cur, a.stateDir); err == nil {
			cfg, v = next, cur
		}
	}
	start := time.Now()
	var total pipeline.Summary
	for {
		next, sum, err := runSharedOnce(ctx, a, js, cfg, v.Revision, versions, log)
		total = addSummary(total, sum)
		if err != nil || next == nil {
			printTable(stdout, total, time.Since(start))
			// Stopped by a signal is a normal stop; events lost or a
			// failure are not.
			return outcome(err, total, false)
		}
		cfg, v.Revision = next.cfg, next.rev
	}
}

type siteVersion struct {
	cfg *config.Config
	rev uint64
}

// runSharedOnce runs one pipeline for one version of the site; it returns
// the next version when one needs a rebuild, nil when ctx ended.
func runSharedOnce(ctx context.Context, a sharedRun, js jetstream.JetStream, cfg *config.Config, rev uint64,
	versions <-chan fleet.SiteVersion, log *slog.Logger) (*siteVersion, pipeline.Summary, error) {
	p, err := pipeline.Build(cfg, pipeline.Options{Shared: true, Pace: capture.PaceRealtime, Log: log, StatusEvery: a.every})
	if err != nil {
		return nil, pipeline.Summary{}, err
	}
	defer p.Close()
	capacity := a.maxSources
	if capacity <= 0 {
		if capacity, err = p.HoldCapacity(ctx); err != nil {
			return nil, pipeline.Summary{}, err
		}
		log.Info("capacity estimated from the detector's time at the sources' rates", "max_sources", capacity)
	}
	stopOperator, err := startOperator(cfg, p, "", log)
	if err != nil {
		return nil, pipeline.Summary{}, err
	}
	defer stopOperator()
	runCtx, stopRun := context.WithCancel(context.Background())
	defer stopRun()
	runErr := make(chan error, 1)
	go func() { runErr <- p.Run(runCtx) }()
	areas := cfg.AreaNames()
	// The member lives until Leave, not until ctx: at SIGTERM it must hand
	// its cameras over cleanly (a cancelled member lets its leases expire).
	m, err := fleet.Join(context.WithoutCancel(ctx), js, fleet.Options{Site: cfg.Site, Member: a.member, TTL: cfg.Fleet.LeaseTTL.Duration,
		Capacity: capacity, Sources: p.SharedSources(), Areas: areas, Replicas: cfg.Output.NATS.JetStream.Replicas, Log: log}, p)
	if err != nil {
		stopRun()
		<-runErr
		return nil, p.Summary(), err
	}
	log.Info("running a shared site", "site", cfg.Site, "revision", rev, "sources", len(cfg.Sources), "areas", len(areas),
		"max_sources", capacity, "nats", bus.RedactURL(cfg.Output.NATS.URL))
	// leave hands every source over cleanly, then stops the pipeline.
	leave := func() error {
		lctx, cancel := context.WithTimeout(context.Background(), 15*time.Second)
		defer cancel()
		lerr := m.Leave(lctx)
		if lerr != nil {
			log.Warn("leaving the site was not clean: the leases expire instead", "err", lerr)
		}
		stopRun()
		return <-runErr
	}
	for {
		select {
		case <-ctx.Done():
			err := leave()
			return nil, p.Summary(), err
		case err := <-runErr:
			lctx, cancel := context.WithTimeout(context.Background(), 15*time.Second)
			_ = m.Leave(lctx)
			cancel()
			if err == nil {
				err = errors.New("the pipeline stopped by itself")
			}
			return nil, p.Summary(), err
		case nv, ok := <-versions:
			if !ok {
				versions = nil // the watch ended with ctx
				continue
			}
			if nv.Revision <= rev {
				continue // seen already (a watch restarted after a reconnect)
			}
			next, err := parseSite(a.site, nv, a.stateDir)
			if err != nil {
				log.Error("new site version refused; the daemon keeps the one it runs", "revision", nv.Revision, "err", err)
				continue
			}
			// Rules (and areas' zones) apply at once; anything else
			// rebuilds the pipeline in this process.
			rep := p.Reload(next)
			if len(rep.NotApplied) == 0 {
				log.Info("site version applied", "revision", nv.Revision, "rules", rep.String())
				cfg, rev = next, nv.Revision
				continue
			}
			log.Info("site version changes more than rules: rebuilding (sources are handed over)", "revision", nv.Revision, "sections", rep.NotApplied)
			err = leave()
			return &siteVersion{cfg: next, rev: nv.Revision}, p.Summary(), err
		}
	}
}

// addSummary adds the counts of one pipeline's run to the daemon's.
func addSummary(a, b pipeline.Summary) pipeline.Summary {
	a.FramesRead += b.FramesRead
	a.FramesProcessed += b.FramesProcessed
	a.FramesDropped += b.FramesDropped
	a.Events.Produced += b.Events.Produced
	a.Events.Acked += b.Events.Acked
	a.Events.Pending = b.Events.Pending
	a.Events.Dropped += b.Events.Dropped
	a.Events.Failures += b.Events.Failures
	if a.Rules == nil {
		a.Rules = b.Rules
	}
	return a
}
