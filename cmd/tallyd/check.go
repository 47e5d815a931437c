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
	if d, ok := rep.Detector.(*onnx.Detector); ok {
		printONNX(stdout, d, cfg.Detector.ONNX)
	}
	for _, r := range cfg.Rules {
		fmt.Fprintf(stdout, "  rule %-16s %-4s on %s\n", r.Name, r.Kind(), r.Source)
	}
	n := cfg.Output.NATS
	out := fmt.Sprintf("embedded NATS server on %s:%d", n.Embedded.Host, n.Embedded.Port)
	if rep.NATS != "" {
		out = fmt.Sprintf("NATS at %s (reached: %s)", rep.NATS, rep.NATSReply)
	}
	fmt.Fprintf(stdout, "  events to %s, subjects %s.%s.<source>.<rule>.<kind>\n", out, n.Prefix, cfg.Site)
	switch {
	case rep.Capacity != nil:
		printCapacity(stdout, *rep.Capacity)
	case rep.CapacityErr != nil:
		fmt.Fprintf(stdout, "  capacity: not measured (%v)\n", rep.CapacityErr)
	}
	return nil
}

// printCapacity prints what each source costs on this machine and how many
// sources like it the machine holds.
func printCapacity(w io.Writer, c pipeline.Capacity) {
	fmt.Fprintf(w, "  capacity on this machine (%d cores, detect workers %d; CPU ms per frame measured just now):\n", c.Cores, c.Workers)
	fmt.Fprintf(w, "    %-14s %-10s %8s %10s %10s %10s %8s\n", "source", "size", "fps", "decode ms", "detect ms", "CPU ms/s", "holds")
	for _, s := range c.Sources {
		dec := fmt.Sprintf("%.2f", s.DecodeMs)
		if !s.DecodeMeasured {
			dec = "?"
		}
		fps := fmt.Sprintf("%.4g", s.FPS)
		if s.DetectFPS != s.FPS {
			fps = fmt.Sprintf("%.4g/%.4g", s.DetectFPS, s.FPS)
		}
		fmt.Fprintf(w, "    %-14s %-10s %8s %10s %10.2f %10.0f %8d\n", s.ID, fmt.Sprintf("%dx%d", s.Width, s.Height),
			fps, dec, s.DetectMs, s.DemandMs, s.Holds)
	}
	verdict := "fits"
	if c.Exceeded() {
		verdict = "EXCEEDS the estimate: expect dropped frames"
	}
	fmt.Fprintf(w, "    all sources need %.0f of %.0f CPU ms/s counted on (%.0f%%): %s\n", c.DemandMs, c.BudgetMs, 100*c.Load(), verdict)
	fmt.Fprintln(w, "    (fps: detected/decoded per second; holds: sources like this one alone; 90% of the CPU counted on)")
}

// printONNX prints what tallyd read from the ONNX model: inputs, outputs, the
// layout chosen, the classes and the engine.
func printONNX(w io.Writer, d *onnx.Detector, o config.ONNX) {
	in, keeps := d.Info(), d.Classes()
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
	if len(keeps) < len(in.Classes) {
		fmt.Fprintf(w, ", keeping %v", keeps)
	}
	fmt.Fprintln(w)
}
