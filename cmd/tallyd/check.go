package main

import (
	"context"
	"fmt"
	"io"

	"tallyd/internal/pipeline"
)

func cmdCheck(_ context.Context, args []string, stdout, _ io.Writer) error {
	fs := newFlags("check", "check -c FILE", stdout)
	cfgPath := fs.String("c", "", "site file (YAML)")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	cfg, err := loadConfig(*cfgPath)
	if err != nil {
		return err
	}
	rep, err := pipeline.Check(cfg)
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "site %s: %s is valid\n", cfg.Site, cfg.File)
	for _, s := range rep.Sources {
		fmt.Fprintf(stdout, "  source %-14s %-6s %dx%d %.2f fps", s.ID, s.Kind, s.Info.Width, s.Info.Height, s.Info.FPS)
		if s.Info.Frames > 0 {
			fmt.Fprintf(stdout, " %d frames", s.Info.Frames)
		}
		fmt.Fprintln(stdout)
	}
	fmt.Fprintf(stdout, "  detector %s, tracker %s\n", cfg.Detector.Kind, cfg.Tracker.Kind)
	for _, r := range cfg.Rules {
		fmt.Fprintf(stdout, "  rule %-16s %-4s on %s\n", r.Name, r.Kind(), r.Source)
	}
	out := "embedded NATS server on " + fmt.Sprintf("%s:%d", cfg.Output.NATS.Embedded.Host, cfg.Output.NATS.Embedded.Port)
	if cfg.Output.NATS.URL != "" {
		out = "NATS at " + rep.NATS
	}
	fmt.Fprintf(stdout, "  events to %s, subjects %s.%s.<source>.<rule>.<kind>\n", out, cfg.Output.NATS.Prefix, cfg.Site)
	return nil
}
