package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"time"

	"tallyd/capture"
	"tallyd/internal/config"
	"tallyd/internal/pipeline"
)

// cmdSnapshot draws one frame of a source with its rules, the tracks at that
// moment and the counts so far: the offline form of the HTTP snapshot, for
// recorded files and generated scenes (and a first look at a camera).
func cmdSnapshot(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("snapshot", "snapshot -c FILE --source ID --out frame.png [--at 12s] [--plain]", stdout)
	cfgPath := fs.String("c", "", "site file (YAML)")
	source := fs.String("source", "", "source id (default: the only source)")
	out := fs.String("out", "", "image to write: .png or .jpg")
	at := fs.Duration("at", 0, "source time of the frame (the first frame at or after it); detection and tracking run from the start up to it")
	plain := fs.Bool("plain", false, "the frame alone, without rules, tracks and counts")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	ext := strings.ToLower(filepath.Ext(*out))
	switch {
	case *out == "":
		return usageErr("--out FILE is required (.png or .jpg)")
	case ext != ".png" && ext != ".jpg" && ext != ".jpeg":
		return usageErr("--out: want a .png or .jpg file (found %q)", *out)
	case *at < 0:
		return usageErr("--at: want 0 or more (found %s)", *at)
	}
	if ext == ".jpeg" {
		ext = ".jpg"
	}
	cfg, err := loadConfig(*cfgPath)
	if err != nil {
		return err
	}
	one, err := onlySource(cfg, *source)
	if err != nil {
		return err
	}
	log := newLogger(one, stderr)
	p, err := pipeline.Build(one, pipeline.Options{Pace: capture.PaceMax, Log: log, Offline: true, Until: at})
	if err != nil {
		return err
	}
	defer p.Close()
	if err := p.Run(ctx); err != nil {
		return err
	}
	id := one.Sources[0].ID
	img, err := p.Snapshot(id, ext, *plain)
	if errors.Is(err, pipeline.ErrNoFrame) {
		return fmt.Errorf("%w: source %s delivered no frame", errBadFile, id)
	}
	if err != nil {
		return err
	}
	st := p.Status()[0]
	if st.State == capture.StateEnded && *at > 0 && p.SnapshotTime(id) < *at {
		return fmt.Errorf("%w: source %s ended at %s, before --at %s", errBadFile, id, p.SnapshotTime(id).Round(time.Millisecond), *at)
	}
	if ctx.Err() != nil {
		return fmt.Errorf("%w: stopped before the frame at %s", errIncomplete, *at)
	}
	if err := os.WriteFile(*out, img, 0o644); err != nil {
		return fmt.Errorf("write %s: %w", *out, err)
	}
	fmt.Fprintf(stdout, "%s: source %s at %s (frame %d)\n", *out, id, p.SnapshotTime(id).Round(time.Millisecond), p.SnapshotFrame(id))
	return nil
}

// onlySource is the site file cut down to one source and its rules.
func onlySource(cfg *config.Config, id string) (*config.Config, error) {
	if id == "" {
		if len(cfg.Sources) != 1 {
			ids := make([]string, len(cfg.Sources))
			for i, s := range cfg.Sources {
				ids[i] = s.ID
			}
			return nil, usageErr("--source: the site has %d sources; name one of %s", len(cfg.Sources), strings.Join(ids, ", "))
		}
		id = cfg.Sources[0].ID
	}
	one := *cfg
	one.Sources, one.Rules = nil, nil
	for _, s := range cfg.Sources {
		if s.ID == id {
			one.Sources = append(one.Sources, s)
		}
	}
	if len(one.Sources) == 0 {
		return nil, usageErr("--source: no source %q in %s", id, cfg.File)
	}
	for _, r := range cfg.Rules {
		if r.Source == id {
			one.Rules = append(one.Rules, r)
		}
	}
	return &one, nil
}
