package main

import (
	"context"
	"fmt"
	"io"

	"tallyd/detect/onnx"
	"tallyd/internal/config"
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
	if cfg.Detector.Kind == "onnx" {
		if err := printONNX(stdout, cfg); err != nil {
			return err
		}
	}
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

// printONNX loads the ONNX model once more and prints what tallyd reads from
// it: inputs, outputs, the layout chosen, the classes and the engine.
func printONNX(w io.Writer, cfg *config.Config) error {
	d, err := onnx.New(onnx.FromSite(cfg))
	if err != nil {
		return onnx.SiteError(cfg, err)
	}
	defer d.Close()
	in := d.Info()
	o := cfg.Detector.ONNX
	fmt.Fprintf(w, "    model %s (ONNX IR %d, opset %d)\n", in.Model, in.IRVersion, in.Opset)
	fmt.Fprintf(w, "    engine %s\n", in.Engine)
	for _, t := range in.Inputs {
		fmt.Fprintf(w, "    input  %s\n", t)
	}
	for _, t := range in.Outputs {
		fmt.Fprintf(w, "    output %s\n", t)
	}
	batch := fmt.Sprintf("batch %d", in.Batch)
	if in.Batch == 0 {
		batch = "batch dynamic (the frames of one call share one inference)"
	}
	fmt.Fprintf(w, "    input %dx%d %s, letterbox %s pad %d, %s\n", in.Width, in.Height, o.Channels, o.Letterbox.Place, o.Letterbox.Pad, batch)
	fmt.Fprintf(w, "    layout %s, %d classes (names from %s)", in.Layout, len(in.Classes), in.NamesFrom)
	if len(o.Classes) > 0 {
		fmt.Fprintf(w, ", keeping %v", o.Classes)
	}
	fmt.Fprintln(w)
	return nil
}
